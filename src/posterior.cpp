#include "apsides/posterior.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <numeric>
#include <random>

#include "apsides/constants.h"
#include "apsides/error.h"
#include "apsides/orbit.h"

namespace apsides {

std::size_t DerivedChains::index(const std::string& name) const {
  return static_cast<std::size_t>(std::find(names.begin(), names.end(), name) - names.begin());
}

DerivedChains derive_posterior(std::span<const double> samples, const ModelLayout& layout,
                               const DerivedOptions& options) {
  DerivedChains out;
  const ParameterLayout blocks = ParameterLayout::from(layout, {});
  const std::vector<const PlanetBlock*> planet_blocks = blocks.planets();
  const std::size_t dim = blocks.n_params();
  const std::size_t n = dim ? samples.size() / dim : 0;
  const bool mass = options.star_mass_msun.has_value() && *options.star_mass_msun > 0;
  struct Column { const char* name; const char* unit; const char* description; };
  std::vector<Column> per_planet = {
      {"period_d", "d", "orbital period"},
      {"K_ms", "m/s", "velocity semi-amplitude"},
      {"ecc", "", "eccentricity"},
      {"omega_deg", "deg", "argument of periastron of the star's orbit, in [0, 360)"},
      {"t_conj_bjd", "BJD_TDB", "time of inferior conjunction (transit) of the planet"},
      {"t_peri_bjd", "BJD_TDB", "time of periastron"}};
  if (mass) {
    per_planet.push_back({"msini_mjup", "M_jup", "minimum mass m sin i (exact mass function), Jupiter masses"});
    per_planet.push_back({"msini_mearth", "M_earth", "minimum mass m sin i (exact mass function), Earth masses"});
    per_planet.push_back({"a_au", "au", "semi-major axis of the relative orbit"});
    per_planet.push_back({"r_peri_au", "au", "periastron distance a (1 - e)"});
    per_planet.push_back({"r_apo_au", "au", "apastron distance a (1 + e)"});
  }
  for (const PlanetBlock* b : planet_blocks)
    for (const auto& c : per_planet) {
      out.names.push_back(b->label() + "." + c.name);
      out.units.push_back(c.unit);
      out.descriptions.push_back(c.description);
    }
  if (mass) {
    out.names.push_back("star.mass_msun");
    out.units.push_back("M_sun");
    out.descriptions.push_back("stellar mass drawn per sample from its stated uncertainty");
  }
  out.values.assign(out.names.size(), std::vector<double>(n));
  std::mt19937_64 rng(options.seed);
  std::normal_distribution<double> normal(0.0, 1.0);
  const std::size_t np = per_planet.size();
  std::vector<Planet> planets(planet_blocks.size());
  for (std::size_t i = 0; i < n; ++i) {
    const std::span<const double> theta = samples.subspan(i * dim, dim);
    double m_star = mass ? *options.star_mass_msun : 0.0;
    if (mass && options.star_mass_err_msun > 0) {
      do {
        m_star = *options.star_mass_msun + options.star_mass_err_msun * normal(rng);
      } while (m_star <= 0);
    }
    for (std::size_t p = 0; p < planet_blocks.size(); ++p) planets[p] = planet_blocks[p]->planet(theta);
    std::stable_sort(planets.begin(), planets.end(),
                     [](const Planet& a, const Planet& b) { return a.period_days < b.period_days; });
    for (std::size_t p = 0; p < planets.size(); ++p) {
      const Planet& pl = planets[p];
      const double e = pl.ecc();
      const double w = pl.omega_rad();
      double w_deg = w * 180.0 / constants::kPi;
      if (w_deg < 0) w_deg += 360.0;
      std::vector<double> v = {pl.period_days, pl.semi_amplitude_m_s, e, w_deg,
                               pl.t_conj_days + options.reference_epoch_bjd,
                               time_of_periastron(pl.period_days, e, w, pl.t_conj_days) + options.reference_epoch_bjd};
      if (mass) {
        const double m = minimum_mass_msun(pl.period_days, pl.semi_amplitude_m_s, e, m_star);
        const double a = semi_major_axis_au(pl.period_days, m_star, m);
        v.insert(v.end(), {msun_to_mjup(m), msun_to_mearth(m), a, periastron_distance(a, e), apastron_distance(a, e)});
      }
      for (std::size_t c = 0; c < np; ++c) out.values[p * np + c][i] = v[c];
    }
    if (mass) out.values.back()[i] = m_star;
  }
  return out;
}

double percentile(std::vector<double> values, double pct) {
  if (values.empty()) return std::numeric_limits<double>::quiet_NaN();
  std::sort(values.begin(), values.end());
  const double h = (static_cast<double>(values.size()) - 1.0) * pct / 100.0;
  const std::size_t lo = static_cast<std::size_t>(std::floor(h));
  const std::size_t hi = std::min(lo + 1, values.size() - 1);
  return values[lo] + (h - static_cast<double>(lo)) * (values[hi] - values[lo]);
}

Quantiles quantiles(std::vector<double> values) {
  Quantiles q;
  if (values.empty()) {
    q.median = q.minus = q.plus = std::numeric_limits<double>::quiet_NaN();
    return q;
  }
  std::sort(values.begin(), values.end());
  const double q16 = percentile(values, 15.865525393145708);  // Phi(-1)
  const double q50 = percentile(values, 50.0);
  const double q84 = percentile(values, 84.13447460685429);   // Phi(+1)
  q.median = q50;
  q.minus = q50 - q16;
  q.plus = q84 - q50;
  return q;
}

std::string format_with_uncertainty(const Quantiles& q) {
  if (!std::isfinite(q.median)) return "nan";
  const double big = std::max(q.minus, q.plus);
  if (!(big > 0) || !std::isfinite(big)) return fmt::format("{:.6g}", q.median);
  const int exponent = static_cast<int>(std::floor(std::log10(big)));
  const double leading = big / std::pow(10.0, exponent);
  const int digits = leading < 4.0 ? 2 : 1;  // significant digits of the larger uncertainty
  const int decimals = std::max(0, digits - 1 - exponent);
  const double unit = std::pow(10.0, digits - 1 - exponent);
  auto round_to = [&](double x) { return std::round(x * unit) / unit; };
  if (decimals == 0) {
    return fmt::format("{:.0f} +{:.0f} -{:.0f}", round_to(q.median), round_to(q.plus), round_to(q.minus));
  }
  return fmt::format("{:.{}f} +{:.{}f} -{:.{}f}", q.median, decimals, q.plus, decimals, q.minus, decimals);
}

}  // namespace apsides

namespace apsides {

void write_posterior(ResultsFile& file, const ModelLayout& layout, const std::vector<std::string>& names,
                     const SamplerResult& result, const DerivedOptions& options, std::size_t max_samples) {
  const std::size_t dim = layout.n_params();
  std::vector<double> rhat, bulk, tail, tau;
  for (const auto& d : result.diagnostics) {
    rhat.push_back(d.rhat);
    bulk.push_back(d.ess_bulk);
    tail.push_back(d.ess_tail);
    tau.push_back(d.tau);
  }
  file.write_vector("/diagnostics/rhat", rhat, "", "rank-normalised split R-hat (Vehtari et al. 2021), per parameter");
  file.write_vector("/diagnostics/ess_bulk", bulk, "", "bulk effective sample size, per parameter");
  file.write_vector("/diagnostics/ess_tail", tail, "", "tail effective sample size, per parameter");
  file.write_vector("/diagnostics/tau", tau, "steps", "integrated autocorrelation time (Sokal window c = 5), per parameter");
  file.write_strings("/diagnostics/names", names, "parameter of each entry");
  file.set_attribute("/chains", "burn_in_steps", static_cast<long long>(result.burn_in_steps));
  file.set_attribute("/chains", "termination", to_string(result.termination));
  file.set_attribute("/chains", "message", result.message);
  file.set_attribute("/chains", "converged", static_cast<long long>(result.converged() ? 1 : 0));
  file.set_attribute("/diagnostics", "rhat_max", result.rhat_max);
  file.set_attribute("/diagnostics", "ess_min", result.ess_min);
  file.set_attribute("/diagnostics", "tau_max", result.tau_max);
  file.set_attribute("/diagnostics", "burn_in_rule", std::string("first half of the steps discarded"));

  // The kept draws: stored steps after burn-in (results_file.h).
  const ResultsFile::StepSelection sel = file.select_steps(result.burn_in_steps, result.steps, max_samples);
  if (sel.rows == 0) return;
  const long first = sel.first, steps = sel.last, stride = sel.stride;
  const std::vector<double> samples = file.read_chain_rows(first, steps, stride);
  const DerivedChains derived = derive_posterior(std::span<const double>(samples.data(), samples.size()), layout, options);
  (void)dim;
  for (std::size_t i = 0; i < derived.names.size(); ++i)
    file.write_vector("/derived/" + derived.names[i], derived.values[i], derived.units[i], derived.descriptions[i]);
  file.set_attribute("/derived", "description",
                     fmt::format("derived quantities per kept sample (steps {}..{} every {}, all walkers); m sin i is a "
                                 "minimum mass; stellar mass drawn per sample",
                                 first, steps, stride));
  file.set_attribute("/derived", "stride", static_cast<long long>(stride));
  file.flush();
}

const SummaryRow* RunSummary::find(const std::string& name) const {
  for (const auto& r : parameters)
    if (r.name == name) return &r;
  for (const auto& r : derived)
    if (r.name == name) return &r;
  return nullptr;
}

std::string RunSummary::FullReport() const {
  std::string s = fmt::format("Data: {} velocities from {} instrument(s), baseline {:.1f} d.\n", n_points,
                              instruments.size(), baseline_d);
  s += fmt::format("Sampler: {} walkers x {} steps, first {} discarded as burn-in; {}.\n", walkers, steps,
                   burn_in_steps, termination);
  s += fmt::format("Convergence: R-hat max {:.4f}, ESS min {:.0f}, tau max {:.1f} steps.\n", rhat_max, ess_min, tau_max);
  if (!converged) s += "WARNING: the chains did not meet the convergence rule; the intervals below may be wrong.\n";
  s += "\nMedians with 16th/84th percentile intervals:\n";
  auto table = [&](const std::vector<SummaryRow>& rows) {
    for (const auto& r : rows)
      s += fmt::format("  {:<22} {:>34}  {}\n", r.name, format_with_uncertainty(r.q), r.unit);
  };
  table(parameters);
  s += "\nDerived:\n";
  table(derived);
  if (has_star_mass)
    s += "\nm sin i is a MINIMUM mass (the orbital inclination is unknown from velocities alone).\n";
  else
    s += "\nNo stellar mass in the project: m sin i and a are not computed.\n";
  return s;
}

RunSummary summarize_run(const ResultsFile& file) {
  if (!file.exists("/chains/positions") || !file.has_attribute("/chains", "termination"))
    throw InputError(fmt::format("{}: holds no finished sampling run (continue it with apsides sample --resume)", file.path()));
  RunSummary r;
  const auto time = file.read_vector("/data/time_d");
  r.n_points = time.size();
  r.instruments = file.read_strings("/data/instrument_names");
  if (!time.empty()) r.baseline_d = *std::max_element(time.begin(), time.end()) - *std::min_element(time.begin(), time.end());
  r.walkers = file.chain_walkers();
  r.steps = file.chain_steps();
  r.burn_in_steps = static_cast<long>(file.int_attribute("/chains", "burn_in_steps"));
  r.termination = file.string_attribute("/chains", "termination");
  r.message = file.string_attribute("/chains", "message");
  r.converged = file.int_attribute("/chains", "converged") != 0;
  r.rhat_max = file.double_attribute("/diagnostics", "rhat_max");
  r.ess_min = file.double_attribute("/diagnostics", "ess_min");
  r.tau_max = file.double_attribute("/diagnostics", "tau_max");
  const auto names = file.read_strings("/parameters/names");
  const auto units = file.read_strings("/parameters/units");
  const std::size_t dim = names.size();
  const ResultsFile::StepSelection sel = file.select_steps(r.burn_in_steps, r.steps, 200000);
  const auto samples = sel.rows ? file.read_chain_rows(sel.first, sel.last, sel.stride) : std::vector<double>{};
  const std::size_t n = dim ? samples.size() / dim : 0;
  for (std::size_t p = 0; p < dim; ++p) {
    std::vector<double> v(n);
    for (std::size_t i = 0; i < n; ++i) v[i] = samples[i * dim + p];
    r.parameters.push_back({names[p], p < units.size() ? units[p] : "", quantiles(std::move(v))});
  }
  for (const auto& name : names)
    if (name.size() > 9 && name.substr(name.size() - 9) == ".period_d") ++r.n_planets;
  // Derived datasets in a fixed order: per planet, then the star.
  static const char* kPerPlanet[] = {"period_d", "K_ms", "ecc", "omega_deg", "t_conj_bjd", "t_peri_bjd",
                                     "msini_mjup", "msini_mearth", "a_au", "r_peri_au", "r_apo_au"};
  for (int p = 0; p < r.n_planets; ++p)
    for (const char* c : kPerPlanet) {
      const std::string path = "/derived/" + planet_label(p) + "." + c;
      if (!file.exists(path)) continue;
      const std::string unit = file.has_attribute(path, "unit") ? file.string_attribute(path, "unit") : "";
      r.derived.push_back({planet_label(p) + "." + c, unit, quantiles(file.read_vector(path))});
    }
  if (file.exists("/derived/star.mass_msun")) {
    r.has_star_mass = true;
    r.derived.push_back({"star.mass_msun", "M_sun", quantiles(file.read_vector("/derived/star.mass_msun"))});
  }
  return r;
}

}  // namespace apsides
