// Stability of a run's posterior draws (stability_analysis.h).
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <filesystem>

#include "analysis/run_reading.h"
#include "apsides/error.h"
#include "apsides/keplerian_model.h"
#include "apsides/orbit.h"
#include "apsides/project.h"
#include "apsides/results_file.h"
#include "apsides/stability_analysis.h"

namespace apsides {

std::string StabilityRunOptions::Validate() const {
  if (max_draws < 1) return "max_draws = 0: must be >= 1";
  return stability.Validate();
}

std::vector<NbodySystem> systems_from_keplerian_draws(const ParameterLayout& layout, const std::vector<double>& samples,
                                                      std::size_t rows, double star_mass) {
  const std::vector<const PlanetBlock*> planets = layout.planets();
  const std::size_t dim = layout.n_params();
  std::vector<NbodySystem> out;
  out.reserve(rows);
  for (std::size_t r = 0; r < rows; ++r) {
    const std::span<const double> th(samples.data() + r * dim, dim);
    NbodySystem s;
    s.star_mass_msun = star_mass;
    for (const PlanetBlock* b : planets) {
      const Planet p = b->planet(th);
      const double e = p.ecc();
      double m = 0.0;
      if (p.period_days > 0.0 && e < 1.0 && p.semi_amplitude_m_s > 0.0)
        m = minimum_mass_msun(p.period_days, p.semi_amplitude_m_s, e, star_mass) / star_mass;
      s.planets.push_back(
          NbodyPlanet::from_elements(m, p.period_days, e, p.omega_rad(), p.t_conj_days, 0.5 * 3.14159265358979323846, 0.0));
    }
    out.push_back(std::move(s));
  }
  return out;
}

StabilityRunResult stability_of_systems(const std::string& source, const std::string& configuration,
                                        std::vector<NbodySystem> systems, const std::vector<std::string>& labels,
                                        const StabilityRunOptions& options) {
  if (const std::string m = options.Validate(); !m.empty()) throw InputError(m);
  StabilityRunResult r;
  r.source = source;
  r.configuration = configuration;
  r.planet_labels = labels;
  if (!systems.empty()) r.star_mass_msun = systems.front().star_mass_msun;
  r.draws = std::move(systems);
  r.summary = assess_stability(r.draws, options.stability);
  return r;
}

StabilityRunResult stability_of_run(const std::string& path, const StabilityRunOptions& options) {
  if (const std::string m = options.Validate(); !m.empty()) throw InputError(m);
  const ResultsFile f(path, ResultsFile::Mode::kReadOnly);
  if (!f.exists("/chains") || f.chain_steps() < 1)
    throw InputError(fmt::format("{}: no posterior samples (run `apsides sample` or `analyze` first)", path));
  if (!f.exists("/project/text"))
    throw InputError(fmt::format("{}: no stored project, so no star mass for the planets' masses", path));
  const Project pr = parse_project(f.read_text("/project/text"), path + ":/project/text",
                                   std::filesystem::path(path).parent_path().string());
  if (!pr.star.mass_msun)
    throw InputError(fmt::format("{}: the run's project gives no [star] mass_msun; stability needs the planets' masses",
                                 path));
  const VelocityData data = analysis::read_data(f);
  const ModelLayout ml = analysis::read_layout(f, data);
  if (ml.n_planets < 2)
    throw InputError(fmt::format("{}: the run has {} planet(s); stability is assessed for two or more", path,
                                 ml.n_planets));
  const ParameterLayout layout = ParameterLayout::from(ml, data.instrument_names);
  const analysis::KeptSamples kept = analysis::read_kept(f, options.max_draws);
  if (kept.rows == 0) throw InputError(fmt::format("{}: no samples after the burn-in", path));
  std::vector<std::string> labels;
  for (const PlanetBlock* b : layout.planets()) labels.push_back(b->label());
  const std::string config = fmt::format(
      "{} posterior draws; masses m sin i with M_star = {} M_sun, coplanar edge-on orbits (i = 90 deg, the minimum "
      "masses), osculating at the data's reference epoch (BJD {:.1f})",
      kept.rows, *pr.star.mass_msun, data.reference_epoch_bjd);
  return stability_of_systems(path, config, systems_from_keplerian_draws(layout, kept.theta, kept.rows, *pr.star.mass_msun),
                              labels, options);
}

namespace {
std::string pct(double f) { return std::isfinite(f) ? fmt::format("{:.1f} %", 100.0 * f) : "not run"; }
}  // namespace

std::string StabilityRunResult::BriefReport() const {
  const StabilitySummary& s = summary;
  return fmt::format(
      "Stability of {} draws ({} invalid): Hill 2 sqrt 3 {}, Gladman {}, AMD {}, AMD with MMR overlap {}, survived {}, "
      "MEGNO regular {}",
      s.draws, s.invalid_draws, pct(s.fraction_hill_two_sqrt3), pct(s.fraction_hill_gladman), pct(s.fraction_amd),
      pct(s.fraction_amd_mmr), pct(s.fraction_survived), pct(s.fraction_megno_regular));
}

std::string StabilityRunResult::FullReport() const {
  std::string s = fmt::format("Source: {}\nConfiguration: {}\n{}\n", source, configuration, BriefReport());
  s += summary.FullReport();
  s += "\nA stable-looking result is not proof of stability: Hill and AMD are necessary conditions, and the N-body "
       "test covers a finite number of orbits.\n";
  return s;
}

std::string stability_markdown(const StabilityRunResult& r, const std::string& figure) {
  const StabilitySummary& s = r.summary;
  std::string md = "## Orbital stability\n\n";
  md += r.configuration + ".\n\n";
  md += "| criterion | fraction of draws passing |\n|---|---|\n";
  md += fmt::format("| mutual Hill separation > 2√3 (Gladman 1993) | {} |\n", pct(s.fraction_hill_two_sqrt3));
  md += fmt::format("| Hill stable, Gladman's criterion | {} |\n", pct(s.fraction_hill_gladman));
  md += fmt::format("| AMD stable (Laskar & Petit 2017) | {} |\n", pct(s.fraction_amd));
  md += fmt::format("| AMD stable with MMR overlap | {} |\n", pct(s.fraction_amd_mmr));
  md += fmt::format("| survived the N-body run | {} |\n", pct(s.fraction_survived));
  md += fmt::format("| regular MEGNO (Cincotta & Simó 2000) | {} |\n\n", pct(s.fraction_megno_regular));
  if (s.invalid_draws > 0) md += fmt::format("{} draws had no valid orbit and count as failing.\n\n", s.invalid_draws);
  if (!figure.empty()) md += fmt::format("![Stability of the posterior draws]({})\n\n", figure);
  md += "A stable-looking fit is not proof of stability: the Hill and AMD criteria are necessary conditions, and the "
        "N-body test covers a finite number of inner orbits. Draws are not filtered by stability here.\n";
  return md;
}

}  // namespace apsides
