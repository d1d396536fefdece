// Dense Gaussian processes: DenseGP (any stationary kernel; the quasi-periodic kernel of
// Haywood et al. 2014) and MultiSeriesGP (Rajpaul et al. 2015), both on Eigen's LLT,
// and the pieces all three solvers share (input checks, generalised least squares).
#include <algorithm>
#include <cassert>
#include <cmath>
#include <string>

#include "apsides/gp.h"
#include "noise/dense_internal.h"

namespace apsides::gp {
namespace detail {
namespace {
constexpr double kLog2Pi = 1.8378770664093453;
}

std::string check_points(std::span<const double> t, std::span<const double> variance,
                         std::span<const double> scale, bool sorted) {
  const std::size_t n = t.size();
  if (variance.size() != n)
    return "GP inputs: " + std::to_string(n) + " times but " + std::to_string(variance.size()) +
           " variances";
  if (!scale.empty() && scale.size() != n)
    return "GP inputs: " + std::to_string(n) + " times but " + std::to_string(scale.size()) +
           " amplitudes";
  for (std::size_t i = 0; i < n; ++i) {
    if (!std::isfinite(t[i])) return "GP inputs: time " + std::to_string(i) + " is not finite";
    if (!std::isfinite(variance[i]) || variance[i] < 0.0)
      return "GP inputs: variance " + std::to_string(i) + " = " + std::to_string(variance[i]) +
             ": must be finite and >= 0";
    if (!scale.empty() && (!std::isfinite(scale[i]) || scale[i] < 0.0))
      return "GP inputs: amplitude " + std::to_string(i) + " = " + std::to_string(scale[i]) +
             ": must be finite and >= 0";
    if (sorted && i > 0 && t[i] < t[i - 1])
      return "GP inputs: times must be sorted (time " + std::to_string(i) + " = " +
             std::to_string(t[i]) + " d comes before " + std::to_string(t[i - 1]) + " d)";
  }
  return "";
}

LinearSolution generalised_least_squares(std::size_t n, std::span<const double> design,
                                         std::size_t m, std::span<const double> y,
                                         const SolveFn& solve) {
  LinearSolution out;
  if (design.size() != n * m || y.size() != n || m == 0) {
    out.message = "least squares: design must be " + std::to_string(n) + " x m (m >= 1) and y of size " +
                  std::to_string(n);
    return out;
  }
  using Eigen::Map;
  using Eigen::MatrixXd;
  using Eigen::VectorXd;
  const Map<const MatrixXd> A(design.data(), static_cast<long>(n), static_cast<long>(m));
  const Map<const VectorXd> yv(y.data(), static_cast<long>(n));
  MatrixXd KiA(static_cast<long>(n), static_cast<long>(m));
  VectorXd Kiy(static_cast<long>(n));
  solve(design, std::span<double>(KiA.data(), n * m), m);
  solve(y, std::span<double>(Kiy.data(), n), 1);
  const MatrixXd normal = A.transpose() * KiA;
  const VectorXd rhs = A.transpose() * Kiy;
  const Eigen::LLT<MatrixXd> llt(normal);
  if (llt.info() != Eigen::Success) {
    out.message = "least squares: A^T K^-1 A is not positive definite (columns of the design are degenerate)";
    return out;
  }
  const VectorXd beta = llt.solve(rhs);
  const MatrixXd cov = llt.solve(MatrixXd::Identity(static_cast<long>(m), static_cast<long>(m)));
  out.coefficients.assign(beta.data(), beta.data() + m);
  out.covariance.resize(m * m);
  for (std::size_t a = 0; a < m; ++a)
    for (std::size_t b = 0; b < m; ++b) out.covariance[a * m + b] = cov(static_cast<long>(a), static_cast<long>(b));
  const auto& L = llt.matrixLLT();
  out.log_det_normal = 0.0;
  for (std::size_t a = 0; a < m; ++a) out.log_det_normal += 2.0 * std::log(L(static_cast<long>(a), static_cast<long>(a)));
  out.chi_square = yv.dot(Kiy) - beta.dot(rhs);
  out.message = "";
  return out;
}

std::string DenseCore::factor() {
  ok = false;
  llt.compute(K);
  if (llt.info() != Eigen::Success) return "GP covariance is not positive definite (dense Cholesky failed)";
  const auto& L = llt.matrixLLT();
  log_det = 0.0;
  for (long i = 0; i < L.rows(); ++i) log_det += 2.0 * std::log(L(i, i));
  ok = true;
  return "";
}

double DenseCore::log_likelihood(std::span<const double> r) const {
  assert(ok && r.size() == size());
  Eigen::VectorXd z = Eigen::Map<const Eigen::VectorXd>(r.data(), static_cast<long>(r.size()));
  llt.matrixL().solveInPlace(z);
  return -0.5 * (z.squaredNorm() + log_det + static_cast<double>(size()) * kLog2Pi);
}

void DenseCore::solve(std::span<const double> b, std::span<double> x, std::size_t n_rhs) const {
  assert(ok && b.size() >= size() * n_rhs && x.size() >= size() * n_rhs);
  const long n = static_cast<long>(size()), k = static_cast<long>(n_rhs);
  Eigen::Map<Eigen::MatrixXd> X(x.data(), n, k);
  X = Eigen::Map<const Eigen::MatrixXd>(b.data(), n, k);
  llt.solveInPlace(X);
}

void DenseCore::draw(std::span<const double> z, std::span<double> out) const {
  assert(ok && z.size() >= size() && out.size() >= size());
  const long n = static_cast<long>(size());
  Eigen::Map<Eigen::VectorXd>(out.data(), n) =
      llt.matrixL() * Eigen::Map<const Eigen::VectorXd>(z.data(), n);
}

Prediction DenseCore::predict(std::span<const double> r, std::size_t m,
                              const std::function<double(std::size_t, std::size_t)>& cross,
                              const std::function<double(std::size_t)>& prior, bool with_sd) const {
  assert(ok && r.size() == size());
  const long n = static_cast<long>(size());
  Eigen::VectorXd alpha(n);
  solve(r, std::span<double>(alpha.data(), size()), 1);
  Eigen::MatrixXd Ks(n, static_cast<long>(m));  // column q = cov(data, prediction q)
  for (std::size_t q = 0; q < m; ++q)
    for (long p = 0; p < n; ++p) Ks(p, static_cast<long>(q)) = cross(q, static_cast<std::size_t>(p));
  Prediction out;
  const Eigen::VectorXd mean = Ks.transpose() * alpha;
  out.mean.assign(mean.data(), mean.data() + m);
  if (!with_sd) return out;
  llt.matrixL().solveInPlace(Ks);
  out.sd.resize(m);
  for (std::size_t q = 0; q < m; ++q)
    out.sd[q] = std::sqrt(std::max(0.0, prior(q) - Ks.col(static_cast<long>(q)).squaredNorm()));
  return out;
}

}  // namespace detail

// ----- DenseGP -----

struct DenseGP::Impl {
  detail::DenseCore core;
  Covariance kernel;
  std::vector<double> t, scale;
};

DenseGP::DenseGP() : impl_(std::make_unique<Impl>()) {}
DenseGP::~DenseGP() = default;
DenseGP::DenseGP(const DenseGP& o) : impl_(std::make_unique<Impl>(*o.impl_)) {}
DenseGP& DenseGP::operator=(const DenseGP& o) {
  if (this != &o) impl_ = std::make_unique<Impl>(*o.impl_);
  return *this;
}
DenseGP::DenseGP(DenseGP&&) noexcept = default;
DenseGP& DenseGP::operator=(DenseGP&&) noexcept = default;

std::string DenseGP::compute(const QuasiPeriodicKernel& kernel, std::span<const double> t,
                             std::span<const double> variance, std::span<const double> scale) {
  if (std::string msg = kernel.Validate(); !msg.empty()) {
    impl_->core.ok = false;
    return "quasi-periodic kernel: " + msg;
  }
  return compute([kernel](double tau) { return kernel.value(tau); }, t, variance, scale);
}

std::string DenseGP::compute(const Covariance& kernel, std::span<const double> t,
                             std::span<const double> variance, std::span<const double> scale) {
  Impl& m = *impl_;
  m.core.ok = false;
  if (std::string msg = detail::check_points(t, variance, scale, false); !msg.empty()) return msg;
  const std::size_t n = t.size();
  m.kernel = kernel;
  m.t.assign(t.begin(), t.end());
  m.scale.assign(n, 1.0);
  if (!scale.empty()) m.scale.assign(scale.begin(), scale.end());
  m.core.K.resize(static_cast<long>(n), static_cast<long>(n));
  for (std::size_t j = 0; j < n; ++j)
    for (std::size_t i = j; i < n; ++i) {  // lower triangle is all LLT reads
      double k = m.scale[i] * m.scale[j] * kernel(t[i] - t[j]);
      if (i == j) k += variance[i];
      m.core.K(static_cast<long>(i), static_cast<long>(j)) = k;
    }
  return m.core.factor();
}

bool DenseGP::computed() const { return impl_->core.ok; }
std::size_t DenseGP::size() const { return impl_->t.size(); }
double DenseGP::log_determinant() const { return impl_->core.log_det; }
double DenseGP::log_likelihood(std::span<const double> r) const { return impl_->core.log_likelihood(r); }
void DenseGP::solve(std::span<const double> b, std::span<double> x, std::size_t k) const {
  impl_->core.solve(b, x, k);
}
void DenseGP::draw(std::span<const double> z, std::span<double> out) const { impl_->core.draw(z, out); }

Prediction DenseGP::predict(std::span<const double> r, std::span<const double> t_star, bool with_sd,
                            std::span<const double> scale_star) const {
  const Impl& m = *impl_;
  assert(scale_star.empty() || scale_star.size() == t_star.size());
  auto ss = [&](std::size_t q) { return scale_star.empty() ? 1.0 : scale_star[q]; };
  const double k0 = m.kernel(0.0);
  return m.core.predict(
      r, t_star.size(),
      [&](std::size_t q, std::size_t p) { return ss(q) * m.scale[p] * m.kernel(t_star[q] - m.t[p]); },
      [&](std::size_t q) { return ss(q) * ss(q) * k0; }, with_sd);
}

LinearSolution DenseGP::least_squares(std::span<const double> design, std::size_t n_columns,
                                      std::span<const double> y) const {
  return detail::generalised_least_squares(
      size(), design, n_columns, y,
      [this](std::span<const double> b, std::span<double> x, std::size_t k) { solve(b, x, k); });
}

// ----- MultiSeriesGP -----

struct MultiSeriesGP::Impl {
  detail::DenseCore core;
  LatentQuasiPeriodic latent;
  std::vector<double> t;               // all points, series concatenated
  std::vector<std::size_t> series_of;  // series index of each point
  std::vector<std::size_t> offsets;    // series k starts at offsets[k]; offsets.back() = N
  std::vector<double> alpha, beta;     // per series

  double cov(std::size_t k, double tk, std::size_t l, double tl) const {
    const LatentQuasiPeriodic::Value g = latent.value(tk - tl);
    return alpha[k] * alpha[l] * g.gamma + (beta[k] * alpha[l] - alpha[k] * beta[l]) * g.first -
           beta[k] * beta[l] * g.second;
  }
};

MultiSeriesGP::MultiSeriesGP() : impl_(std::make_unique<Impl>()) {}
MultiSeriesGP::~MultiSeriesGP() = default;
MultiSeriesGP::MultiSeriesGP(const MultiSeriesGP& o) : impl_(std::make_unique<Impl>(*o.impl_)) {}
MultiSeriesGP& MultiSeriesGP::operator=(const MultiSeriesGP& o) {
  if (this != &o) impl_ = std::make_unique<Impl>(*o.impl_);
  return *this;
}
MultiSeriesGP::MultiSeriesGP(MultiSeriesGP&&) noexcept = default;
MultiSeriesGP& MultiSeriesGP::operator=(MultiSeriesGP&&) noexcept = default;

std::string MultiSeriesGP::compute(const LatentQuasiPeriodic& latent, std::span<const SeriesInput> series) {
  Impl& m = *impl_;
  m.core.ok = false;
  if (std::string msg = latent.Validate(); !msg.empty()) return "latent process: " + msg;
  if (series.empty()) return "multi-series GP: no series";
  m.latent = latent;
  m.t.clear();
  m.series_of.clear();
  m.offsets.assign(1, 0);
  m.alpha.clear();
  m.beta.clear();
  std::vector<double> variance;
  for (std::size_t k = 0; k < series.size(); ++k) {
    const SeriesInput& s = series[k];
    if (std::string msg = detail::check_points(s.t_days, s.variance, {}, false); !msg.empty())
      return "series " + std::to_string(k) + ": " + msg;
    if (!std::isfinite(s.value_coefficient) || !std::isfinite(s.derivative_coefficient))
      return "series " + std::to_string(k) + ": coefficients must be finite";
    m.t.insert(m.t.end(), s.t_days.begin(), s.t_days.end());
    variance.insert(variance.end(), s.variance.begin(), s.variance.end());
    m.series_of.insert(m.series_of.end(), s.t_days.size(), k);
    m.offsets.push_back(m.t.size());
    m.alpha.push_back(s.value_coefficient);
    m.beta.push_back(s.derivative_coefficient);
  }
  const std::size_t n = m.t.size();
  m.core.K.resize(static_cast<long>(n), static_cast<long>(n));
  for (std::size_t j = 0; j < n; ++j)
    for (std::size_t i = j; i < n; ++i)
      m.core.K(static_cast<long>(i), static_cast<long>(j)) =
          m.cov(m.series_of[i], m.t[i], m.series_of[j], m.t[j]) + (i == j ? variance[i] : 0.0);
  return m.core.factor();
}

bool MultiSeriesGP::computed() const { return impl_->core.ok; }
std::size_t MultiSeriesGP::size() const { return impl_->t.size(); }
std::size_t MultiSeriesGP::series_count() const { return impl_->alpha.size(); }
std::size_t MultiSeriesGP::series_offset(std::size_t k) const { return impl_->offsets.at(k); }
double MultiSeriesGP::covariance(std::size_t k, double t, std::size_t l, double tp) const {
  return impl_->cov(k, t, l, tp);
}
double MultiSeriesGP::log_determinant() const { return impl_->core.log_det; }
double MultiSeriesGP::log_likelihood(std::span<const double> r) const {
  return impl_->core.log_likelihood(r);
}
void MultiSeriesGP::solve(std::span<const double> b, std::span<double> x, std::size_t k) const {
  impl_->core.solve(b, x, k);
}
void MultiSeriesGP::draw(std::span<const double> z, std::span<double> out) const {
  impl_->core.draw(z, out);
}

Prediction MultiSeriesGP::predict(std::span<const double> r, std::size_t series,
                                  std::span<const double> t_star, bool with_sd) const {
  const Impl& m = *impl_;
  assert(series < m.alpha.size());
  return m.core.predict(
      r, t_star.size(),
      [&](std::size_t q, std::size_t p) { return m.cov(series, t_star[q], m.series_of[p], m.t[p]); },
      [&](std::size_t q) { return m.cov(series, t_star[q], series, t_star[q]); }, with_sd);
}

LinearSolution MultiSeriesGP::least_squares(std::span<const double> design, std::size_t n_columns,
                                            std::span<const double> y) const {
  return detail::generalised_least_squares(
      size(), design, n_columns, y,
      [this](std::span<const double> b, std::span<double> x, std::size_t k) { solve(b, x, k); });
}

}  // namespace apsides::gp
