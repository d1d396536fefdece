// Internal: the numerical kernels. Each is compiled once per SIMD instruction set with
// Google Highway and dispatched at run time to the best one the CPU runs (or the one
// APSIDES_SIMD_TARGET names; see simd.h). Each has a plain scalar reference elsewhere and
// a test that holds them together under every target.
#pragma once

#include <cstddef>

namespace apsides::kernels {

// sin E and cos E solving M[i] = E - e sin E, one e for all points, any real M.
// Output arrays must not overlap the input or each other.
void kepler_sincos(const double* M, std::size_t n, double e, double* sin_E, double* cos_E);
// E in [0, 2 pi) for per-point (M, e). E must not overlap M or e.
void kepler_batch(const double* M, const double* e, std::size_t n, double* E);
// s[i] = sin x[i], c[i] = cos x[i] through a vector math library (SLEEF's sincos on x86,
// Highway's Sin and Cos elsewhere; |x| < 39000 for the latter): the cost of one
// vectorised sin+cos pair, the yardstick of the Kepler benchmark.
void sincos_batch(const double* x, std::size_t n, double* s, double* c);

// One planet's velocity term in the form the kernels use: mean anomaly
// M_i = mean_motion t_i + M0 (rad), and v = K [cos(nu + w) + e cos w].
struct KeplerTerm {
  double mean_motion_rad_per_day = 0.0;  // 2 pi / P
  double mean_anomaly_at_zero = 0.0;     // M at t = 0 (rad)
  double semi_amplitude_m_s = 0.0;
  double ecc = 0.0;
  double omega_rad = 0.0;
};

// out[i] += sum over planets of K [cos(nu_i + w) + e cos w] at times t[i].
// `out` must not overlap `t`.
void add_keplerians(const double* t, std::size_t n, const KeplerTerm* planets, int n_planets,
                    double* out);

// Gaussian log-likelihood of one instrument's block of points:
//   r_i = y_i - offset - (c1 + c2 t_i) t_i - sum_planets v(t_i),
//   var_i = sigma2_i + jitter2,
//   returns -1/2 sum [ r_i^2 / var_i + ln(2 pi var_i) ].
// `scratch` holds at least n doubles and must not overlap the inputs.
double block_lnlike(const double* t, const double* y, const double* sigma2, std::size_t n,
                    const KeplerTerm* planets, int n_planets, double offset, double jitter2,
                    double c1, double c2, double* scratch);

// The same block with its offset left free: the best (weighted-mean) offset, the
// chi-square there, sum 1/var_i and sum ln var_i. With them the likelihood at any offset g
// is -1/2 [chi2_min + S (g - offset)^2 + log_det + n ln 2 pi], S = sum_inverse_variance,
// which is what integrating the offset out analytically needs.
struct OffsetFreeFit {
  double offset = 0.0, chi2_min = 0.0, sum_inverse_variance = 0.0, log_det = 0.0;
};
OffsetFreeFit block_offset_fit(const double* t, const double* y, const double* sigma2, std::size_t n,
                               const KeplerTerm* planets, int n_planets, double jitter2, double c1, double c2,
                               double* scratch);

}  // namespace apsides::kernels
