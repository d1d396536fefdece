#include "apsides/model_priors.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <limits>

#include "apsides/constants.h"
#include "apsides/error.h"
#include "apsides/parameter_blocks.h"
#include "model/prior_context.h"

namespace apsides {
namespace {

double median_of(std::vector<double> v) {
  if (v.empty()) return 0.0;
  const std::size_t m = v.size() / 2;
  std::nth_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(m), v.end());
  double x = v[m];
  if (v.size() % 2 == 0) x = 0.5 * (x + *std::max_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(m)));
  return x;
}

}  // namespace

DataStats data_stats(const VelocityData& d) {
  DataStats s;
  const std::size_t ni = d.n_instruments();
  s.inst.resize(ni);
  std::vector<double> sw(ni, 0.0), swy(ni, 0.0);
  std::vector<std::vector<double>> errs(ni);
  for (std::size_t i = 0; i < d.size(); ++i) {
    const auto k = static_cast<std::size_t>(d.instrument[i]);
    const double w = 1.0 / (d.uncertainty_m_s[i] * d.uncertainty_m_s[i]);
    sw[k] += w;
    swy[k] += w * d.velocity_m_s[i];
    errs[k].push_back(d.uncertainty_m_s[i]);
  }
  std::vector<double> ss(ni, 0.0);
  std::vector<std::size_t> cnt(ni, 0);
  double lo = std::numeric_limits<double>::infinity(), hi = -lo;
  for (std::size_t k = 0; k < ni; ++k) s.inst[k].mean = sw[k] > 0 ? swy[k] / sw[k] : 0.0;
  for (std::size_t i = 0; i < d.size(); ++i) {
    const auto k = static_cast<std::size_t>(d.instrument[i]);
    const double r = d.velocity_m_s[i] - s.inst[k].mean;
    ss[k] += r * r;
    ++cnt[k];
    lo = std::min(lo, r);
    hi = std::max(hi, r);
  }
  for (std::size_t k = 0; k < ni; ++k) {
    s.inst[k].sd = cnt[k] > 1 ? std::sqrt(ss[k] / static_cast<double>(cnt[k] - 1)) : 0.0;
    s.inst[k].median_err = errs[k].empty() ? 1.0 : median_of(errs[k]);
  }
  s.range = d.size() > 0 ? hi - lo : 0.0;
  s.median_err = d.size() > 0 ? median_of(d.uncertainty_m_s) : 1.0;
  if (d.size() > 0) {
    const auto [tmin, tmax] = std::minmax_element(d.time_days.begin(), d.time_days.end());
    s.t_mid = 0.5 * (*tmin + *tmax);
    s.baseline = *tmax - *tmin;
  }
  return s;
}

namespace {

// Planet index of a label "b", "c", ... (-1 if not a planet label).
int planet_of_label(const std::string& label) {
  if (label.size() != 1 || label[0] < 'b' || label[0] > 'z') return -1;
  return label[0] - 'b';
}

std::string all_names_text(const std::vector<std::string>& names) {
  std::string s;
  for (const auto& n : names) s += (s.empty() ? "" : ", ") + n;
  return s;
}

std::string where_of(const PriorSpec& spec) {
  // "project.toml:LINE: priors.KEY" when the entry's line is known.
  return (spec.origin.empty() ? "" : spec.origin + ": ") + "priors." + spec.parameter;
}

// "eccentricity" (every planet) or "<p>.eccentricity" (planet p; -1 means every planet).
void apply_eccentricity_override(const PriorSpec& spec, int allowed, int n_planets, ModelPriors& mp) {
  if (spec.parameter == "eccentricity") {
    for (auto& e : mp.eccentricity) e = *spec.eccentricity;
    return;
  }
  const std::string label = spec.parameter.substr(0, spec.parameter.size() - std::string(".eccentricity").size());
  const int j = planet_of_label(label);
  if (j < 0 || j >= allowed) {
    throw InputError(fmt::format(
        "{}: this model has no planet '{}' (planets: {})", where_of(spec), label,
        allowed == 0 ? std::string("none") : planet_label(0) + (allowed > 1 ? ".." + planet_label(allowed - 1) : "")));
  }
  if (j < n_planets) mp.eccentricity[static_cast<std::size_t>(j)] = *spec.eccentricity;
}

// A [priors] entry naming a parameter: checked by the block that owns it (in the largest
// model of the run), applied when this model has the parameter.
void apply_parameter_override(const PriorSpec& spec, const ParameterLayout& wide, const ParameterLayout& own,
                              ModelPriors& mp) {
  const std::string where = where_of(spec);
  if (const std::string msg = spec.prior.Validate(); !msg.empty())
    throw InputError(fmt::format("{}: impossible prior: {}", where, msg));
  const std::size_t i = wide.find(spec.parameter);
  if (i == ParameterLayout::npos) {
    throw InputError(fmt::format("{}: this model has no parameter '{}' (parameters: {}; and "
                                 "\"eccentricity\" or \"<planet>.eccentricity\")",
                                 where, spec.parameter, all_names_text(wide.names())));
  }
  const ParameterBlock& block = wide.block_at(i);
  block.check_override(static_cast<int>(i - block.first()), spec.prior, where);
  if (const std::size_t k = own.find(spec.parameter); k != ParameterLayout::npos) mp.parameter[k] = spec.prior;
}

}  // namespace

void require_positive_support(const Prior& p, const std::string& where, bool strictly) {
  const double lo = p.lower();
  const bool ok = strictly ? lo > 0.0 : lo >= 0.0;
  if (!ok) {
    throw InputError(fmt::format(
        "{}: {} allows {} values; use a prior with min {} 0 (e.g. truncated-normal or log-uniform)",
        where, p.describe(), strictly ? "zero or negative" : "negative", strictly ? ">" : ">="));
  }
}

PeriodRange default_period_range(const VelocityData& data, const SearchSettings& search) {
  PeriodRange r;
  r.min_days = search.min_period_d.value_or(0.5);
  const double baseline = data.baseline_days();
  r.max_days = search.max_period_d.value_or(std::max(3.0 * baseline, 2.0 * r.min_days));
  if (!(r.min_days > 0.0) || !std::isfinite(r.min_days))
    throw InputError(fmt::format("search.min_period_d = {}: must be > 0", r.min_days));
  if (!(r.max_days > r.min_days) || !std::isfinite(r.max_days))
    throw InputError(fmt::format("search.max_period_d = {}: must be above min_period_d = {}", r.max_days,
                                 r.min_days));
  return r;
}

ModelPriors build_priors(const VelocityData& data, const ModelLayout& layout, const SearchSettings& search,
                         const ModelSettings& model, const std::vector<PriorSpec>& overrides, int planets_allowed,
                         const StarSpec* star, const TransitData* transits) {
  PriorContext context;
  context.stats = data_stats(data);
  context.periods = default_period_range(data, search);
  context.eccentricity.kind = model.eccentricity;
  context.transits = transits;
  context.rotation_hint_days = model.rotation_hint_d;
  const ParameterLayout blocks = ParameterLayout::from(layout, data.instrument_names);
  ModelPriors mp;
  mp.parameter.resize(blocks.n_params());
  mp.eccentricity.resize(static_cast<std::size_t>(layout.n_planets));
  mp.order_periods = true;
  for (const auto& b : blocks.blocks()) b->set_default_priors(context, mp);

  // Overrides, checked against the largest model of this run.
  const int allowed = std::max(planets_allowed < 0 ? layout.n_planets : planets_allowed, layout.n_planets);
  ModelLayout wide_layout = layout;
  wide_layout.n_planets = allowed;
  const ParameterLayout wide = ParameterLayout::from(wide_layout, data.instrument_names);
  std::vector<std::string> overridden;
  for (const PriorSpec& spec : overrides) {
    if (spec.eccentricity) {
      apply_eccentricity_override(spec, allowed, layout.n_planets, mp);
      continue;
    }
    apply_parameter_override(spec, wide, blocks, mp);
    overridden.push_back(spec.parameter);
  }
  for (const auto& b : blocks.blocks()) b->finish_priors(context, overridden, mp);
  if (star != nullptr && model.periastron_outside_star) {
    if (const auto r = periastron_limit_radius(*star)) {
      mp.star_mass_msun = *star->mass_msun;
      mp.min_periastron_au = r->radius_rsun * constants::kRSun / constants::kAu;
    }
  }
  return mp;
}

std::optional<StarRadius> periastron_limit_radius(const StarSpec& star) {
  if (!star.mass_msun || !(*star.mass_msun > 0.0)) return std::nullopt;
  if (star.radius_rsun && *star.radius_rsun > 0.0) return StarRadius{*star.radius_rsun, false};
  // Main-sequence mass-radius relation R ~ M^0.8 (common practice; rough, but only the
  // edge of an excluded region depends on it).
  return StarRadius{std::pow(*star.mass_msun, 0.8), true};
}

std::string first_outside_support(const ModelPriors& priors, const ModelLayout& layout,
                                  const std::vector<std::string>& instrument_names,
                                  std::span<const double> theta) {
  return ParameterLayout::from(layout, instrument_names).outside_support(theta, priors);
}

void require_in_support(const ModelPriors& priors, const ModelLayout& layout,
                        const std::vector<std::string>& instrument_names, std::span<const double> theta,
                        const std::string& what) {
  const ParameterLayout blocks = ParameterLayout::from(layout, instrument_names);
  const std::string bad = blocks.outside_support(theta, priors);
  if (bad.empty()) return;
  if (const std::size_t i = blocks.find(bad); i != ParameterLayout::npos) {
    // A period inside its own prior can only be out of order.
    const int j = blocks.first_unordered_planet(theta, priors);
    if (j > 0 && blocks.planet(j).index(PlanetBlock::kPeriod) == i &&
        priors.parameter[i].log_density(theta[i]) > -std::numeric_limits<double>::infinity()) {
      throw InputError(fmt::format("{}: {} = {} is not above the previous planet's period {} (planets are "
                                   "labelled by increasing period)",
                                   what, bad, theta[i], blocks.planet(j - 1).period(theta)));
    }
    throw InputError(fmt::format("{}: {} = {} is outside its prior {}", what, bad, theta[i],
                                 priors.parameter[i].describe()));
  }
  for (const PlanetBlock* p : blocks.planets()) {
    if (p->joint_name() != bad) continue;
    const double e = p->planet(theta).ecc();
    throw InputError(fmt::format("{}: {} = {} is outside its prior {}", what, bad, e,
                                 p->eccentricity_prior(priors).describe()));
  }
  throw InputError(fmt::format("{}: {} is outside its prior", what, bad));
}

std::vector<std::string> describe_priors(const ModelPriors& priors, const ModelLayout& layout,
                                         const std::vector<std::string>& instrument_names) {
  return ParameterLayout::from(layout, instrument_names).describe_priors(priors);
}

std::vector<std::string> prior_notes(const ModelPriors& priors, const ModelLayout& layout,
                                     const std::vector<std::string>& instrument_names) {
  return ParameterLayout::from(layout, instrument_names).prior_notes(priors);
}

}  // namespace apsides
