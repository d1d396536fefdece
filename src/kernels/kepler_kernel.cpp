// Vectorisable Kepler solver. Compiled with APSIDES_KERNEL_FLAGS (see
// cmake/apsides_flags.cmake); accuracy is proved in tests/kepler_test.cpp.
#include <cmath>

#include "kernels.h"

namespace apsides::kernels {
namespace {
constexpr double kPi = 3.14159265358979323846;
constexpr double kTwoPi = 6.28318530717958647692;

// Markley (1995, Celest. Mech. 63, 101) starter and fifth-order correction, on a
// mean anomaly reduced to [0, pi]; branch-free so the loop vectorises.
inline double markley(double M, double e) {
  const double pi2 = kPi * kPi;
  const double alpha = (3.0 * pi2 + 1.6 * kPi * (kPi - M) / (1.0 + e)) / (pi2 - 6.0);
  const double d = 3.0 * (1.0 - e) + alpha * e;
  const double q = 2.0 * alpha * d * (1.0 - e) - M * M;
  const double r = 3.0 * alpha * d * (d - 1.0 + e) * M + M * M * M;
  const double w = std::cbrt(std::fabs(r) + std::sqrt(q * q * q + r * r));
  const double w2 = w * w;
  double E = (2.0 * r * w2 / (w2 * w2 + w2 * q + q * q) + M) / d;
  // Fifth-order correction (Markley Eq. 29-33).
  const double s = e * std::sin(E), c = e * std::cos(E);
  const double f0 = E - s - M, f1 = 1.0 - c, f2 = s, f3 = c, f4 = -s;
  const double d3 = -f0 / (f1 - 0.5 * f0 * f2 / f1);
  const double d4 = -f0 / (f1 + 0.5 * d3 * f2 + d3 * d3 * f3 / 6.0);
  const double d5 = -f0 / (f1 + 0.5 * d4 * f2 + d4 * d4 * f3 / 6.0 + d4 * d4 * d4 * f4 / 24.0);
  E += d5;
  // One Newton step polishes the last bits near e -> 1.
  const double f = E - e * std::sin(E) - M;
  E -= f / (1.0 - e * std::cos(E));
  return E;
}

inline double reduce(double M) {
  double m = M - kTwoPi * std::floor(M / kTwoPi);
  return m;
}
}  // namespace

void kepler_sincos(const double* M, std::size_t n, double e, double* sin_E, double* cos_E) {
  for (std::size_t i = 0; i < n; ++i) {
    const double m = reduce(M[i]);
    const double flip = m > kPi ? -1.0 : 1.0;
    const double mh = m > kPi ? kTwoPi - m : m;
    const double E = markley(mh, e);
    sin_E[i] = flip * std::sin(E);
    cos_E[i] = std::cos(E);
  }
}

void kepler_batch(const double* M, const double* e, std::size_t n, double* E) {
  for (std::size_t i = 0; i < n; ++i) {
    const double m = reduce(M[i]);
    const bool up = m > kPi;
    const double mh = up ? kTwoPi - m : m;
    const double Eh = markley(mh, e[i]);
    E[i] = up ? kTwoPi - Eh : Eh;
  }
}

}  // namespace apsides::kernels
