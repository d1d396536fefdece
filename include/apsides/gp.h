// Gaussian-process noise: the engines behind a "GP noise term" of the velocity likelihood.
// Kernels and their parameters are in gp_kernels.h. Three solvers, one set of operations:
//
//   SemiseparableGP  semiseparable ("celerite") kernels, O(N J^2) factor, O(N J) solve:
//                    Foreman-Mackey, Agol, Ambikasaran & Angus 2017, AJ 154, 220.
//                    Requires the times sorted (non-decreasing). Meant for any N.
//   DenseGP          any stationary kernel (the quasi-periodic kernel of Haywood et al.
//                    2014), dense Cholesky (Eigen LLT): O(N^3) factor, O(N^2) memory and
//                    solve. Meant for N <~ 1000 (N = 1000: ~20-30 ms a factorization).
//   MultiSeriesGP    velocities and activity indicators driven by one latent process G
//                    (Rajpaul et al. 2015, MNRAS 452, 2269): series_k = c_k G + d_k dG/dt,
//                    dense, meant for N <~ 500 points per series.
//
// The covariance of the N data points (times t_i in days, m/s for velocities):
//     K_ij = s_i s_j k(t_i - t_j) + delta_ij v_i
// with v_i = sigma_i^2 + jitter_i^2 the white variance of point i (stated uncertainty
// squared plus its instrument's jitter squared, > 0; the caller builds this vector) and
// s_i an optional per-point amplitude (a per-instrument GP amplitude: K stays
// semiseparable; empty = all 1, dimensionless, >= 0).
//
// Operations, each on residuals r = data - deterministic model (planets, offsets, trend):
//   compute(kernel, t, v, s)  factor K ("" or a message: sizes, order, non-finite,
//                             not positive definite). Reuses its buffers: one object per
//                             thread is the workspace; after the first call of a given N
//                             no further allocation. Const operations are thread-safe.
//   log_likelihood(r)         -1/2 r^T K^-1 r - 1/2 ln|K| - N/2 ln(2 pi)
//   log_determinant()         ln|K|
//   solve(B, X, m)            X = K^-1 B for m right-hand sides (column-major N x m)
//   least_squares(A, y)       generalised least squares for linear parameters (offsets,
//                             trend): beta = (A^T K^-1 A)^-1 A^T K^-1 y, its covariance,
//                             ln|A^T K^-1 A| (to integrate the linear parameters out:
//                             under flat priors, ln int L dbeta = ln L(beta_hat) +
//                             M/2 ln(2 pi) - 1/2 ln|A^T K^-1 A|)
//   predict(r, t*, s*)        conditional mean and standard deviation of the GP part
//                             s* G(t*) given r, at any times (the activity prediction)
//   draw(z, out)              out = L z, z standard normal draws, L L^T = K: a sample of
//                             the GP plus white noise v at the factored times
#pragma once

#include <cstddef>
#include <functional>
#include <limits>
#include <memory>
#include <span>
#include <string>
#include <vector>

#include "apsides/gp_kernels.h"

namespace apsides::gp {

// Conditional distribution of the GP part at chosen times.
struct Prediction {
  std::vector<double> mean;  // E[s* G(t*) | r], same unit as r
  std::vector<double> sd;    // sqrt(Var[s* G(t*) | r]); empty when not asked for
};

// Generalised least squares for M linear parameters: y = A beta + GP noise.
struct LinearSolution {
  std::vector<double> coefficients;  // beta_hat (M)
  std::vector<double> covariance;    // (A^T K^-1 A)^-1, M x M, row-major
  double log_det_normal = std::numeric_limits<double>::quiet_NaN();  // ln|A^T K^-1 A|
  double chi_square = std::numeric_limits<double>::quiet_NaN();      // r^T K^-1 r at beta_hat
  std::string message = "least squares was not run.";  // "" on success
};

// ---------------------------------------------------------------------------------------
// Semiseparable GP (Foreman-Mackey et al. 2017, section 5).
//
// K = diag(A) + tril(U P V^T) + triu(...)^T with, for each term's column k at time t_n,
// preconditioned generators (times measured from the first point, t~_n = t_n - t_0):
//   kReal      U = a s_n,                          V = s_n
//   kComplex   U = s_n (a cos d t~ + b sin d t~),  V = s_n cos d t~    (column 1)
//              U = s_n (a sin d t~ - b cos d t~),  V = s_n sin d t~    (column 2)
//   kCritical  U = s_n (a + b t~), V = s_n (column 1);  U = s_n b, V = -s_n t~ (column 2)
// and phi_{n,k} = exp(-c_k (t_n - t_{n-1})) (the paper's pre-conditioned, stable form).
// The factor K = L D L^T, L = I + tril(U W^T, phi), is the recursion of the paper's
// section 5 (equation numbers not quoted: cited from memory elsewhere):
//   S_n = diag(phi_n) [S_{n-1} + D_{n-1} W_{n-1} W_{n-1}^T] diag(phi_n),  S_1 = 0,
//   D_n = A_n - U_n^T S_n U_n,   W_n = (V_n - S_n U_n) / D_n,
// O(N J^2). Solves, products, predictions and draws are O(N J) sweeps.
// Times must be sorted non-decreasing (equal times allowed); width J <= kMaxWidth.
class SemiseparableGP {
 public:
  static constexpr int kMaxWidth = 16;

  std::string compute(const SemiseparableKernel& kernel, std::span<const double> t_days,
                      std::span<const double> variance, std::span<const double> scale = {});
  // compute() and log_likelihood() in one pass (the forward sweep interleaved with the
  // factorization): the likelihood call of a sampler. Returns -inf and sets *message
  // when compute() would fail. Leaves the object as compute() does.
  double compute_log_likelihood(const SemiseparableKernel& kernel, std::span<const double> t_days,
                                std::span<const double> variance, std::span<const double> residuals,
                                std::span<const double> scale = {}, std::string* message = nullptr);
  bool computed() const { return computed_; }
  std::size_t size() const { return n_; }
  int width() const { return j_; }

  double log_determinant() const { return log_det_; }
  // -1/2 r^T K^-1 r - 1/2 ln|K| - N/2 ln 2 pi: one forward sweep, no allocation.
  double log_likelihood(std::span<const double> residuals) const;
  // x = K^-1 b; b and x column-major N x n_rhs (may be the same array).
  void solve(std::span<const double> b, std::span<double> x, std::size_t n_rhs = 1) const;
  // y = K x (the factored K, white variance included), O(N J).
  void multiply(std::span<const double> x, std::span<double> y, std::size_t n_rhs = 1) const;
  // out = L D^(1/2) z: with z ~ N(0, I), out ~ N(0, K). For the activity signal alone
  // (no white noise), compute() with a tiny variance (e.g. 1e-10 k(0)) first.
  void draw(std::span<const double> standard_normals, std::span<double> out) const;
  // Conditional mean of s* G(t*) in O((N + M) J) (one sweep each way over the merged
  // times); with_sd adds the standard deviation, O(N J) per requested time (a forward
  // sweep of the cross-covariance: Var = s*^2 k(0) - |D^-1/2 L^-1 k*|^2).
  // t_star in any order; scale_star empty (= 1) or one amplitude per requested time.
  Prediction predict(std::span<const double> residuals, std::span<const double> t_star,
                     bool with_sd = true, std::span<const double> scale_star = {}) const;
  // A column-major N x M.
  LinearSolution least_squares(std::span<const double> design, std::size_t n_columns,
                               std::span<const double> y) const;

 private:
  template <int kJ>
  bool factor(std::size_t& bad_index, const double* r, double* quad);
  std::string compute_impl(const SemiseparableKernel& kernel, std::span<const double> t_days,
                           std::span<const double> variance, std::span<const double> scale,
                           const double* residuals, double* quad);

  bool computed_ = false;
  std::size_t n_ = 0;
  int j_ = 0;
  SemiseparableKernel kernel_;
  double log_det_ = 0.0;
  double k0_ = 0.0;     // k(0) of the kernel
  double t0_ = 0.0;     // time origin of the generators
  // Generators of column k at one time (prediction at arbitrary times).
  void generators_at(double t_days, double scale, double* u, double* v) const;
  template <int kJ>
  double forward_quadratic(const double* r) const;
  template <int kJ>
  void solve_one(const double* b, double* x) const;

  std::vector<double> t_, scale_, diag_;  // N: times, amplitudes s_n, A_n
  std::vector<double> u_, v_, w_, phi_;   // N x J, row-major (point by point)
  std::vector<double> d_;                 // N pivots
  std::vector<double> c_;                 // J decay rates (per column)
  std::vector<double> tmp1_, tmp2_, tmp3_;  // N scratch for the generators
};

// ---------------------------------------------------------------------------------------
// Dense GP: any stationary kernel k(tau) (QuasiPeriodicKernel in particular), Eigen LLT.
// O(N^3 / 3) to factor, O(N^2) memory; N <~ 1000. Times in any order.
class DenseGP {
 public:
  using Covariance = std::function<double(double tau_days)>;

  DenseGP();
  ~DenseGP();
  DenseGP(const DenseGP& other);
  DenseGP& operator=(const DenseGP& other);
  DenseGP(DenseGP&&) noexcept;
  DenseGP& operator=(DenseGP&&) noexcept;

  std::string compute(const QuasiPeriodicKernel& kernel, std::span<const double> t_days,
                      std::span<const double> variance, std::span<const double> scale = {});
  std::string compute(const Covariance& kernel, std::span<const double> t_days,
                      std::span<const double> variance, std::span<const double> scale = {});
  bool computed() const;
  std::size_t size() const;

  double log_determinant() const;
  double log_likelihood(std::span<const double> residuals) const;
  void solve(std::span<const double> b, std::span<double> x, std::size_t n_rhs = 1) const;
  void draw(std::span<const double> standard_normals, std::span<double> out) const;
  // Dense formulas: mean = k*^T K^-1 r, var = s*^2 k(0) - k*^T K^-1 k*; O(N M + N^2 M).
  Prediction predict(std::span<const double> residuals, std::span<const double> t_star,
                     bool with_sd = true, std::span<const double> scale_star = {}) const;
  LinearSolution least_squares(std::span<const double> design, std::size_t n_columns,
                               std::span<const double> y) const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

// ---------------------------------------------------------------------------------------
// Multi-dimensional GP (Rajpaul et al. 2015, MNRAS 452, 2269, section 3).
//
// One latent process G with unit-variance quasi-periodic covariance gamma(tau)
// (LatentQuasiPeriodic). Series k (velocities, then each indicator) is
//     X_k(t) = alpha_k G(t) + beta_k dG/dt(t)   + white noise v_k,i,
// velocities: alpha = the paper's V_c (m/s), beta = V_r (m/s x d);
// indicator k: alpha = c_k (its unit), beta = d_k (optional, often 0).
// With tau = t - t', cov(G, G) = gamma, cov(dG(t), G(t')) = gamma'(tau),
// cov(G(t), dG(t')) = -gamma'(tau), cov(dG(t), dG(t')) = -gamma''(tau), so
//     cov(X_k(t), X_l(t')) = alpha_k alpha_l gamma + (beta_k alpha_l - alpha_k beta_l) gamma'
//                            - beta_k beta_l gamma''.
// The joint covariance of all series is factored densely (Eigen LLT), O((sum N_k)^3).
// Residual vectors are the series concatenated in the order given to compute().
struct SeriesInput {
  std::span<const double> t_days;
  std::span<const double> variance;     // white variance per point, (series unit)^2, > 0
  double value_coefficient = 1.0;       // alpha_k, series unit
  double derivative_coefficient = 0.0;  // beta_k, series unit x day
};

class MultiSeriesGP {
 public:
  MultiSeriesGP();
  ~MultiSeriesGP();
  MultiSeriesGP(const MultiSeriesGP& other);
  MultiSeriesGP& operator=(const MultiSeriesGP& other);
  MultiSeriesGP(MultiSeriesGP&&) noexcept;
  MultiSeriesGP& operator=(MultiSeriesGP&&) noexcept;

  std::string compute(const LatentQuasiPeriodic& latent, std::span<const SeriesInput> series);
  bool computed() const;
  std::size_t size() const;                  // total points
  std::size_t series_count() const;
  std::size_t series_offset(std::size_t k) const;  // first index of series k

  // Covariance of series k at t with series l at t' (the formula above).
  double covariance(std::size_t k, double t, std::size_t l, double t_prime) const;
  double log_determinant() const;
  double log_likelihood(std::span<const double> residuals) const;
  void solve(std::span<const double> b, std::span<double> x, std::size_t n_rhs = 1) const;
  void draw(std::span<const double> standard_normals, std::span<double> out) const;
  // Conditional mean (and sd) of series k's GP part alpha_k G + beta_k G' at t_star.
  Prediction predict(std::span<const double> residuals, std::size_t series,
                     std::span<const double> t_star, bool with_sd = true) const;
  LinearSolution least_squares(std::span<const double> design, std::size_t n_columns,
                               std::span<const double> y) const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace apsides::gp
