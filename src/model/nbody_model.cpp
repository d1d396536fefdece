// The N-body planet block, the N-body signal and its two likelihood terms (nbody_model.h).
#include "apsides/nbody_model.h"

#include <fmt/format.h>

#include <Eigen/Dense>
#include <algorithm>
#include <atomic>
#include <cmath>
#include <limits>

#include "apsides/constants.h"
#include "apsides/error.h"
#include "model/prior_context.h"

namespace apsides {
namespace {
constexpr double kInf = std::numeric_limits<double>::infinity();
constexpr double kDeg = 3.14159265358979323846 / 180.0;
constexpr double kMaxEcc = 0.9;
std::atomic<std::uint64_t> g_signal_ids{1};

// The last evaluation of this thread, by signal id and theta.
struct SignalCache {
  std::uint64_t id = 0;
  std::vector<double> theta;
  NbodyObservables obs;
  NbodySystem system;
};
SignalCache& cache() {
  thread_local SignalCache c;
  return c;
}
}  // namespace

// ---- The block ---------------------------------------------------------------------------

NbodyPlanetBlock::NbodyPlanetBlock(std::string label) : OrbitBlock(BlockKind::kNbodyPlanet, label) {
  params_.push_back({label + ".mass_ratio", "1", false});
  params_.push_back({label + ".period_d", "d", false});
  params_.push_back({label + ".secosw", "1", false});
  params_.push_back({label + ".sesinw", "1", false});
  params_.push_back({label + ".t_conj_d", "d", false});
  params_.push_back({label + ".inclination_deg", "deg", false});
  params_.push_back({label + ".node_deg", "deg", false});
}

NbodyPlanet NbodyPlanetBlock::planet(std::span<const double> theta) const {
  NbodyPlanet p;
  p.mass_ratio = value(theta, kMass);
  p.period_days = value(theta, kPeriod);
  p.sqrt_e_cos_omega = value(theta, kSecosw);
  p.sqrt_e_sin_omega = value(theta, kSesinw);
  p.t_conj_days = value(theta, kTConj);
  p.inclination_rad = value(theta, kInclination) * kDeg;
  p.node_rad = value(theta, kNode) * kDeg;
  return p;
}

void NbodyPlanetBlock::put(std::span<double> theta, const NbodyPlanet& p) const {
  theta[index(kMass)] = p.mass_ratio;
  theta[index(kPeriod)] = p.period_days;
  theta[index(kSecosw)] = p.sqrt_e_cos_omega;
  theta[index(kSesinw)] = p.sqrt_e_sin_omega;
  theta[index(kTConj)] = p.t_conj_days;
  theta[index(kInclination)] = p.inclination_rad / kDeg;
  theta[index(kNode)] = p.node_rad / kDeg;
}

void NbodyPlanetBlock::set_default_priors(const PriorContext&, ModelPriors& priors) const {
  // Without a seed: wide defaults; make_nbody_posterior replaces them from its seeds.
  priors.parameter[index(kMass)] = Prior::uniform(0.0, 0.01);
  priors.parameter[index(kSecosw)] = Prior::uniform(-1.0, 1.0);
  priors.parameter[index(kSesinw)] = Prior::uniform(-1.0, 1.0);
  priors.parameter[index(kInclination)] = Prior::fixed(90.0);
  priors.parameter[index(kNode)] = Prior::fixed(0.0);
}

void NbodyPlanetBlock::check_override(int slot, const Prior& prior, const std::string& where) const {
  if (slot == kMass || slot == kPeriod) require_positive_support(prior, where, slot == kPeriod);
  if (slot == kMass && prior.kind == PriorKind::kFixed && !(prior.a > 0.0))
    throw InputError(fmt::format("{}: a planet's mass ratio must be > 0 (got {})", where, prior.a));
  if (slot == kInclination && !(prior.lower() >= 0.0 && prior.upper() <= 180.0))
    throw InputError(fmt::format("{}: {} leaves [0, 180] degrees", where, prior.describe()));
}

double NbodyPlanetBlock::joint_log_prior(std::span<const double> theta, const ModelPriors&) const {
  const double h = value(theta, kSecosw), k = value(theta, kSesinw);
  return h * h + k * k < kMaxEcc ? 0.0 : -kInf;
}

double NbodyPlanetBlock::fit_step(int slot, std::span<const double> theta, double, double width) const {
  const double x = value(theta, slot);
  switch (slot) {
    case kMass: return std::max(0.3 * x, 1e-6);
    case kPeriod: return std::max(1e-5 * x, std::min(1e-3 * x, 0.05 * width));
    case kSecosw:
    case kSesinw: return 0.05;
    case kTConj: return std::max(1e-4, std::min(0.01, 0.05 * width));
    default: return std::max(1.0, 0.05 * width);
  }
}

double NbodyPlanetBlock::ball_scale(int slot, std::span<const double> theta) const {
  const double x = value(theta, slot);
  switch (slot) {
    case kMass: return 1e-3 * std::abs(x) + 1e-9;
    case kPeriod: return 1e-7 * std::abs(x);
    case kTConj: return 1e-5;
    default: return 1e-3;
  }
}

// ---- Settings ---------------------------------------------------------------------------

std::string NbodySettings::Validate() const {
  if (n_planets < 0 || n_planets > kMaxNbodyPlanets)
    return fmt::format("nbody.planets = {}: must be between 1 and {}", n_planets, kMaxNbodyPlanets);
  if (!(step_fraction > 0.0 && step_fraction <= 0.5))
    return fmt::format("nbody.step_fraction = {}: must be in (0, 0.5]", step_fraction);
  if (!(step_days >= 0.0) || !std::isfinite(step_days))
    return fmt::format("nbody.step_days = {}: must be >= 0 (0: from step_fraction)", step_days);
  if (!(inclination_deg > 0.0 && inclination_deg < 180.0))
    return fmt::format("nbody.inclination_deg = {}: must be in (0, 180)", inclination_deg);
  return "";
}

// ---- The signal ---------------------------------------------------------------------------

NbodySignal::NbodySignal(const ParameterLayout& layout, const NbodyProblem& problem)
    : star_mass_msun_(problem.star_mass_msun),
      osculating_epoch_days_(problem.osculating_epoch_days),
      rv_times_(problem.velocities.time_days),
      id_(g_signal_ids.fetch_add(1)) {
  for (const auto& b : layout.blocks())
    if (b->kind() == BlockKind::kNbodyPlanet) planets_.push_back(static_cast<const NbodyPlanetBlock*>(b.get()));
  options_.step_fraction = problem.settings.step_fraction;
  options_.step_days = problem.settings.step_days;
  epochs_.resize(planets_.size());
  shift_.assign(planets_.size(), 0);
  const double dt_frame = problem.transits.reference_epoch_bjd - problem.reference_epoch_bjd;
  for (std::size_t p = 0; p < planets_.size(); ++p) {
    const TransitData td = problem.transits.for_planet(planets_[p]->label());
    if (td.size() == 0) continue;
    // Shift: the epoch whose linear-ephemeris time is nearest the osculating epoch is 0.
    const NbodySeed& s = problem.seeds.at(p);
    long long anchor = 0;
    double best = kInf;
    for (std::size_t i = 0; i < td.size(); ++i) {
      // The seed's t_conj is the linear ephemeris's conjunction nearest the osculating epoch.
      const double n = std::round((td.time_days[i] + dt_frame - s.t_conj_days) / s.period_days);
      const double d = std::abs(n);
      if (d < best) best = d, anchor = td.epoch[i] - static_cast<long long>(n);
    }
    shift_[p] = anchor;
    for (long long e : td.epoch) epochs_[p].push_back(e - anchor);
    std::sort(epochs_[p].begin(), epochs_[p].end());
    epochs_[p].erase(std::unique(epochs_[p].begin(), epochs_[p].end()), epochs_[p].end());
  }
}

NbodySystem NbodySignal::system(std::span<const double> theta) const {
  NbodySystem s;
  s.star_mass_msun = star_mass_msun_;
  s.osculating_epoch_days = osculating_epoch_days_;
  for (const NbodyPlanetBlock* b : planets_) s.planets.push_back(b->planet(theta));
  return s;
}

const NbodyObservables* NbodySignal::at_data(std::span<const double> theta, std::string* why) const {
  SignalCache& c = cache();
  const bool hit = c.id == id_ && c.theta.size() == theta.size() && std::equal(theta.begin(), theta.end(), c.theta.begin());
  if (!hit) {
    c.id = id_;
    c.theta.assign(theta.begin(), theta.end());
    c.system = system(theta);
    compute_observables(c.system, rv_times_, epochs_, options_, c.obs);
  }
  if (!c.obs.ok()) {
    if (why != nullptr) *why = c.obs.message;
    return nullptr;
  }
  return &c.obs;
}

void NbodySignal::velocity(std::span<const double> theta, std::span<const double> t, std::span<double> out) const {
  const NbodyObservables obs = compute_observables(system(theta), t, {}, options_);
  for (std::size_t i = 0; i < out.size(); ++i)
    out[i] = obs.ok() ? obs.star_velocity_m_s[i] : std::numeric_limits<double>::quiet_NaN();
}

std::vector<double> NbodySignal::transit_times(std::span<const double> theta, int position,
                                               const std::vector<long long>& data_epochs) const {
  std::vector<std::vector<long long>> req(planets_.size());
  for (long long e : data_epochs) req[static_cast<std::size_t>(position)].push_back(e - epoch_shift(position));
  const NbodyObservables obs = compute_observables(system(theta), {}, req, options_);
  if (!obs.ok()) return std::vector<double>(data_epochs.size(), std::numeric_limits<double>::quiet_NaN());
  return obs.transit_times_days[static_cast<std::size_t>(position)];
}

// ---- Velocities ---------------------------------------------------------------------------

NbodyVelocityTerm::NbodyVelocityTerm(const VelocityData& data, const ParameterLayout& layout, const NbodySignal& signal)
    : data_(data), layout_(&layout), signal_(&signal), instruments_(layout.instruments()), trend_(layout.trend()) {}

std::vector<const ParameterBlock*> NbodyVelocityTerm::reads() const {
  std::vector<const ParameterBlock*> out;
  for (const auto& b : layout_->blocks())
    if (b->kind() == BlockKind::kNbodyPlanet || b->kind() == BlockKind::kInstrument || b->kind() == BlockKind::kTrend)
      out.push_back(b.get());
  return out;
}

double NbodyVelocityTerm::log_likelihood(std::span<const double> theta) const {
  std::vector<double> copy(theta.begin(), theta.end());
  return evaluate(copy, nullptr);
}

double NbodyVelocityTerm::log_likelihood_profiled(std::span<double> theta, const std::vector<bool>& free_linear) const {
  return evaluate(theta, &free_linear);
}

// ln L, after solving the free linear parameters (offsets, trend) by weighted least squares
// when `free_linear` is given.
double NbodyVelocityTerm::evaluate(std::span<double> theta, const std::vector<bool>* free_linear) const {
  const std::size_t n = data_.size();
  if (n == 0) return 0.0;
  const NbodyObservables* obs = signal_->at_data(theta);
  if (obs == nullptr) return -kInf;
  std::vector<double> w(n);
  for (std::size_t i = 0; i < n; ++i) {
    const double j = instruments_[static_cast<std::size_t>(data_.instrument[i])]->jitter(theta);
    if (!(j >= 0.0) || !std::isfinite(j)) return -kInf;
    w[i] = 1.0 / (data_.uncertainty_m_s[i] * data_.uncertainty_m_s[i] + j * j);
  }
  const int order = trend_ != nullptr ? trend_->order() : 0;
  auto column = [&](std::size_t col, std::size_t i) -> double {  // offsets, then trend powers
    if (col < instruments_.size()) return data_.instrument[i] == static_cast<int>(col) ? 1.0 : 0.0;
    return std::pow(data_.time_days[i], static_cast<double>(col - instruments_.size() + 1));
  };
  auto index_of = [&](std::size_t col) {
    return col < instruments_.size() ? instruments_[col]->offset_index()
                                     : trend_->coefficient_index(static_cast<int>(col - instruments_.size() + 1));
  };
  const std::size_t m = instruments_.size() + static_cast<std::size_t>(order);
  if (free_linear != nullptr) {
    std::vector<std::size_t> free;
    for (std::size_t c = 0; c < m; ++c)
      if ((*free_linear)[index_of(c)]) free.push_back(c), theta[index_of(c)] = 0.0;
    if (!free.empty()) {
      const auto f = static_cast<Eigen::Index>(free.size());
      Eigen::MatrixXd A = Eigen::MatrixXd::Zero(f, f);
      Eigen::VectorXd b = Eigen::VectorXd::Zero(f);
      for (std::size_t i = 0; i < n; ++i) {
        double y = data_.velocity_m_s[i] - obs->star_velocity_m_s[i];
        for (std::size_t c = 0; c < m; ++c) y -= theta[index_of(c)] * column(c, i);
        for (Eigen::Index a = 0; a < f; ++a) {
          const double xa = column(free[static_cast<std::size_t>(a)], i);
          if (xa == 0.0) continue;
          b(a) += w[i] * xa * y;
          for (Eigen::Index q = 0; q < f; ++q) A(a, q) += w[i] * xa * column(free[static_cast<std::size_t>(q)], i);
        }
      }
      const Eigen::VectorXd sol = A.ldlt().solve(b);
      for (Eigen::Index a = 0; a < f; ++a) {
        if (!std::isfinite(sol(a))) return -kInf;
        theta[index_of(free[static_cast<std::size_t>(a)])] = sol(a);
      }
    }
  }
  double s = 0.0;
  for (std::size_t i = 0; i < n; ++i) {
    double r = data_.velocity_m_s[i] - obs->star_velocity_m_s[i];
    for (std::size_t c = 0; c < m; ++c) r -= theta[index_of(c)] * column(c, i);
    s += r * r * w[i] - std::log(w[i]);
  }
  return -0.5 * (s + static_cast<double>(n) * std::log(constants::kTwoPi));
}

std::vector<double> NbodyVelocityTerm::residuals(std::span<const double> theta) const {
  const NbodyObservables* obs = signal_->at_data(theta);
  if (obs == nullptr) return {};
  std::vector<double> r(data_.size());
  for (std::size_t i = 0; i < data_.size(); ++i) {
    const double t = data_.time_days[i];
    double model = obs->star_velocity_m_s[i] + instruments_[static_cast<std::size_t>(data_.instrument[i])]->offset(theta);
    if (trend_ != nullptr) model += trend_->at(theta, t);
    r[i] = data_.velocity_m_s[i] - model;
  }
  return r;
}

// ---- Transit times --------------------------------------------------------------------------

NbodyTransitTimesTerm::NbodyTransitTimesTerm(const TransitData& times, double frame_reference_epoch_bjd,
                                             const NbodyPlanetBlock& planet, int position, const NbodySignal& signal,
                                             const TransitJitterBlock* jitter)
    : planet_(&planet), position_(position), signal_(&signal), jitter_(jitter) {
  const double dt = times.reference_epoch_bjd - frame_reference_epoch_bjd;
  const auto& engine = signal.engine_epochs().at(static_cast<std::size_t>(position));
  for (std::size_t i = 0; i < times.size(); ++i) {
    epoch_.push_back(times.epoch[i]);
    time_days_.push_back(times.time_days[i] + dt);
    error_days_.push_back(times.uncertainty_days[i]);
    const long long e = times.epoch[i] - signal.epoch_shift(position);
    slot_.push_back(static_cast<std::size_t>(std::lower_bound(engine.begin(), engine.end(), e) - engine.begin()));
  }
}

std::vector<const ParameterBlock*> NbodyTransitTimesTerm::reads() const {
  // Every planet pulls on this one: the term reads every N-body planet block.
  std::vector<const ParameterBlock*> out(signal_->planets().begin(), signal_->planets().end());
  if (jitter_ != nullptr) out.push_back(jitter_);
  return out;
}

double NbodyTransitTimesTerm::log_likelihood(std::span<const double> theta) const {
  const double j = jitter_ != nullptr ? jitter_->jitter(theta) : 0.0;
  if (!(j >= 0.0) || !std::isfinite(j)) return -kInf;
  const NbodyObservables* obs = signal_->at_data(theta);
  if (obs == nullptr) return -kInf;
  const std::vector<double>& model = obs->transit_times_days[static_cast<std::size_t>(position_)];
  double s = 0.0;
  for (std::size_t i = 0; i < time_days_.size(); ++i) {
    const double v = error_days_[i] * error_days_[i] + j * j;
    const double r = time_days_[i] - model[slot_[i]];
    s += r * r / v + std::log(constants::kTwoPi * v);
  }
  return -0.5 * s;
}

std::vector<double> NbodyTransitTimesTerm::residuals(std::span<const double> theta) const {
  const NbodyObservables* obs = signal_->at_data(theta);
  if (obs == nullptr) return {};
  const std::vector<double>& model = obs->transit_times_days[static_cast<std::size_t>(position_)];
  std::vector<double> r(time_days_.size());
  for (std::size_t i = 0; i < r.size(); ++i) r[i] = time_days_[i] - model[slot_[i]];
  return r;
}

}  // namespace apsides
