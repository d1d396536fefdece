#include "apsides/kepler.h"

#include <cassert>
#include <cmath>

#include "apsides/constants.h"
#include "kernels/kernels.h"

namespace apsides {
using constants::kPi;
using constants::kTwoPi;

double solve_kepler(double mean_anomaly, double ecc) {
  assert(ecc >= 0.0 && ecc < 1.0);
  double M = std::fmod(mean_anomaly, kTwoPi);
  if (M < 0.0) M += kTwoPi;
  // Solve on [0, pi] and use E(2 pi - M) = 2 pi - E(M).
  const bool flip = M > kPi;
  if (flip) M = kTwoPi - M;
  if (ecc == 0.0 || M == 0.0) return flip ? kTwoPi - M : M;
  // E - M = e sin E lies in [0, e] on this half: a bracket that Newton may never leave.
  double lo = M, hi = std::fmin(M + ecc, kPi);
  // Starter: series for small e, cube root near periastron for e -> 1.
  double E = (ecc < 0.8) ? M + ecc * std::sin(M) : std::fmin(std::cbrt(6.0 * M), M + ecc);
  if (E < lo || E > hi) E = 0.5 * (lo + hi);
  for (int it = 0; it < 100; ++it) {
    const double s = std::sin(E), c = std::cos(E);
    const double f = E - ecc * s - M;
    if (f > 0.0) hi = E; else lo = E;
    const double fp = 1.0 - ecc * c;
    const double fpp = ecc * s;
    // Halley step; fall back to bisection if it leaves the bracket.
    double step = f / fp;
    step = f / (fp - 0.5 * step * fpp);
    double En = E - step;
    if (!(En > lo && En < hi)) En = 0.5 * (lo + hi);
    if (std::fabs(En - E) <= 1e-15 * (1.0 + std::fabs(E)) || hi - lo <= 4e-16) {
      E = En;
      break;
    }
    E = En;
  }
  return flip ? kTwoPi - E : E;
}

double true_anomaly_from_eccentric(double E, double ecc) {
  // tan(nu/2) = sqrt((1+e)/(1-e)) tan(E/2), written with atan2 to keep the quadrant.
  const double beta = std::sqrt((1.0 + ecc) / (1.0 - ecc));
  return 2.0 * std::atan2(beta * std::sin(0.5 * E), std::cos(0.5 * E));
}

double eccentric_from_true_anomaly(double nu, double ecc) {
  const double beta = std::sqrt((1.0 - ecc) / (1.0 + ecc));
  return 2.0 * std::atan2(beta * std::sin(0.5 * nu), std::cos(0.5 * nu));
}

void solve_kepler_sincos(std::span<const double> mean_anomaly, double ecc,
                         std::span<double> sin_E, std::span<double> cos_E) {
  assert(sin_E.size() == mean_anomaly.size() && cos_E.size() == mean_anomaly.size());
  kernels::kepler_sincos(mean_anomaly.data(), mean_anomaly.size(), ecc, sin_E.data(), cos_E.data());
}

void solve_kepler_batch(std::span<const double> mean_anomaly, std::span<const double> ecc,
                        std::span<double> eccentric_anomaly) {
  assert(ecc.size() == mean_anomaly.size() && eccentric_anomaly.size() == mean_anomaly.size());
  kernels::kepler_batch(mean_anomaly.data(), ecc.data(), mean_anomaly.size(), eccentric_anomaly.data());
}

}  // namespace apsides
