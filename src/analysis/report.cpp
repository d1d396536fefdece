// report.md of `apsides analyze`, and the comparison cache in DIR/stages.
#include <fmt/format.h>

#include <cmath>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>

#include "analysis/pipeline.h"

namespace apsides::analysis {
namespace fs = std::filesystem;
using nlohmann::json;

namespace {

json finite_or_null(double x) { return std::isfinite(x) ? json(x) : json(nullptr); }

std::string fmt_q(const Quantiles& q) { return format_with_uncertainty(q); }

// The figure links: every figure the run wrote whose file name starts with `stem`.
std::string figure_links(const Run& run, const std::string& stem, const std::string& alt) {
  std::string s;
  for (const auto& path : run.report_figures) {
    const std::string name = fs::path(path).filename().string();
    if (name.rfind(stem, 0) != 0) continue;
    s += fmt::format("![{}](figures/{})\n\n", alt, name);
  }
  return s;
}

void planets_section(const Run& run, std::ostringstream& md) {
  const RunSummary& summary = run.summary;
  md << "## Planets (posterior medians, 16th–84th percentile intervals)\n\n";
  if (summary.n_planets == 0) {
    md << "No planet is supported by the data.\n\n";
    return;
  }
  md << "| planet | P [d] | K [m/s] | e | ω (star) [deg] | T_conj [BJD_TDB] | m sin i [M_J] | m sin i [M_⊕] | a [au] |\n";
  md << "|---|---|---|---|---|---|---|---|---|\n";
  for (int p = 0; p < summary.n_planets; ++p) {
    const std::string l = planet_label(p);
    auto cell = [&](const std::string& k) {
      const SummaryRow* r = summary.find(l + "." + k);
      return r ? fmt_q(r->q) : std::string("—");
    };
    md << fmt::format("| {} | {} | {} | {} | {} | {} | {} | {} | {} |\n", l, cell("period_d"), cell("K_ms"), cell("ecc"),
                      cell("omega_deg"), cell("t_conj_bjd"), cell("msini_mjup"), cell("msini_mearth"), cell("a_au"));
  }
  md << "\nm sin i is a **minimum** mass";
  if (!run.project.star.mass_msun) md << "; it and a need the star's mass ([star] mass_msun), which this project does not give";
  md << ".\n\n";
}

void activity_section(const Run& run, std::ostringstream& md) {
  const ActivityResult& a = run.activity;
  const bool gp = run.project.model.noise.kind == NoiseKind::kGaussianProcess;
  if (a.empty() && !gp) return;
  md << "## Stellar activity\n\n" << figure_links(run, "indicators", "indicator periodograms");
  for (const IndicatorPeriodogram& ip : a.periodograms) {
    md << fmt::format("- **{}** ({} values{}): strongest peaks", ip.name, ip.n_points, ip.weighted ? "" : ", unweighted");
    for (const Peak& p : ip.periodogram.peaks) md << fmt::format(" {:.4g} d (FAP {:.2g})", p.period_days, p.fap);
    md << "\n";
  }
  for (const SharedSignal& sh : a.shared)
    md << fmt::format("- Velocity peak at {:.5g} d: {}.\n", sh.velocity_period_days, sh.note());
  if (std::isfinite(a.rotation_hint_days))
    md << fmt::format("- Likely rotation signal: {:.4g} d ({}).\n", a.rotation_hint_days, a.rotation_hint_source);
  if (!a.correlations.empty()) {
    md << "\n| indicator | instrument | n | Pearson r | p | Spearman ρ | p |\n|---|---|---|---|---|---|---|\n";
    for (const IndicatorCorrelation& c : a.correlations)
      md << fmt::format("| {} | {} | {} | {:.3f} | {:.2g} | {:.3f} | {:.2g} |\n", c.indicator, c.instrument, c.n,
                        c.pearson_r, c.pearson_p, c.spearman_rho, c.spearman_p);
  }
  md << "\n";
  if (gp) {
    md << fmt::format("Noise model: Gaussian process, {} kernel, on top of each instrument's jitter.",
                      gp::to_string(run.project.model.noise.kernel));
    if (std::isfinite(run.problem.model.rotation_hint_d))
      md << fmt::format(" Its rotation-period prior is centred on {:.4g} d ({}).", run.problem.model.rotation_hint_d,
                        run.problem.model.rotation_hint_source);
    md << "\n\n";
  }
  const double prot = std::isfinite(run.problem.model.rotation_hint_d) ? run.problem.model.rotation_hint_d : a.rotation_hint_days;
  for (int p = 0; p < run.summary.n_planets; ++p)
    if (const SummaryRow* r = run.summary.find(planet_label(p) + ".period_d"))
      if (const std::string c = rotation_caution(r->q.median, prot); !c.empty())
        md << fmt::format("**Planet {}:** {}.\n\n", planet_label(p), c);
  md << "A signal at the star's rotation period or its harmonics is suspect: spots and faculae make them.\n\n";
}

void search_section(const Run& run, std::ostringstream& md) {
  md << "\n## Periodogram and planet search\n\n" << figure_links(run, "periodogram", "periodogram");
  md << "| step | planets | ln L | BIC | AICc | admitted by (period, FAP) |\n|---|---|---|---|---|---|\n";
  for (std::size_t i = 0; i < run.search.steps.size(); ++i) {
    const auto& s = run.search.steps[i];
    md << fmt::format("| {} | {} | {:.2f} | {:.2f} | {:.2f} | {} |\n", i, s.n_planets, s.log_likelihood, s.bic, s.aicc,
                      std::isfinite(s.admitting_fap) ? fmt::format("{:.5g} d, {:.2g}", s.admitting_period_days, s.admitting_fap) : "—");
  }
  md << fmt::format("\n{}\n\n", run.search.message) << figure_links(run, "search_steps", "search steps");
  if (run.comparison.rows.empty()) return;
  md << "## How many planets: evidence\n\n";
  md << "| planets | ln Z | ± | max ln L | BIC | AICc | ln B vs previous row | Kass & Raftery |\n|---|---|---|---|---|---|---|---|\n";
  for (const auto& r : run.comparison.rows) {
    md << fmt::format("| {} | {:.2f} | {:.2f} | {:.2f} | {:.2f} | {:.2f} | {} | {} |\n", r.n_planets, r.ln_evidence,
                      r.ln_evidence_err, r.ln_like_max, r.bic, r.aicc,
                      std::isfinite(r.ln_bayes_vs_previous) ? fmt::format("{:.1f} ± {:.1f}", r.ln_bayes_vs_previous, r.ln_bayes_err) : "—",
                      r.bayes_wording.empty() ? "—" : r.bayes_wording);
  }
  md << fmt::format("\nRule: {}. Models compared: the search's answer and its neighbours.\n\n", run.comparison.selection_rule);
  for (const auto& n : run.comparison.notes)
    if (n.rfind("prior: ", 0) != 0) md << "- " << n << "\n";
  md << "\n";
}

void transit_section(const Run& run, std::ostringstream& md) {
  if (run.ephemerides.empty()) return;
  md << "## Transits\n\n";
  for (const auto& [l, er] : run.ephemerides) {
    md << fmt::format("Planet {}: {}\n\n", l, er.BriefReport());
    md << figure_links(run, "o_minus_c_" + l, "O-C " + l);
    md << "| epoch | predicted mid-transit [BJD_TDB] | ± [min] | UTC |\n|---|---|---|---|\n";
    for (const auto& pr : er.predictions)
      md << fmt::format("| {} | {:.5f} | {:.1f} | {} |\n", pr.epoch, pr.t_mid_bjd, pr.err_days * 1440.0, pr.utc);
    md << "\nUTC: BJD_TDB − (32.184 s + leap seconds) at the barycentre; add your site's light-time (up to ±8.3 min).\n\n";
  }
}

}  // namespace

std::vector<std::string> report_cautions() {
  return {
      "A periodic velocity signal can come from stellar rotation or magnetic activity rather than a planet: "
      "check activity indicators (line shapes, chromospheric emission) for the same periods before calling it a planet.",
      "Sampling creates aliases: a peak at |f ± 1/day| or |f ± 1/year| of a stronger one may be its alias; "
      "the scan flags such peaks and the fit tried them.",
      "m sin i is a minimum mass: the true mass is m sin i / sin i, and sin i is unknown from velocities alone "
      "(a transiting planet has sin i ≈ 1).",
      "The results depend on the priors, listed below; the evidence in particular scales with the prior ranges.",
  };
}

std::string report_markdown(const Run& run) {
  std::ostringstream md;
  const std::string star = run.project.star.name.empty() ? "the star" : run.project.star.name;
  md << fmt::format("# apsides report: {}\n\n", star);
  md << fmt::format("**Decision.** {}\n\n", run.out.decision);
  md << fmt::format("**Sampling.** {}\n\n", run.out.sampler_message);
  md << fmt::format("Data: {} velocities from {} instrument(s) ({}), baseline {:.1f} d; {} transit time(s).\n\n",
                    run.data.size(), run.data.n_instruments(), fmt::join(run.data.instrument_names, ", "),
                    run.data.baseline_days(), run.transits.size());
  planets_section(run, md);
  md << "## Instruments\n\n| instrument | offset [m/s] | jitter [m/s] |\n|---|---|---|\n";
  for (const auto& n : run.summary.instruments) {
    const SummaryRow* o = run.summary.find(n + ".offset_ms");
    const SummaryRow* j = run.summary.find(n + ".jitter_ms");
    md << fmt::format("| {} | {} | {} |\n", n, o ? fmt_q(o->q) : "—", j ? fmt_q(j->q) : "—");
  }
  search_section(run, md);
  activity_section(run, md);
  md << "## Orbits\n\n" << figure_links(run, "velocities", "velocities") << figure_links(run, "phase_folds", "phase folds");
  for (int p = 0; p < run.summary.n_planets; ++p)
    md << figure_links(run, "corner_" + planet_label(p), "corner " + planet_label(p));
  transit_section(run, md);
  md << run.stability_markdown;
  md << "## Convergence\n\n```\n" << run.summary.FullReport() << "```\n\n" << figure_links(run, "traces", "traces");
  md << "## Priors\n\n";
  for (const auto& pr : run.file->read_strings("/parameters/priors")) md << "- " << pr << "\n";
  if (run.file->has_attribute("/parameters", "prior_notes"))
    md << "- " << run.file->string_attribute("/parameters", "prior_notes") << "\n";
  if (!run.limits_markdown.empty()) md << "\n" << run.limits_markdown;
  md << "\n## Cautions\n\n";
  for (const auto& c : run.out.cautions) md << "- " << c << "\n";
  md << "\nEverything (data, chains, derived chains, diagnostics, periodograms, comparison, nested samples) is in "
        "`results.h5`; the machine-readable summary is `summary.json`.\n";
  return md.str();
}

bool read_cached_comparison(const fs::path& path, const std::string& key, CompareResult& comparison) {
  if (!fs::exists(path)) return false;
  try {
    std::ifstream in(path);
    const json c = json::parse(in);
    if (c.at("key").get<std::string>() != key) return false;
    CompareResult r;
    r.selected_n_planets = c.at("selected_n_planets");
    r.selection_rule = c.at("selection_rule");
    r.notes = c.at("notes").get<std::vector<std::string>>();
    r.message = c.at("message");
    for (const auto& x : c.at("rows")) {
      ComparisonRow row;
      row.n_planets = x.at("n_planets");
      row.n_params = x.at("n_params");
      auto num = [&](const char* k) { return x.at(k).is_null() ? std::nan("") : x.at(k).get<double>(); };
      row.ln_evidence = num("ln_evidence");
      row.ln_evidence_err = num("ln_evidence_err");
      row.ln_like_max = num("ln_like_max");
      row.bic = num("bic");
      row.aicc = num("aicc");
      row.information_nats = num("information_nats");
      row.ln_bayes_vs_previous = num("ln_bayes_vs_previous");
      row.ln_bayes_err = num("ln_bayes_err");
      row.bayes_wording = x.at("bayes_wording");
      row.ordering_note = x.at("ordering");
      r.rows.push_back(row);
    }
    comparison = std::move(r);
    return true;
  } catch (const std::exception&) {
    return false;
  }
}

void write_cached_comparison(const fs::path& path, const std::string& key, const CompareResult& comparison) {
  json c;
  c["key"] = key;
  c["selected_n_planets"] = comparison.selected_n_planets;
  c["selection_rule"] = comparison.selection_rule;
  c["notes"] = comparison.notes;
  c["message"] = comparison.message;
  c["rows"] = json::array();
  for (const auto& r : comparison.rows) {
    c["rows"].push_back({{"n_planets", r.n_planets}, {"n_params", r.n_params}, {"ln_evidence", finite_or_null(r.ln_evidence)},
                         {"ln_evidence_err", finite_or_null(r.ln_evidence_err)}, {"ln_like_max", finite_or_null(r.ln_like_max)},
                         {"bic", finite_or_null(r.bic)}, {"aicc", finite_or_null(r.aicc)},
                         {"information_nats", finite_or_null(r.information_nats)},
                         {"ln_bayes_vs_previous", finite_or_null(r.ln_bayes_vs_previous)},
                         {"ln_bayes_err", finite_or_null(r.ln_bayes_err)}, {"bayes_wording", r.bayes_wording},
                         {"ordering", r.ordering_note}});
  }
  write_text_atomic(path.string(), c.dump(1) + "\n");
}

}  // namespace apsides::analysis
