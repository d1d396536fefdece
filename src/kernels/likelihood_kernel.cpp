// Velocity and likelihood kernels. Compiled with APSIDES_KERNEL_FLAGS (vector sin, cos,
// cbrt and log from glibc's libmvec); accuracy against the scalar reference is proved in
// tests/keplerian_model_test.cpp.
#include <algorithm>
#include <cmath>

#include "kepler_core.h"
#include "kernels.h"

namespace apsides::kernels {
namespace {
constexpr double kLn2Pi = 1.83787706640934548356;

// Coefficients of v = (A (cos E - e) - B sin E) / (1 - e cos E) + C, which is
// K [cos(nu + w) + e cos w] with cos nu = (cos E - e)/(1 - e cos E) and
// sin nu = sqrt(1 - e^2) sin E / (1 - e cos E): one division per point, no true anomaly.
struct Prepared {
  double n, M0, e, A, B, C;
};

Prepared prepare(const KeplerTerm& p) {
  const double cw = std::cos(p.omega_rad), sw = std::sin(p.omega_rad);
  const double K = p.semi_amplitude_m_s, e = p.ecc;
  return {p.mean_motion_rad_per_day,
          p.mean_anomaly_at_zero,
          e,
          K * cw,
          K * std::sqrt((1.0 - e) * (1.0 + e)) * sw,
          K * e * cw};
}

// out[i] += sign * v_i for one planet, a block of kBlock points at a time.
void accumulate(const double* __restrict t, std::size_t n, const Prepared& p, double sign,
                double* __restrict out, detail::KeplerBlock& b) {
  const double e = p.e, A = sign * p.A, B = sign * p.B, C = sign * p.C;
  for (std::size_t start = 0; start < n; start += detail::kBlock) {
    const std::size_t nb = std::min(detail::kBlock, n - start);
    const double* __restrict tb = t + start;
    double* __restrict ob = out + start;
    for (std::size_t i = 0; i < nb; ++i) b.m[i] = detail::reduce_symmetric(p.n * tb[i] + p.M0);
    detail::solve_block<false>(b, &e, nb, [&](std::size_t i, double, double sE, double cE) {
      ob[i] += (A * (cE - e) - B * sE) / (1.0 - e * cE) + C;
    });
  }
}
}  // namespace

void add_keplerians(const double* t, std::size_t n, const KeplerTerm* planets, int n_planets,
                    double* out) {
  detail::KeplerBlock b;
  for (int k = 0; k < n_planets; ++k) accumulate(t, n, prepare(planets[k]), 1.0, out, b);
}

double block_lnlike(const double* __restrict t, const double* __restrict y,
                    const double* __restrict sigma2, std::size_t n, const KeplerTerm* planets,
                    int n_planets, double offset, double jitter2, double c1, double c2,
                    double* __restrict scratch) {
  double* __restrict r = scratch;
  for (std::size_t i = 0; i < n; ++i) r[i] = y[i] - offset - (c1 + c2 * t[i]) * t[i];
  detail::KeplerBlock b;
  for (int k = 0; k < n_planets; ++k) accumulate(t, n, prepare(planets[k]), -1.0, r, b);
  double chi2 = 0.0, logdet = 0.0;
  for (std::size_t i = 0; i < n; ++i) {
    const double var = sigma2[i] + jitter2;
    chi2 += r[i] * r[i] / var;
    logdet += std::log(var);
  }
  return -0.5 * (chi2 + logdet + static_cast<double>(n) * kLn2Pi);
}

OffsetFreeFit block_offset_fit(const double* __restrict t, const double* __restrict y,
                               const double* __restrict sigma2, std::size_t n, const KeplerTerm* planets,
                               int n_planets, double jitter2, double c1, double c2, double* __restrict scratch) {
  double* __restrict r = scratch;
  for (std::size_t i = 0; i < n; ++i) r[i] = y[i] - (c1 + c2 * t[i]) * t[i];
  detail::KeplerBlock b;
  for (int k = 0; k < n_planets; ++k) accumulate(t, n, prepare(planets[k]), -1.0, r, b);
  OffsetFreeFit f;
  double sr = 0.0;
  for (std::size_t i = 0; i < n; ++i) {
    const double var = sigma2[i] + jitter2;
    f.sum_inverse_variance += 1.0 / var;
    sr += r[i] / var;
    f.log_det += std::log(var);
  }
  f.offset = sr / f.sum_inverse_variance;
  // Second pass about the best offset: no cancellation however large the offset is.
  for (std::size_t i = 0; i < n; ++i) {
    const double d = r[i] - f.offset;
    f.chi2_min += d * d / (sigma2[i] + jitter2);
  }
  return f;
}

}  // namespace apsides::kernels
