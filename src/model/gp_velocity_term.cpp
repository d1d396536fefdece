// The velocities with Gaussian-process noise (likelihood_terms.h: GpVelocityTerm).
#include <Eigen/Dense>
#include <algorithm>
#include <cmath>
#include <limits>

#include "apsides/constants.h"
#include "apsides/likelihood_terms.h"
#include "model/random_draws.h"

namespace apsides {
namespace {
constexpr double kInf = std::numeric_limits<double>::infinity();
const double kLn2Pi = std::log(2.0 * constants::kPi);

// The semiseparable form of a kernel given its parameter values; "" or why not.
std::string semiseparable_kernel(gp::KernelKind kind, std::span<const double> v, gp::SemiseparableKernel& out) {
  switch (kind) {
    case gp::KernelKind::kRotation: {
      const auto k = gp::RotationKernel::from_vector(v);
      if (auto m = k.Validate(); !m.empty()) return m;
      out = k.semiseparable();
      return "";
    }
    case gp::KernelKind::kOscillator: {
      const auto k = gp::OscillatorKernel::from_vector(v);
      if (auto m = k.Validate(); !m.empty()) return m;
      out = k.semiseparable();
      return "";
    }
    case gp::KernelKind::kMatern32: {
      const auto k = gp::Matern32Kernel::from_vector(v);
      if (auto m = k.Validate(); !m.empty()) return m;
      out = k.semiseparable();
      return "";
    }
    case gp::KernelKind::kExponential: {
      const auto k = gp::ExponentialKernel::from_vector(v);
      if (auto m = k.Validate(); !m.empty()) return m;
      out = k.semiseparable();
      return "";
    }
    case gp::KernelKind::kQuasiPeriodic: return "the quasi-periodic kernel is not semiseparable";
  }
  return "unknown kernel";
}

double ln_normal_mass(double za, double zb) {
  const double r = 1.0 / std::sqrt(2.0);
  double m;
  if (za >= 0.0) m = 0.5 * (std::erfc(za * r) - std::erfc(zb * r));
  else if (zb <= 0.0) m = 0.5 * (std::erfc(-zb * r) - std::erfc(-za * r));
  else m = 1.0 - 0.5 * std::erfc(-za * r) - 0.5 * std::erfc(zb * r);
  return m > 0.0 ? std::log(m) : -kInf;
}

}  // namespace

// One per thread: the factorisation and the vectors of an evaluation.
struct GpVelocityTerm::Workspace {
  gp::SemiseparableGP semi;
  gp::DenseGP dense;
  bool dense_used = false;
  std::vector<double> signal, r, variance, scale;
  const gp::SemiseparableGP* semi_ptr() const { return dense_used ? nullptr : &semi; }
  double log_likelihood(std::span<const double> res) const {
    return dense_used ? dense.log_likelihood(res) : semi.log_likelihood(res);
  }
  gp::LinearSolution least_squares(std::span<const double> a, std::size_t m, std::span<const double> y) const {
    return dense_used ? dense.least_squares(a, m, y) : semi.least_squares(a, m, y);
  }
  gp::Prediction predict(std::span<const double> res, std::span<const double> t, bool sd,
                         std::span<const double> s) const {
    return dense_used ? dense.predict(res, t, sd, s) : semi.predict(res, t, sd, s);
  }
};

GpVelocityTerm::Workspace& GpVelocityTerm::workspace() {
  thread_local Workspace ws;
  return ws;
}

GpVelocityTerm::GpVelocityTerm(const VelocityData& data, const ParameterLayout& layout)
    : VelocityTerm(data, layout), gp_(layout.gaussian_process()) {}

std::vector<const ParameterBlock*> GpVelocityTerm::reads() const {
  std::vector<const ParameterBlock*> out = VelocityTerm::reads();
  out.push_back(gp_);
  return out;
}

std::string GpVelocityTerm::factor(std::span<const double> theta, Workspace& ws) const {
  if (!white_variances(theta, ws.variance)) return "a jitter is negative";
  ws.scale.clear();
  if (gp_->per_instrument())
    for (std::size_t i = 0; i < data_.size(); ++i) ws.scale.push_back(gp_->scale(theta, data_.instrument[i]));
  const auto values = gp_->kernel_values(theta);
  if (gp_->kernel() == gp::KernelKind::kQuasiPeriodic) {
    const auto k = gp::QuasiPeriodicKernel::from_vector(values);
    if (auto m = k.Validate(); !m.empty()) return m;
    ws.dense_used = true;
    return ws.dense.compute(k, data_.time_days, ws.variance, ws.scale);
  }
  gp::SemiseparableKernel kernel;
  if (auto m = semiseparable_kernel(gp_->kernel(), values, kernel); !m.empty()) return m;
  ws.dense_used = false;
  return ws.semi.compute(kernel, data_.time_days, ws.variance, ws.scale);
}

double GpVelocityTerm::log_likelihood(std::span<const double> theta) const {
  Workspace& ws = workspace();
  if (!signal_at_data(theta, ws.signal)) return -kInf;
  ws.r.resize(data_.size());
  for (std::size_t i = 0; i < data_.size(); ++i)
    ws.r[i] = data_.velocity_m_s[i] - ws.signal[i] - linear_value(theta, i);
  if (gp_->kernel() != gp::KernelKind::kQuasiPeriodic) {
    // Factor and forward sweep in one pass: the sampler's call.
    if (!white_variances(theta, ws.variance)) return -kInf;
    ws.scale.clear();
    if (gp_->per_instrument())
      for (std::size_t i = 0; i < data_.size(); ++i) ws.scale.push_back(gp_->scale(theta, data_.instrument[i]));
    gp::SemiseparableKernel kernel;
    if (!semiseparable_kernel(gp_->kernel(), gp_->kernel_values(theta), kernel).empty()) return -kInf;
    ws.dense_used = false;
    const double l = ws.semi.compute_log_likelihood(kernel, data_.time_days, ws.variance, ws.r, ws.scale);
    return std::isfinite(l) ? l : -kInf;
  }
  if (!factor(theta, ws).empty()) return -kInf;
  const double l = ws.log_likelihood(ws.r);
  return std::isfinite(l) ? l : -kInf;
}

double GpVelocityTerm::log_likelihood_profiled(std::span<double> theta, const std::vector<bool>& free_linear) const {
  Workspace& ws = workspace();
  if (!signal_at_data(theta, ws.signal)) return -kInf;
  const auto free = free_columns(free_linear);
  for (const LinearColumn* c : free) theta[c->index] = 0.0;
  const std::size_t n = data_.size(), m = free.size();
  ws.r.resize(n);
  for (std::size_t i = 0; i < n; ++i) ws.r[i] = data_.velocity_m_s[i] - ws.signal[i] - linear_value(theta, i);
  if (!factor(theta, ws).empty()) return -kInf;
  if (m == 0) {
    const double l = ws.log_likelihood(ws.r);
    return std::isfinite(l) ? l : -kInf;
  }
  std::vector<double> design(n * m);
  for (std::size_t a = 0; a < m; ++a)
    for (std::size_t i = 0; i < n; ++i) design[a * n + i] = linear_column(*free[a], i);
  const gp::LinearSolution ls = ws.least_squares(design, m, ws.r);
  if (!ls.message.empty()) return -kInf;
  for (std::size_t a = 0; a < m; ++a) theta[free[a]->index] = ls.coefficients[a];
  const double logdet = ws.dense_used ? ws.dense.log_determinant() : ws.semi.log_determinant();
  const double l = -0.5 * (ls.chi_square + logdet + static_cast<double>(n) * kLn2Pi);
  return std::isfinite(l) ? l : -kInf;
}

double GpVelocityTerm::integrated_offsets(std::span<const double> theta,
                                          std::span<const KeplerianModel::IntegratedOffset> integrated,
                                          std::vector<double>* mean, std::vector<double>* covariance) const {
  Workspace& ws = workspace();
  if (!signal_at_data(theta, ws.signal)) return -kInf;
  std::vector<double> th(theta.begin(), theta.end());
  for (const auto& io : integrated) th[instruments_[static_cast<std::size_t>(io.instrument)]->offset_index()] = 0.0;
  const std::size_t n = data_.size(), m = integrated.size();
  ws.r.resize(n);
  for (std::size_t i = 0; i < n; ++i) ws.r[i] = data_.velocity_m_s[i] - ws.signal[i] - linear_value(th, i);
  if (!factor(th, ws).empty()) return -kInf;
  std::vector<double> design(n * m, 0.0);
  for (std::size_t a = 0; a < m; ++a)
    for (std::size_t i = 0; i < n; ++i) design[a * n + i] = data_.instrument[i] == integrated[a].instrument ? 1.0 : 0.0;
  const gp::LinearSolution ls = ws.least_squares(design, m, ws.r);
  if (!ls.message.empty()) return -kInf;
  const double logdet = ws.dense_used ? ws.dense.log_determinant() : ws.semi.log_determinant();
  double l = -0.5 * (ls.chi_square + logdet + static_cast<double>(n) * kLn2Pi) + 0.5 * static_cast<double>(m) * kLn2Pi -
             0.5 * ls.log_det_normal;
  for (std::size_t a = 0; a < m; ++a) {
    const double sd = std::sqrt(ls.covariance[a * m + a]), mu = ls.coefficients[a];
    l += ln_normal_mass((integrated[a].lower_m_s - mu) / sd, (integrated[a].upper_m_s - mu) / sd) -
         std::log(integrated[a].upper_m_s - integrated[a].lower_m_s);
  }
  if (mean != nullptr) *mean = ls.coefficients;
  if (covariance != nullptr) *covariance = ls.covariance;
  return std::isfinite(l) ? l : -kInf;
}

double GpVelocityTerm::log_likelihood_offsets_integrated(
    std::span<const double> theta, std::span<const KeplerianModel::IntegratedOffset> integrated,
    std::vector<KeplerianModel::OffsetConditional>* conditionals) const {
  std::vector<double> mean, cov;
  const double l = integrated_offsets(theta, integrated, &mean, &cov);
  if (conditionals != nullptr) {
    conditionals->clear();
    if (std::isfinite(l))
      for (std::size_t a = 0; a < integrated.size(); ++a)
        conditionals->push_back({mean[a], std::sqrt(cov[a * integrated.size() + a]), integrated[a].lower_m_s,
                                 integrated[a].upper_m_s});
  }
  return l;
}

void GpVelocityTerm::complete_offsets(std::span<double> theta, std::span<const KeplerianModel::IntegratedOffset> integrated,
                                      std::mt19937_64* rng) const {
  std::vector<double> mean, cov;
  if (!std::isfinite(integrated_offsets(theta, integrated, &mean, &cov))) return;
  const auto m = static_cast<Eigen::Index>(integrated.size());
  Eigen::VectorXd x = Eigen::Map<const Eigen::VectorXd>(mean.data(), m);
  if (rng != nullptr) {
    // The offsets are correlated under the GP: a draw from their joint normal posterior,
    // kept when inside the prior box (it nearly always is; else the mean, clamped).
    const Eigen::MatrixXd c = Eigen::Map<const Eigen::MatrixXd>(cov.data(), m, m);
    const Eigen::LLT<Eigen::MatrixXd> llt(c);
    std::normal_distribution<double> normal(0.0, 1.0);
    for (int attempt = 0; attempt < 100 && llt.info() == Eigen::Success; ++attempt) {
      Eigen::VectorXd z(m);
      for (Eigen::Index a = 0; a < m; ++a) z[a] = normal(*rng);
      const Eigen::VectorXd y = x + llt.matrixL() * z;
      bool inside = true;
      for (Eigen::Index a = 0; a < m; ++a)
        inside = inside && y[a] >= integrated[static_cast<std::size_t>(a)].lower_m_s &&
                 y[a] <= integrated[static_cast<std::size_t>(a)].upper_m_s;
      if (inside) {
        x = y;
        break;
      }
    }
  }
  for (std::size_t a = 0; a < integrated.size(); ++a)
    theta[instruments_[static_cast<std::size_t>(integrated[a].instrument)]->offset_index()] =
        std::clamp(x[static_cast<Eigen::Index>(a)], integrated[a].lower_m_s, integrated[a].upper_m_s);
}

void GpVelocityTerm::residuals(std::span<const double> theta, bool remove_correlated_noise, std::vector<double>& r,
                               std::vector<double>& sigma) const {
  std::vector<double> signal;
  const std::size_t n = data_.size();
  r.assign(n, std::numeric_limits<double>::quiet_NaN());
  sigma.assign(n, std::numeric_limits<double>::quiet_NaN());
  if (!signal_at_data(theta, signal) || !white_variances(theta, sigma)) return;
  for (double& s : sigma) s = std::sqrt(s);
  for (std::size_t i = 0; i < n; ++i) r[i] = data_.velocity_m_s[i] - signal[i] - linear_value(theta, i);
  if (!remove_correlated_noise) return;
  Workspace& ws = workspace();
  if (!factor(theta, ws).empty()) return;
  const gp::Prediction p = ws.predict(r, data_.time_days, false, ws.scale);
  for (std::size_t i = 0; i < n; ++i) r[i] -= p.mean[i];
}

gp::Prediction GpVelocityTerm::predict(std::span<const double> theta, std::span<const double> t_days, int instrument,
                                       bool with_sd) const {
  std::vector<double> r, sigma;
  residuals(theta, false, r, sigma);
  Workspace& ws = workspace();
  if (!factor(theta, ws).empty()) return {};
  std::vector<double> scale;
  if (gp_->per_instrument()) scale.assign(t_days.size(), gp_->scale(theta, instrument));
  return ws.predict(r, t_days, with_sd, scale);
}

}  // namespace apsides
