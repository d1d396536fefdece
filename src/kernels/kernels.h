// Internal: the numerical kernels, compiled with the flags of APSIDES_KERNEL_FLAGS
// (fast-math, vector math library) and nothing else. Each has a plain scalar
// reference elsewhere and a test that holds them together.
#pragma once

#include <cstddef>

namespace apsides::kernels {

// sin E and cos E solving M[i] = E - e sin E, one e for all points, any real M.
void kepler_sincos(const double* M, std::size_t n, double e, double* sin_E, double* cos_E);
// E in [0, 2 pi) for per-point (M, e).
void kepler_batch(const double* M, const double* e, std::size_t n, double* E);

// out[i] += K [cos(nu_i + w) + e cos w] for t[i], one planet given by
// (period, K, e, omega, mean anomaly at t = 0 `M0`): M_i = 2 pi t_i / P + M0.
// `scratch` holds at least 2 n doubles.
void add_keplerian(const double* t, std::size_t n, double period, double K, double e,
                   double omega, double M0, double* out, double* scratch);

// Gaussian log-likelihood of residuals r given variances var (sigma^2 + jitter^2):
//   -1/2 sum [ r^2 / var + ln(2 pi var) ].
double gaussian_lnlike(const double* r, const double* var, std::size_t n);

}  // namespace apsides::kernels
