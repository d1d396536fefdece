// `apsides analyze` as named stages (analysis.h): scan -> search -> compare -> sample ->
// store -> transits -> limits ([limits] enabled) -> figures -> report. Each stage reads and fills the Run state.
#include "analysis/pipeline.h"
#include "apsides/stability_analysis.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <fstream>
#include <functional>

#include "apsides/error.h"
#include "apsides/limits.h"
#include "apsides/sampling_run.h"

namespace apsides {
namespace fs = std::filesystem;
using analysis::Run;

namespace analysis {

void write_text_atomic(const std::string& path, const std::string& text) {
  const std::string tmp = path + ".tmp-apsides";
  {
    std::ofstream out(tmp, std::ios::binary | std::ios::trunc);
    if (!out) throw InputError(fmt::format("{}: cannot be written", path));
    out << text;
  }
  fs::rename(tmp, path);
}

}  // namespace analysis

namespace {

// Power level at which the Baluev FAP equals `fap` (bisection; FAP falls with power).
double power_at_fap(double fap, std::size_t n, double fmax, const std::vector<double>& t,
                    const std::vector<double>& dy, int n_null) {
  double lo = 0.0, hi = 1.0;
  for (int i = 0; i < 60; ++i) {
    const double mid = 0.5 * (lo + hi);
    if (baluev_fap(mid, n, fmax, t, dy, n_null) > fap) lo = mid; else hi = mid;
  }
  return 0.5 * (lo + hi);
}

PeriodogramPanel panel_from(const PeriodogramResult& r, const VelocityData& d, const std::string& title) {
  PeriodogramPanel p;
  p.title = title;
  for (std::size_t i = 0; i < r.frequency_per_day.size(); ++i) {
    if (r.frequency_per_day[i] <= 0) continue;
    p.period_days.push_back(1.0 / r.frequency_per_day[i]);
    p.power.push_back(r.power[i]);
  }
  const int n_null = static_cast<int>(std::max<std::size_t>(1, d.n_instruments()));
  for (double fap : {0.1, 0.01, 0.001}) {
    p.fap_levels.push_back({power_at_fap(fap, d.size(), r.max_frequency_per_day, d.time_days, d.uncertainty_m_s, n_null),
                            fmt::format("FAP {:g} %", 100 * fap)});
  }
  for (std::size_t i = 0; i < r.peaks.size() && i < 3; ++i)
    p.peaks.push_back({r.peaks[i].period_days, r.peaks[i].power, fmt::format("{:.4g} d", r.peaks[i].period_days)});
  return p;
}

// 1b. Activity indicators: their periodograms stacked under the velocities' (shared period
// axis), the velocity peaks they share, correlations.
void indicator_stage(Run& run) {
  if (run.data.indicators.empty()) return;
  run.activity = analyze_activity(run.data, run.scan, run.periodogram, ActivityOptions{});
  run.stage("indicators", run.activity.BriefReport());
  if (run.activity.empty()) return;
  std::vector<PeriodogramPanel> panels{panel_from(run.scan, run.data, "Velocities")};
  for (const IndicatorPeriodogram& ip : run.activity.periodograms) {
    PeriodogramPanel p = panel_from(ip.periodogram, run.data, "Indicator: " + ip.name);
    p.fap_levels.clear();  // the velocities' FAP levels do not apply; each peak states its own
    for (std::size_t i = 0; i < p.peaks.size(); ++i)
      p.peaks[i].label = fmt::format("{:.4g} d, FAP {:.1g}", ip.periodogram.peaks[i].period_days, ip.periodogram.peaks[i].fap);
    panels.push_back(p);
  }
  FigureOptions o = run.figures;
  o.title = "Velocities and activity indicators: periodograms on one period axis";
  o.height_px = std::max(800, 300 * static_cast<int>(panels.size()));
  run.report_figures.push_back(
      write_periodogram_steps_figure(panels, figure_path(run.fig_dir.string(), "indicators", o.format), o).path);
}

// 1. The periodogram of the velocities and its window function.
void scan_stage(Run& run) {
  PeriodogramOptions& popt = run.periodogram;
  if (run.project.search.min_period_d) popt.min_period_days = *run.project.search.min_period_d;
  if (run.project.search.max_period_d) popt.max_period_days = *run.project.search.max_period_d;
  popt.oversample = run.project.search.oversample;
  popt.threads = run.options.threads;
  run.scan = compute_periodogram(run.data, popt);
  run.stage("scan", run.scan.BriefReport());
  PeriodogramFigureData pd;
  pd.periodogram = panel_from(run.scan, run.data, "Velocities");
  for (std::size_t i = 0; i < run.scan.frequency_per_day.size(); ++i) {
    if (run.scan.frequency_per_day[i] <= 0) continue;
    pd.window_period_days.push_back(1.0 / run.scan.frequency_per_day[i]);
    pd.window_power.push_back(run.scan.window_power[i]);
  }
  FigureOptions o = run.figures;
  o.title = "Generalised Lomb–Scargle periodogram and window function";
  run.report_figures.push_back(
      write_periodogram_figure(pd, figure_path(run.fig_dir.string(), "periodogram", o.format), o).path);
  indicator_stage(run);
}

// 2. The planet search, with the residual periodogram of each step.
void search_stage(Run& run) {
  run.problem = search_problem(run.project, run.data, run.transits);
  run.search = search_planets(run.problem, search_options(run.project));
  run.stage("search", run.search.BriefReport());
  std::vector<PeriodogramPanel> panels;
  for (std::size_t k = 0; k < run.search.fits.size() && k < 7; ++k) {
    const FitResult& f = run.search.fits[k];
    std::vector<Planet> planets;
    const ParameterLayout blocks = f.parameters();
    for (const PlanetBlock* b : blocks.planets()) planets.push_back(b->planet(f.theta));
    const PeriodogramResult r = k == 0 ? run.scan : compute_residual_periodogram(run.data, planets, run.periodogram);
    panels.push_back(panel_from(r, run.data, k == 0 ? "Velocities" : fmt::format("Residuals after {} planet(s)", k)));
  }
  FigureOptions o = run.figures;
  o.title = "Planet search: periodogram of each step";
  o.height_px = std::max(800, 300 * static_cast<int>(panels.size()));
  run.report_figures.push_back(
      write_periodogram_steps_figure(panels, figure_path(run.fig_dir.string(), "search_steps", o.format), o).path);
}

// The sentence saying how the number of planets was chosen.
std::string decision_text(const CompareResult& c, int n_planets) {
  const ComparisonRow* sel = nullptr;
  const ComparisonRow* next = nullptr;
  for (const auto& r : c.rows) {
    if (r.n_planets == n_planets) sel = &r;
    if (r.n_planets == n_planets + 1) next = &r;
  }
  std::string s = fmt::format("{} planet(s): {}", n_planets, c.selection_rule);
  if (sel && std::isfinite(sel->ln_bayes_vs_previous))
    s += fmt::format("; ln B({} vs {}) = {:.1f} ± {:.1f}", n_planets, n_planets - 1, sel->ln_bayes_vs_previous,
                     sel->ln_bayes_err);
  if (next)
    s += fmt::format("; ln B({} vs {}) = {:.1f} ± {:.1f}", n_planets + 1, n_planets, next->ln_bayes_vs_previous,
                     next->ln_bayes_err);
  return s;
}

// 3. Evidence for the search's answer and its neighbours (unless [model] planets decides).
void compare_stage(Run& run) {
  run.n_planets = run.search.selected_n_planets;
  if (run.project.model.planets) {
    run.n_planets = *run.project.model.planets;
    run.out.decision = fmt::format("{} planet(s), as [model] planets sets (no evidence comparison run).", run.n_planets);
    run.stage("compare", "skipped: [model] planets is set");
    return;
  }
  const int found = run.search.selected_n_planets;
  CompareOptions copt;
  copt.min_planets = std::max(0, found - 1);
  // found + 1 is compared too, unless the search refused that planet as a few outlying
  // points: evidence alone would then reward a spike orbit through them.
  const int beyond = run.search.stopped_by_outliers ? 0 : 1;
  copt.max_planets = std::max(std::min(run.project.search.max_planets, found + beyond), copt.min_planets);
  copt.nested.live_points = run.options.live_points > 0 ? run.options.live_points : run.project.evidence.live_points;
  copt.nested.seed = run.project.evidence.seed;
  copt.nested.threads = run.options.threads;
  copt.bayes_threshold = run.project.evidence.bayes_threshold;
  copt.search_hints = search_signals(run.search);
  // The comparison is the slow stage: cached (keyed by the project text and the options)
  // so that --resume does not redo it.
  const fs::path cache = run.stages / "comparison.json";
  const std::string key = fmt::format("v3|{}|{}|{}|{}|{}|{}", std::hash<std::string>{}(run.project.text),
                                      copt.min_planets, copt.max_planets, copt.nested.live_points, copt.nested.seed,
                                      copt.bayes_threshold);
  if (run.options.resume && analysis::read_cached_comparison(cache, key, run.comparison)) {
    run.stage("compare", "reusing the comparison in " + cache.string());
  } else {
    const SearchProblem& sp = run.problem;
    auto priors_for = [&sp](const ModelLayout& layout) { return problem_priors(sp, layout); };
    run.comparison = compare_planet_counts(
        run.data, problem_layout(sp, 0), priors_for, copt,
        [&run](int, const std::string& s) { run.stage("compare", fmt::format("nested sampling, {}", s)); },
        &run.transits);
    analysis::write_cached_comparison(cache, key, run.comparison);
  }
  run.n_planets = run.comparison.selected_n_planets;
  run.out.decision = decision_text(run.comparison, run.n_planets);
  if (run.search.stopped_by_outliers)
    run.out.decision += fmt::format(" A model with {} planets was not compared: the search found its extra planet made by a few "
                                    "outlying points.",
                                    found + 1);
  run.stage("compare", run.comparison.BriefReport());
}

// 4. Sampling of the selected model to convergence (a finished run of the same project
// reused with --resume).
void sample_stage(Run& run) {
  const std::string& path = run.out.results_path;
  if (run.options.resume && fs::exists(path)) {
    try {
      ResultsFile f(path, ResultsFile::Mode::kReadOnly);
      run.reused = f.exists("/project/text") && f.read_text("/project/text") == run.project.text &&
                   f.has_attribute("/chains", "termination") &&
                   f.string_attribute("/chains", "termination") != "interrupted" &&
                   f.has_attribute("/chains", "n_planets") && f.int_attribute("/chains", "n_planets") == run.n_planets;
    } catch (const InputError&) {
      run.reused = false;
    }
  }
  if (run.reused) {
    run.stage("sample", "reusing the finished run in " + path);
    return;
  }
  if (run.n_planets == 0) run.stage("sample", "no planet selected: sampling the 0-planet model (offsets and jitters)");
  SamplingRunOptions sopt;
  sopt.out_path = path;
  sopt.max_steps = run.options.max_steps;
  sopt.threads = run.options.threads;
  sopt.n_planets = run.n_planets;
  if (static_cast<std::size_t>(run.n_planets) < run.search.fits.size())
    sopt.start = &run.search.fits[static_cast<std::size_t>(run.n_planets)];
  sopt.progress = run.options.on_sampling;
  const SamplingRun sr = sample_project(run.project, sopt);
  if (!sr.failure.empty()) throw std::runtime_error(sr.failure);
  run.out.sampler_message = sr.result.message;
  run.stage("sample", sr.result.BriefReport());
}

// 5. The comparison, periodogram and search steps into the results file; the summary.
void store_stage(Run& run) {
  run.file = std::make_unique<ResultsFile>(run.out.results_path, ResultsFile::Mode::kReadWrite);
  ResultsFile& file = *run.file;
  if (!run.comparison.rows.empty() && !(run.reused && file.exists("/comparison/n_planets")))
    write_comparison(file, run.comparison);
  file.write_vector("/periodograms/velocities/frequency_per_d", run.scan.frequency_per_day, "1/d", "frequency grid");
  file.write_vector("/periodograms/velocities/power", run.scan.power, "",
                    "generalised Lomb-Scargle power (standard normalisation)");
  file.write_vector("/periodograms/velocities/window_power", run.scan.window_power, "", "window function on the same grid");
  std::vector<long long> k;
  std::vector<double> lnl, bic, aicc, fap, period;
  for (const auto& s : run.search.steps) {
    k.push_back(s.n_planets);
    lnl.push_back(s.log_likelihood);
    bic.push_back(s.bic);
    aicc.push_back(s.aicc);
    fap.push_back(s.admitting_fap);
    period.push_back(s.admitting_period_days);
  }
  file.write_ints("/search/n_planets", k, "planets fitted at each step");
  file.write_vector("/search/ln_like", lnl, "nats", "maximum ln L of each step");
  file.write_vector("/search/bic", bic, "", "BIC of each step");
  file.write_vector("/search/aicc", aicc, "", "AICc of each step");
  file.write_vector("/search/admitting_fap", fap, "", "Baluev FAP of the residual peak that admitted the planet");
  file.write_vector("/search/admitting_period_d", period, "d", "period of that peak");
  file.flush();
  run.summary = summarize_run(file);
  run.out.selected_n_planets = run.summary.n_planets;
  run.out.converged = run.summary.converged;
  if (run.out.sampler_message.empty()) run.out.sampler_message = run.summary.message;
  analysis::write_text_atomic(run.out.summary_path, summary_json(file));
  run.stage("summarize", fmt::format("{} planet(s); R-hat max {:.4f}, ESS min {:.0f}", run.summary.n_planets,
                                     run.summary.rhat_max, run.summary.ess_min));
}

// 5b. Orbital stability of the posterior draws of a multi-planet result (stability_analysis.h):
// 100 draws, Hill and AMD criteria and a 2000-inner-orbit N-body run with MEGNO.
void stability_stage(Run& run) {
  if (run.summary.n_planets < 2) return;
  if (!run.project.star.mass_msun) {
    run.stability_markdown = "## Orbital stability\n\nNot assessed: the planets' masses need the star's mass ([star] "
                             "mass_msun).\n\n";
    run.stage("stability", "skipped: no star mass");
    return;
  }
  StabilityRunOptions o;
  o.max_draws = 100;
  o.stability.megno.inner_orbits = 2000.0;
  o.stability.threads = 0;
  const StabilityRunResult r = stability_of_run(run.out.results_path, o);
  std::string fig;
  try {
    const std::string path = (run.fig_dir / "stability.png").string();
    write_stability_figure(r, path);
    fig = fs::relative(path, run.dir).string();
    run.report_figures.push_back(path);
  } catch (const InputError& e) {
    run.stage("stability", std::string("no figure: ") + e.what());
  }
  run.stability_markdown = stability_markdown(r, fig) + "\n";
  run.stage("stability", r.BriefReport());
}

// 6. Each transiting planet's ephemeris, O-C and predictions.
void transit_stage(Run& run) {
  std::vector<std::string> labels;
  for (const auto& l : run.transits.planet)
    if (std::find(labels.begin(), labels.end(), l) == labels.end()) labels.push_back(l);
  for (const auto& l : labels) {
    const TransitData td = run.transits.for_planet(l);
    if (td.size() < 2) continue;
    EphemerisOptions eo;
    eo.n_next = 10;
    EphemerisResult er = fit_ephemeris(td, eo);
    OcFigureData oc;
    oc.planet_label = l;
    for (const auto& r : er.o_minus_c) {
      oc.epoch.push_back(static_cast<double>(r.epoch));
      oc.o_minus_c_days.push_back(r.o_minus_c_days);
      oc.error_days.push_back(r.sigma_days);
    }
    if (er.ttv.fitted && er.ttv.fap < 0.01) {
      const double lo = *std::min_element(oc.epoch.begin(), oc.epoch.end());
      const double hi = *std::max_element(oc.epoch.begin(), oc.epoch.end());
      for (int i = 0; i <= 400; ++i) {
        const double n = lo + (hi - lo) * i / 400.0;
        oc.curve_epoch.push_back(n);
        oc.curve_o_minus_c_days.push_back(er.ttv.sinusoid_time_at(n, er.n_ref) - er.linear.time_at(n, er.n_ref));
      }
    }
    FigureOptions o = run.figures;
    o.title = fmt::format("Planet {}: transit times minus the linear ephemeris", l);
    run.report_figures.push_back(write_oc_figure(oc, figure_path(run.fig_dir.string(), "o_minus_c_" + l, o.format), o).path);
    run.stage("ephemeris", fmt::format("planet {}: {}", l, er.BriefReport()));
    run.ephemerides.emplace_back(l, std::move(er));
  }
}

// Detection limits by injection and recovery (limits.h) into DIR/limits, finished cells
// kept across runs; the report gets their section.
void limits_stage(Run& run) {
  run.stage("limits", "injection and recovery on the star's own data");
  LimitsReportSection s = run_limits_for_analysis(run.project, run.dir.string(), run.options.threads, run.options.format);
  run.limits_markdown = std::move(s.markdown);
  run.stage("limits", s.result.BriefReport());
}

}  // namespace

AnalysisOutcome run_analysis(const Project& project, const AnalysisOptions& options) {
  AnalysisOutcome out;
  Run run(project, options, out);
  std::error_code ec;
  fs::create_directories(options.out_dir, ec);
  if (!fs::is_directory(options.out_dir))
    throw InputError(fmt::format("{}: cannot create the output directory", options.out_dir));
  run.dir = fs::path(options.out_dir);
  run.fig_dir = run.dir / "figures";
  run.stages = run.dir / "stages";
  fs::create_directories(run.fig_dir, ec);
  fs::create_directories(run.stages, ec);
  out.results_path = (run.dir / "results.h5").string();
  out.summary_path = (run.dir / "summary.json").string();
  out.report_path = (run.dir / "report.md").string();
  run.figures.format = options.format;
  run.data = project.load_velocities();
  run.transits = project.load_transits();
  for (const auto& w : run.data.warnings) run.stage("warning", w);

  scan_stage(run);
  search_stage(run);
  compare_stage(run);
  sample_stage(run);
  store_stage(run);
  if (run.transits.size() > 0) transit_stage(run);
  if (project.limits.enabled) limits_stage(run);
  for (const auto& p : write_run_figures(*run.file, run.fig_dir.string(), run.figures)) run.report_figures.push_back(p);
  stability_stage(run);
  out.figures = run.report_figures;
  run.stage("figures", fmt::format("{} figure(s) in {}", run.report_figures.size(), run.fig_dir.string()));
  out.cautions = analysis::report_cautions();
  analysis::write_text_atomic(out.report_path, analysis::report_markdown(run));
  return out;
}

}  // namespace apsides
