// Velocity and likelihood kernels. Compiled with APSIDES_KERNEL_FLAGS; accuracy against
// the scalar reference is proved in tests/keplerian_model_test.cpp.
#include <cmath>

#include "kernels.h"

namespace apsides::kernels {
namespace {
constexpr double kTwoPi = 6.28318530717958647692;
constexpr double kLn2Pi = 1.83787706640934548356;
}  // namespace

void add_keplerian(const double* t, std::size_t n, double period, double K, double e,
                   double omega, double M0, double* out, double* scratch) {
  double* sinE = scratch;
  double* cosE = scratch + n;
  const double nmean = kTwoPi / period;
  // Mean anomalies first (into cosE as temporary), then solve in one vector pass.
  for (std::size_t i = 0; i < n; ++i) cosE[i] = nmean * t[i] + M0;
  kepler_sincos(cosE, n, e, sinE, cosE);
  const double cw = std::cos(omega), sw = std::sin(omega);
  const double rt = std::sqrt(1.0 - e * e);
  const double ecw = e * cw;
  for (std::size_t i = 0; i < n; ++i) {
    // cos nu = (cos E - e)/(1 - e cos E), sin nu = sqrt(1-e^2) sin E/(1 - e cos E)
    const double inv = 1.0 / (1.0 - e * cosE[i]);
    const double cn = (cosE[i] - e) * inv;
    const double sn = rt * sinE[i] * inv;
    out[i] += K * (cn * cw - sn * sw + ecw);
  }
}

double gaussian_lnlike(const double* r, const double* var, std::size_t n) {
  double chi2 = 0.0, logdet = 0.0;
  for (std::size_t i = 0; i < n; ++i) {
    chi2 += r[i] * r[i] / var[i];
    logdet += std::log(var[i]);
  }
  return -0.5 * (chi2 + logdet + static_cast<double>(n) * kLn2Pi);
}

}  // namespace apsides::kernels
