#include "apsides/model_priors.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <limits>

#include "apsides/constants.h"
#include "apsides/error.h"

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

struct InstrumentStats {
  double mean = 0.0;        // weighted mean velocity
  double sd = 0.0;          // unweighted standard deviation about the mean
  double median_err = 1.0;  // median stated uncertainty
};

struct DataStats {
  std::vector<InstrumentStats> inst;
  double range = 0.0;       // full range of velocities after removing each instrument's mean
  double median_err = 1.0;  // over all points
  double t_mid = 0.0;       // middle of the data (days after the reference epoch)
  double baseline = 0.0;
};

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

bool ends_with(const std::string& s, const std::string& suffix) {
  return s.size() >= suffix.size() && s.compare(s.size() - suffix.size(), suffix.size(), suffix) == 0;
}

// Which slot of a planet block a name refers to (0..4), or -1.
int planet_slot(const std::string& name) {
  static const char* kSlots[] = {".period_d", ".K_ms", ".secosw", ".sesinw", ".t_conj_d"};
  for (int s = 0; s < 5; ++s)
    if (ends_with(name, kSlots[s])) return s;
  return -1;
}

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

void check_positive_support(const Prior& p, const std::string& where, bool strictly) {
  const double lo = p.lower();
  const bool ok = strictly ? lo > 0.0 : lo >= 0.0;
  if (!ok) {
    throw InputError(fmt::format(
        "{}: {} allows {} values; use a prior with min {} 0 (e.g. truncated-normal or log-uniform)",
        where, p.describe(), strictly ? "zero or negative" : "negative", strictly ? ">" : ">="));
  }
}

}  // namespace

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

ModelPriors build_priors(const VelocityData& data, const ModelLayout& layout,
                         const SearchSettings& search, const ModelSettings& model,
                         const std::vector<PriorSpec>& overrides, int planets_allowed, const StarSpec* star,
                         const TransitData* transits) {
  const DataStats st = data_stats(data);
  const PeriodRange pr = default_period_range(data, search);
  const std::vector<std::string> names = layout.names(data.instrument_names);
  ModelPriors mp;
  mp.parameter.resize(layout.n_params());
  mp.eccentricity.resize(static_cast<std::size_t>(layout.n_planets));
  mp.order_periods = true;

  const double knee = std::max(st.median_err, 1e-6);
  const double k_max = std::max(5.0 * st.range, 100.0 * knee);
  EccentricityPrior ep_default;
  ep_default.kind = model.eccentricity;
  for (int j = 0; j < layout.n_planets; ++j) {
    const std::size_t k = layout.planet_index(j);
    mp.parameter[k] = Prior::log_uniform(pr.min_days, pr.max_days);
    mp.parameter[k + 1] = Prior::modified_jeffreys(knee, k_max);
    const bool circ = model.eccentricity == EccentricityPriorKind::kCircular;
    mp.parameter[k + 2] = circ ? Prior::fixed(0.0) : Prior::uniform(-1.0, 1.0);
    mp.parameter[k + 3] = circ ? Prior::fixed(0.0) : Prior::uniform(-1.0, 1.0);
    mp.parameter[k + 4] = Prior::uniform(st.t_mid - 0.5 * pr.max_days, st.t_mid + 0.5 * pr.max_days);
    mp.eccentricity[static_cast<std::size_t>(j)] = ep_default;
  }
  const double w = 10.0 * (st.range + st.median_err);
  for (int i = 0; i < layout.n_instruments; ++i) {
    const InstrumentStats& is = st.inst.at(static_cast<std::size_t>(i));
    mp.parameter[layout.offset_index(i)] = Prior::uniform(is.mean - w, is.mean + w);
    if (layout.fit_jitter) {
      mp.parameter[layout.jitter_index(i)] = Prior::half_normal(std::max({is.sd, 2.0 * is.median_err, 1e-6}));
    }
  }
  const double base = std::max(st.baseline, 1.0);
  const double rng = std::max(st.range, st.median_err);
  if (layout.trend_order() >= 1)
    mp.parameter[layout.trend_index(1)] = Prior::uniform(-10.0 * rng / base, 10.0 * rng / base);
  if (layout.trend_order() >= 2)
    mp.parameter[layout.trend_index(2)] = Prior::uniform(-10.0 * rng / (base * base), 10.0 * rng / (base * base));

  for (int j : layout.transit_jitter_planets) {
    double scale = 1e-3;
    if (transits != nullptr) {
      const TransitData td = transits->for_planet(planet_label(j));
      if (td.size() > 0) {
        std::vector<double> u = td.uncertainty_days;
        std::nth_element(u.begin(), u.begin() + static_cast<std::ptrdiff_t>(u.size() / 2), u.end());
        scale = u[u.size() / 2];
      }
    }
    mp.parameter[static_cast<std::size_t>(layout.transit_jitter_index(j))] = Prior::half_normal(scale);
  }

  // Overrides.
  const int allowed = std::max(planets_allowed < 0 ? layout.n_planets : planets_allowed, layout.n_planets);
  ModelLayout wide = layout;
  wide.n_planets = allowed;
  const std::vector<std::string> wide_names = wide.names(data.instrument_names);
  // Period-prior upper bounds per planet, for t_conj windows tied to an overridden period.
  for (const PriorSpec& spec : overrides) {
    const std::string& key = spec.parameter;
    // "project.toml:LINE: priors.KEY" when the entry's line is known.
    const std::string where = (spec.origin.empty() ? "" : spec.origin + ": ") + "priors." + key;
    if (spec.eccentricity) {
      if (key == "eccentricity") {
        for (auto& e : mp.eccentricity) e = *spec.eccentricity;
        continue;
      }
      const std::string label = key.substr(0, key.size() - std::string(".eccentricity").size());
      const int j = planet_of_label(label);
      if (j < 0 || j >= allowed) {
        throw InputError(fmt::format("{}: this model has no planet '{}' (planets: {})", where, label,
                                     allowed == 0 ? std::string("none") : planet_label(0) + (allowed > 1 ? ".." + planet_label(allowed - 1) : "")));
      }
      if (j < layout.n_planets) mp.eccentricity[static_cast<std::size_t>(j)] = *spec.eccentricity;
      continue;
    }
    if (const std::string msg = spec.prior.Validate(); !msg.empty())
      throw InputError(fmt::format("{}: impossible prior: {}", where, msg));
    const auto it = std::find(wide_names.begin(), wide_names.end(), key);
    if (it == wide_names.end()) {
      throw InputError(fmt::format("{}: this model has no parameter '{}' (parameters: {}; and "
                                   "\"eccentricity\" or \"<planet>.eccentricity\")",
                                   where, key, all_names_text(wide_names)));
    }
    const int slot = planet_slot(key);
    const auto idx = static_cast<std::size_t>(it - wide_names.begin());
    const bool is_planet = idx < static_cast<std::size_t>(5 * allowed);
    if (is_planet && (slot == 2 || slot == 3)) {
      throw InputError(fmt::format("{}: set the eccentricity prior with \"{}.eccentricity\" instead", where,
                                   key.substr(0, key.find('.'))));
    }
    if (is_planet && slot == 0) check_positive_support(spec.prior, where, true);
    if (is_planet && slot == 1) check_positive_support(spec.prior, where, false);
    if (!is_planet && (ends_with(key, ".jitter_ms") || ends_with(key, ".transit_jitter_d")))
      check_positive_support(spec.prior, where, false);
    if (is_planet) {
      const int j = static_cast<int>(idx / 5);
      if (j >= layout.n_planets) continue;  // for a larger model of this run
      mp.parameter[layout.planet_index(j) + static_cast<std::size_t>(slot)] = spec.prior;
    } else {
      // Same name in the narrower layout.
      const std::vector<std::string> own = layout.names(data.instrument_names);
      const auto jt = std::find(own.begin(), own.end(), key);
      mp.parameter[static_cast<std::size_t>(jt - own.begin())] = spec.prior;
    }
  }
  // A period prior changed by an override but t_conj left at its default: widen the
  // window to that period prior's upper bound, so every phase stays reachable.
  for (int j = 0; j < layout.n_planets; ++j) {
    const std::size_t k = layout.planet_index(j);
    const bool circ = mp.eccentricity[static_cast<std::size_t>(j)].kind == EccentricityPriorKind::kCircular;
    mp.parameter[k + 2] = circ ? Prior::fixed(0.0) : Prior::uniform(-1.0, 1.0);
    mp.parameter[k + 3] = circ ? Prior::fixed(0.0) : Prior::uniform(-1.0, 1.0);
    const std::string tkey = names[k + 4];
    const bool t_overridden = std::any_of(overrides.begin(), overrides.end(),
                                          [&](const PriorSpec& s) { return s.parameter == tkey; });
    if (t_overridden) continue;
    double pmax = mp.parameter[k].upper();
    if (!std::isfinite(pmax)) {
      // A normal period prior: 10 sd above the mean is beyond any reachable period.
      pmax = mp.parameter[k].kind == PriorKind::kFixed ? mp.parameter[k].a : mp.parameter[k].a + 10.0 * mp.parameter[k].b;
    }
    pmax = std::max(pmax, 1e-6);
    mp.parameter[k + 4] = Prior::uniform(st.t_mid - 0.5 * pmax, st.t_mid + 0.5 * pmax);
  }
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
  const std::vector<std::string> names = layout.names(instrument_names);
  for (std::size_t i = 0; i < theta.size() && i < priors.parameter.size(); ++i) {
    const bool hk = i < static_cast<std::size_t>(5 * layout.n_planets) && (i % 5 == 2 || i % 5 == 3);
    if (hk) continue;
    const Prior& p = priors.parameter[i];
    const bool ok = p.kind == PriorKind::kFixed ? theta[i] == p.a : std::isfinite(p.log_density(theta[i]));
    if (!ok) return names[i];
  }
  for (int j = 0; j < layout.n_planets; ++j) {
    const std::size_t k = layout.planet_index(j);
    if (!std::isfinite(priors.eccentricity[static_cast<std::size_t>(j)].log_density_hk(theta[k + 2], theta[k + 3])))
      return planet_label(j) + ".eccentricity";
    if (!priors.periastron_allowed(theta[k], theta[k + 2], theta[k + 3])) return planet_label(j) + ".eccentricity";
  }
  if (const int j = priors.first_unordered_planet(theta, layout.n_planets); j >= 0) return names[layout.planet_index(j)];
  return "";
}

void require_in_support(const ModelPriors& priors, const ModelLayout& layout,
                        const std::vector<std::string>& instrument_names,
                        std::span<const double> theta, const std::string& what) {
  const std::string bad = first_outside_support(priors, layout, instrument_names, theta);
  if (bad.empty()) return;
  const std::vector<std::string> names = layout.names(instrument_names);
  const auto it = std::find(names.begin(), names.end(), bad);
  if (it != names.end()) {
    const auto i = static_cast<std::size_t>(it - names.begin());
    const bool order = (i % 5 == 0) && i < static_cast<std::size_t>(5 * layout.n_planets) && i > 0 &&
                       priors.parameter[i].log_density(theta[i]) > -std::numeric_limits<double>::infinity();
    if (order) {
      throw InputError(fmt::format("{}: {} = {} is not above the previous planet's period {} (planets are "
                                   "labelled by increasing period)",
                                   what, bad, theta[i], theta[i - 5]));
    }
    throw InputError(fmt::format("{}: {} = {} is outside its prior {}", what, bad, theta[i],
                                 priors.parameter[i].describe()));
  }
  const int j = planet_of_label(bad.substr(0, bad.find('.')));
  const std::size_t k = layout.planet_index(j);
  const double e = theta[k + 2] * theta[k + 2] + theta[k + 3] * theta[k + 3];
  throw InputError(fmt::format("{}: {} = {} is outside its prior {}", what, bad, e,
                               priors.eccentricity[static_cast<std::size_t>(j)].describe()));
}

std::vector<std::string> describe_priors(const ModelPriors& priors, const ModelLayout& layout,
                                         const std::vector<std::string>& instrument_names) {
  const std::vector<std::string> names = layout.names(instrument_names);
  std::vector<std::string> out;
  for (std::size_t i = 0; i < names.size(); ++i) {
    const bool hk = i < static_cast<std::size_t>(5 * layout.n_planets) && (i % 5 == 2 || i % 5 == 3);
    if (hk) {
      if (i % 5 == 2) {
        const int j = static_cast<int>(i / 5);
        out.push_back(fmt::format("{:<22} {}", planet_label(j) + ".eccentricity",
                                  priors.eccentricity[static_cast<std::size_t>(j)].describe()));
      }
      continue;
    }
    out.push_back(fmt::format("{:<22} {}", names[i], priors.parameter[i].describe()));
  }
  if (priors.order_periods && layout.n_planets > 1) {
    std::string fixed;
    for (int j = 0; j < layout.n_planets; ++j)
      if (priors.is_label_fixed(j)) fixed += (fixed.empty() ? "" : ", ") + planet_label(j);
    out.push_back(fixed.empty() ? "(planets ordered by period: P_b < P_c < ...)"
                                : fmt::format("(planets ordered by period, except {} named by transit times)", fixed));
  }
  if (priors.periastron_limit_active() && layout.n_planets > 0)
    out.push_back(fmt::format("(orbits with periastron a(1 - e) inside the star, < {:.3g} R_sun, excluded)",
                              priors.min_periastron_au * constants::kAu / constants::kRSun));
  return out;
}

}  // namespace apsides
