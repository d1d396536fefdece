#include "apsides/likelihood_terms.h"

#include <Eigen/Dense>
#include <algorithm>
#include <cmath>
#include <limits>

#include "apsides/constants.h"
#include "apsides/ephemeris.h"
#include "kernels/kernels.h"
#include "model/random_draws.h"

namespace apsides {
namespace {
constexpr double kInf = std::numeric_limits<double>::infinity();
using constants::kTwoPi;
}  // namespace

Signal::~Signal() = default;
LikelihoodTerm::~LikelihoodTerm() = default;

double LikelihoodTerm::log_likelihood_profiled(std::span<double> theta, const std::vector<bool>&) const {
  return log_likelihood(theta);
}

// ---- The Keplerian signal ----------------------------------------------------------------

KeplerianSignal::KeplerianSignal(const ParameterLayout& layout) : planets_(layout.planets()) {}

void KeplerianSignal::velocity(std::span<const double> theta, std::span<const double> t, std::span<double> out) const {
  std::fill(out.begin(), out.end(), 0.0);
  for (const PlanetBlock* b : planets_) {
    const Planet p = b->planet(theta);
    const double e = p.ecc(), w = p.omega_rad();
    const kernels::KeplerTerm term{kTwoPi / p.period_days,
                                   mean_anomaly_at_conjunction(e, w) - kTwoPi * p.t_conj_days / p.period_days,
                                   p.semi_amplitude_m_s, e, w};
    kernels::add_keplerians(t.data(), t.size(), &term, 1, out.data());
  }
}

// ---- Velocities: the shared part ------------------------------------------------------

VelocityTerm::VelocityTerm(const VelocityData& data, const ParameterLayout& layout)
    : data_(data),
      layout_(&layout),
      planets_(layout.planets()),
      instruments_(layout.instruments()),
      trend_(layout.trend()) {
  // The linear parameters in theta order: offsets, then the trend's coefficients.
  for (const auto& b : layout.blocks()) {
    if (b->kind() == BlockKind::kInstrument)
      linear_.push_back({b->index(InstrumentBlock::kOffset), static_cast<const InstrumentBlock&>(*b).instrument(), 0});
    if (b->kind() == BlockKind::kTrend)
      for (int s = 0; s < b->size(); ++s) linear_.push_back({b->index(s), -1, s + 1});
  }
}

std::vector<const ParameterBlock*> VelocityTerm::reads() const {
  std::vector<const ParameterBlock*> out;
  for (const auto& b : layout_->blocks())
    if (b->kind() == BlockKind::kPlanet || b->kind() == BlockKind::kInstrument || b->kind() == BlockKind::kTrend)
      out.push_back(b.get());
  return out;
}

bool VelocityTerm::signal_at_data(std::span<const double> theta, std::vector<double>& out) const {
  const std::size_t n = data_.size();
  out.assign(n, 0.0);
  for (const PlanetBlock* b : planets_) {
    const Planet p = b->planet(theta);
    const double P = p.period_days, K = p.semi_amplitude_m_s, tc = p.t_conj_days;
    if (!(P > 0.0) || !std::isfinite(P) || !std::isfinite(K) || !std::isfinite(tc)) return false;
    const double e = p.ecc();
    if (!(e < 1.0)) return false;
    const double om = p.omega_rad();
    const kernels::KeplerTerm term{kTwoPi / P, mean_anomaly_at_conjunction(e, om) - kTwoPi * tc / P, K, e, om};
    kernels::add_keplerians(data_.time_days.data(), n, &term, 1, out.data());
  }
  return true;
}

double VelocityTerm::linear_value(std::span<const double> theta, std::size_t i) const {
  double v = instruments_[static_cast<std::size_t>(data_.instrument[i])]->offset(theta);
  const double t = data_.time_days[i];
  if (trend_ != nullptr && trend_->order() >= 1) v += trend_->coefficient(theta, 1) * t;
  if (trend_ != nullptr && trend_->order() >= 2) v += trend_->coefficient(theta, 2) * t * t;
  return v;
}

double VelocityTerm::linear_column(const LinearColumn& c, std::size_t i) const {
  if (c.instrument >= 0) return data_.instrument[i] == c.instrument ? 1.0 : 0.0;
  const double t = data_.time_days[i];
  return c.power == 1 ? t : t * t;
}

bool VelocityTerm::white_variances(std::span<const double> theta, std::vector<double>& out) const {
  out.resize(data_.size());
  for (std::size_t i = 0; i < data_.size(); ++i) {
    const double s = data_.uncertainty_m_s[i];
    const double j = instruments_[static_cast<std::size_t>(data_.instrument[i])]->jitter(theta);
    if (!(j >= 0.0) || !std::isfinite(j)) return false;
    out[i] = s * s + j * j;
  }
  return true;
}

std::vector<const VelocityTerm::LinearColumn*> VelocityTerm::free_columns(const std::vector<bool>& free_linear) const {
  std::vector<const LinearColumn*> free;
  for (const LinearColumn& c : linear_)
    if (free_linear.at(c.index)) free.push_back(&c);
  return free;
}

// ---- Velocities with white noise --------------------------------------------------------

WhiteNoiseVelocityTerm::WhiteNoiseVelocityTerm(const VelocityData& data, const ParameterLayout& layout)
    : VelocityTerm(data, layout), model_(data, layout) {}

double WhiteNoiseVelocityTerm::log_likelihood(std::span<const double> theta) const { return model_.log_likelihood(theta); }

double WhiteNoiseVelocityTerm::log_likelihood_offsets_integrated(
    std::span<const double> theta, std::span<const KeplerianModel::IntegratedOffset> integrated,
    std::vector<KeplerianModel::OffsetConditional>* conditionals) const {
  return model_.log_likelihood_offsets_integrated(theta, integrated, conditionals);
}

void WhiteNoiseVelocityTerm::complete_offsets(std::span<double> theta,
                                              std::span<const KeplerianModel::IntegratedOffset> integrated,
                                              std::mt19937_64* rng) const {
  std::vector<KeplerianModel::OffsetConditional> cond;
  if (!std::isfinite(model_.log_likelihood_offsets_integrated(theta, integrated, &cond))) return;
  for (std::size_t q = 0; q < integrated.size(); ++q) {
    const auto& c = cond[q];
    double g = std::clamp(c.mean_m_s, c.lower_m_s, c.upper_m_s);
    if (rng != nullptr) g = truncated_normal_draw(c.mean_m_s, c.sd_m_s, c.lower_m_s, c.upper_m_s, *rng);
    theta[instruments_[static_cast<std::size_t>(integrated[q].instrument)]->offset_index()] = g;
  }
}

void WhiteNoiseVelocityTerm::residuals(std::span<const double> theta, bool, std::vector<double>& r,
                                       std::vector<double>& sigma) const {
  r = model_.residuals(theta);
  sigma = model_.variances(theta);
  for (double& s : sigma) s = std::sqrt(s);
}

// Weighted least squares for the free linear parameters on y - signal - fixed linear part.
bool WhiteNoiseVelocityTerm::solve_linear(const std::vector<const LinearColumn*>& free, const std::vector<double>& signal,
                                          const std::vector<double>& w, std::span<double> theta) const {
  const std::size_t m = free.size();
  if (m == 0) return true;
  for (const LinearColumn* c : free) theta[c->index] = 0.0;
  Eigen::MatrixXd A = Eigen::MatrixXd::Zero(static_cast<Eigen::Index>(m), static_cast<Eigen::Index>(m));
  Eigen::VectorXd b = Eigen::VectorXd::Zero(static_cast<Eigen::Index>(m));
  std::vector<double> x(m);
  for (std::size_t i = 0; i < data_.size(); ++i) {
    const double y = data_.velocity_m_s[i] - signal[i] - linear_value(theta, i);
    for (std::size_t a = 0; a < m; ++a) x[a] = linear_column(*free[a], i);
    for (std::size_t a = 0; a < m; ++a) {
      if (x[a] == 0.0) continue;
      const double wa = w[i] * x[a];
      b(static_cast<Eigen::Index>(a)) += wa * y;
      for (std::size_t c = 0; c < m; ++c) A(static_cast<Eigen::Index>(a), static_cast<Eigen::Index>(c)) += wa * x[c];
    }
  }
  Eigen::LDLT<Eigen::MatrixXd> ldlt(A);
  if (ldlt.info() != Eigen::Success || !(ldlt.vectorD().minCoeff() > 1e-14 * ldlt.vectorD().maxCoeff())) return false;
  const Eigen::VectorXd sol = ldlt.solve(b);
  for (std::size_t a = 0; a < m; ++a) {
    if (!std::isfinite(sol(static_cast<Eigen::Index>(a)))) return false;
    theta[free[a]->index] = sol(static_cast<Eigen::Index>(a));
  }
  return true;
}

double WhiteNoiseVelocityTerm::log_likelihood_profiled(std::span<double> theta,
                                                       const std::vector<bool>& free_linear) const {
  const std::size_t n = data_.size();
  thread_local std::vector<double> signal, w;
  if (!signal_at_data(theta, signal) || !white_variances(theta, w)) return -kInf;
  for (double& x : w) x = 1.0 / x;
  if (!solve_linear(free_columns(free_linear), signal, w, theta)) return -kInf;
  double lnl = 0.0;
  for (std::size_t i = 0; i < n; ++i) {
    const double r = data_.velocity_m_s[i] - signal[i] - linear_value(theta, i);
    lnl += r * r * w[i] - std::log(w[i]);
  }
  return -0.5 * (lnl + static_cast<double>(n) * std::log(kTwoPi));
}

// ---- Transit times --------------------------------------------------------------------------

TransitTimesTerm::TransitTimesTerm(const TransitData& times, double frame_reference_epoch_bjd, const OrbitBlock& orbit,
                                   const TransitJitterBlock* jitter)
    : times_(times),
      like_(std::make_unique<TransitTimingLikelihood>(times, frame_reference_epoch_bjd)),
      orbit_(&orbit),
      jitter_(jitter) {}

TransitTimesTerm::~TransitTimesTerm() = default;

std::size_t TransitTimesTerm::n_points() const { return like_->size(); }

std::vector<const ParameterBlock*> TransitTimesTerm::reads() const {
  std::vector<const ParameterBlock*> out{orbit_};
  if (jitter_ != nullptr) out.push_back(jitter_);
  return out;
}

double TransitTimesTerm::log_likelihood(std::span<const double> theta) const {
  return like_->log_likelihood(orbit_->period(theta), orbit_->t_conj(theta),
                               jitter_ != nullptr ? jitter_->jitter(theta) : 0.0);
}

}  // namespace apsides
