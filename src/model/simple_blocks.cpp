// The instrument, trend, transit-jitter and transit-only ephemeris blocks.
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <stdexcept>

#include "apsides/data.h"
#include "apsides/keplerian_model.h"
#include "apsides/parameter_blocks.h"
#include "model/prior_context.h"

namespace apsides {

// ---- Instrument ---------------------------------------------------------------------------

InstrumentBlock::InstrumentBlock(std::string name, int instrument, bool fit_jitter)
    : ParameterBlock(BlockKind::kInstrument, name), instrument_(instrument) {
  params_.push_back({name + ".offset_ms", "m/s", true});
  if (fit_jitter) params_.push_back({name + ".jitter_ms", "m/s", false});
}

void InstrumentBlock::set_default_priors(const PriorContext& c, ModelPriors& priors) const {
  const InstrumentStats& is = c.stats.inst.at(static_cast<std::size_t>(instrument_));
  const double w = 10.0 * (c.stats.range + c.stats.median_err);
  priors.parameter[index(kOffset)] = Prior::uniform(is.mean - w, is.mean + w);
  if (has_jitter())
    priors.parameter[index(kJitter)] = Prior::half_normal(std::max({is.sd, 2.0 * is.median_err, 1e-6}));
}

void InstrumentBlock::check_override(int slot, const Prior& prior, const std::string& where) const {
  if (slot == kJitter) require_positive_support(prior, where, false);
}

double InstrumentBlock::fit_start(int slot, const Prior& p) const {
  if (p.kind == PriorKind::kFixed) return p.a;
  if (slot == kJitter) return std::clamp(1.0, p.lower(), std::isfinite(p.upper()) ? p.upper() : 1.0);
  return 0.0;
}

// ---- Trend ----------------------------------------------------------------------------------

TrendBlock::TrendBlock(int order) : ParameterBlock(BlockKind::kTrend, "trend") {
  if (order >= 1) params_.push_back({"trend.c1_ms_per_d", "m/s/d", true});
  if (order >= 2) params_.push_back({"trend.c2_ms_per_d2", "m/s/d^2", true});
}

double TrendBlock::at(std::span<const double> theta, double t) const {
  double v = 0.0;
  if (order() >= 1) v += coefficient(theta, 1) * t;
  if (order() >= 2) v += coefficient(theta, 2) * t * t;
  return v;
}

void TrendBlock::set_default_priors(const PriorContext& c, ModelPriors& priors) const {
  const double base = std::max(c.stats.baseline, 1.0);
  const double rng = std::max(c.stats.range, c.stats.median_err);
  if (order() >= 1) priors.parameter[coefficient_index(1)] = Prior::uniform(-10.0 * rng / base, 10.0 * rng / base);
  if (order() >= 2)
    priors.parameter[coefficient_index(2)] = Prior::uniform(-10.0 * rng / (base * base), 10.0 * rng / (base * base));
}

// ---- Transit-time jitter ----------------------------------------------------------------------

TransitJitterBlock::TransitJitterBlock(std::string planet_label)
    : ParameterBlock(BlockKind::kTransitJitter, planet_label) {
  params_.push_back({planet_label + ".transit_jitter_d", "d", false});
}

void TransitJitterBlock::set_default_priors(const PriorContext& c, ModelPriors& priors) const {
  // Half-normal at the median stated uncertainty of the planet's times (1e-3 d without).
  double scale = 1e-3;
  if (c.transits != nullptr) {
    const TransitData td = c.transits->for_planet(label());
    if (td.size() > 0) {
      std::vector<double> u = td.uncertainty_days;
      std::nth_element(u.begin(), u.begin() + static_cast<std::ptrdiff_t>(u.size() / 2), u.end());
      scale = u[u.size() / 2];
    }
  }
  priors.parameter[index(0)] = Prior::half_normal(scale);
}

void TransitJitterBlock::check_override(int, const Prior& prior, const std::string& where) const {
  require_positive_support(prior, where, false);
}

double TransitJitterBlock::fit_step(int, std::span<const double>, double, double width) const {
  return 0.3 * std::max(width / 8.0, 1e-6);
}

double TransitJitterBlock::ball_scale(int slot, std::span<const double> theta) const {
  return 1e-3 * std::abs(value(theta, slot)) + 1e-7;
}

// ---- Transit-only ephemeris --------------------------------------------------------------------

TransitEphemerisBlock::TransitEphemerisBlock(std::string label)
    : OrbitBlock(BlockKind::kTransitEphemeris, label) {
  params_ = {{label + ".period_d", "d", false}, {label + ".t_conj_d", "d (BJD_TDB - reference epoch)", false}};
}

void TransitEphemerisBlock::set_default_priors(const PriorContext&, ModelPriors&) const {
  throw std::logic_error("a transit-only ephemeris takes the priors of the planet it stands for");
}

std::vector<CubeCoordinate> TransitEphemerisBlock::cube_coordinates(const ModelPriors&, bool,
                                                                    const std::vector<bool>&) const {
  return {{kPeriod, CubeRole::kQuantile}, {kTConj, CubeRole::kPhase}};
}

void TransitEphemerisBlock::from_cube(std::span<const double> u, std::span<const CubeCoordinate>,
                                      const ModelPriors& priors, std::span<double> theta) const {
  theta[index(kPeriod)] = prior_of(priors, kPeriod).quantile(u[0]);
  const Prior& tp = prior_of(priors, kTConj);
  theta[index(kTConj)] = 0.5 * (tp.a + tp.b) + (u[1] - 0.5) * theta[index(kPeriod)];
}

}  // namespace apsides

// ---- Gaussian-process hyperparameters ---------------------------------------------------

namespace apsides {

GpBlock::GpBlock(gp::KernelKind kernel, const std::vector<std::string>& instrument_names, bool per_instrument_amplitude)
    : ParameterBlock(BlockKind::kGaussianProcess, "gp"), kernel_(kernel) {
  for (const auto& p : gp::kernel_parameters(kernel)) params_.push_back({"gp." + p.name, p.unit, false});
  n_kernel_ = size();
  if (!per_instrument_amplitude || instrument_names.size() < 2) return;
  scale_slot_.assign(instrument_names.size(), -1);
  for (std::size_t i = 1; i < instrument_names.size(); ++i) {
    scale_slot_[i] = size();
    params_.push_back({"gp.scale_" + instrument_names[i], "", false});
  }
}

double GpBlock::scale(std::span<const double> theta, int instrument) const {
  if (scale_slot_.empty()) return 1.0;
  const int slot = scale_slot_.at(static_cast<std::size_t>(instrument));
  return slot < 0 ? 1.0 : value(theta, slot);
}

void GpBlock::set_default_priors(const PriorContext& c, ModelPriors& priors) const {
  const DataStats& st = c.stats;
  const double err = std::max(st.median_err, 1e-6);
  const double spread = std::max(0.5 * st.range, err);
  const double base = std::max(st.baseline, 2.0);
  // The rotation period: near the activity indicators' period when they show one
  // (stated in the report), else anywhere from 1 d to half the baseline.
  const bool hint = std::isfinite(c.rotation_hint_days) && c.rotation_hint_days > 0.0;
  const Prior rotation = hint ? Prior::log_uniform(c.rotation_hint_days / 1.5, c.rotation_hint_days * 1.5)
                              : Prior::log_uniform(1.0, std::max(2.0, 0.5 * base));
  const Prior timescale = Prior::log_uniform(1.0, base);
  for (int s = 0; s < n_kernel_; ++s) {
    const std::string& n = info(s).name;
    Prior p = Prior::log_uniform(0.1, 10.0);  // quality factors, smoothness
    if (n == "gp.amplitude_ms") p = Prior::log_uniform(0.01 * err, 10.0 * spread);
    else if (n == "gp.rotation_period_d") p = rotation;
    else if (n == "gp.period_d") p = kernel_ == gp::KernelKind::kQuasiPeriodic ? rotation : Prior::log_uniform(1.0, base);
    else if (n == "gp.timescale_d" || n == "gp.evolution_timescale_d") p = timescale;
    else if (n == "gp.quality") p = kernel_ == gp::KernelKind::kOscillator ? Prior::log_uniform(0.1, 100.0) : Prior::log_uniform(0.1, 50.0);
    else if (n == "gp.quality_difference") p = Prior::log_uniform(0.01, 50.0);
    else if (n == "gp.mix") p = Prior::uniform(0.0, 1.0);
    else if (n == "gp.epsilon_per_d") p = Prior::fixed(0.01);
    priors.parameter[index(s)] = p;
  }
  for (int s = n_kernel_; s < size(); ++s) priors.parameter[index(s)] = Prior::log_uniform(0.1, 10.0);
}

void GpBlock::check_override(int slot, const Prior& prior, const std::string& where) const {
  if (slot >= n_kernel_) return require_positive_support(prior, where, true);
  const auto& p = gp::kernel_parameters(kernel_).at(static_cast<std::size_t>(slot));
  if (p.lower == 0.0) require_positive_support(prior, where, p.lower_open);
}

double GpBlock::fit_start(int slot, const Prior& p) const {
  switch (p.kind) {
    case PriorKind::kFixed: return p.a;
    case PriorKind::kLogUniform: return std::sqrt(p.a * p.b);
    case PriorKind::kUniform: return 0.5 * (p.a + p.b);
    case PriorKind::kNormal:
    case PriorKind::kTruncatedNormal: return std::clamp(p.a, p.lower(), p.upper());
    default: return ParameterBlock::fit_start(slot, p);
  }
}

double GpBlock::fit_step(int slot, std::span<const double> theta, double, double width) const {
  return std::max(0.1 * std::fabs(value(theta, slot)), 1e-3 * std::min(width, 1.0));
}

}  // namespace apsides
