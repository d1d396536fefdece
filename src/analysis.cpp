#include "apsides/analysis.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <functional>
#include <nlohmann/json.hpp>
#include <sstream>

#include "apsides/constants.h"
#include "apsides/ephemeris.h"
#include "apsides/error.h"
#include "apsides/fit.h"
#include "apsides/keplerian_model.h"
#include "apsides/model_priors.h"
#include "apsides/periodogram.h"
#include "apsides/posterior.h"
#include "apsides/sampling_run.h"

namespace apsides {
namespace fs = std::filesystem;
using nlohmann::json;

namespace {

json finite_or_null(double x) { return std::isfinite(x) ? json(x) : json(nullptr); }

void write_text_atomic(const std::string& path, const std::string& text) {
  const std::string tmp = path + ".tmp-apsides";
  {
    std::ofstream out(tmp, std::ios::binary | std::ios::trunc);
    if (!out) throw InputError(fmt::format("{}: cannot be written", path));
    out << text;
  }
  fs::rename(tmp, path);
}

// ---- Reading a run back ------------------------------------------------------------

VelocityData read_data(const ResultsFile& f) {
  VelocityData d;
  d.reference_epoch_bjd = f.double_attribute("/data", "reference_epoch_bjd");
  d.time_days = f.read_vector("/data/time_d");
  d.velocity_m_s = f.read_vector("/data/velocity_ms");
  d.uncertainty_m_s = f.read_vector("/data/uncertainty_ms");
  for (long long i : f.read_ints("/data/instrument")) d.instrument.push_back(static_cast<int>(i));
  d.instrument_names = f.read_strings("/data/instrument_names");
  d.origin.assign(d.size(), f.path());
  return d;
}

ModelLayout layout_from_names(const std::vector<std::string>& names, std::size_t n_instruments) {
  ModelLayout L;
  L.n_instruments = static_cast<int>(n_instruments);
  L.n_planets = 0;
  L.fit_jitter = false;
  for (const auto& n : names) {
    if (n.size() > 9 && n.substr(n.size() - 9) == ".period_d" && n.size() == 10) ++L.n_planets;
    if (n.find(".jitter_ms") != std::string::npos) L.fit_jitter = true;
    if (n == "trend.c1_ms_per_d" && L.trend == Trend::kNone) L.trend = Trend::kLinear;
    if (n == "trend.c2_ms_per_d2") L.trend = Trend::kQuadratic;
    if (n.size() == 18 && n.substr(1) == ".transit_jitter_d") L.transit_jitter_planets.push_back(n[0] - 'b');
  }
  return L;
}

struct KeptSamples {
  std::vector<double> theta;  // rows x dim
  std::size_t rows = 0, dim = 0;
  std::vector<double> median;
};

KeptSamples read_kept(const ResultsFile& f, std::size_t max_samples) {
  KeptSamples k;
  const long steps = f.chain_steps();
  const long burn = f.has_attribute("/chains", "burn_in_steps") ? static_cast<long>(f.int_attribute("/chains", "burn_in_steps")) : steps / 2;
  const int walkers = f.chain_walkers();
  k.dim = f.chain_dim();
  (void)walkers;
  const ResultsFile::StepSelection sel = f.select_steps(burn, steps, max_samples);  // stored steps after burn-in
  k.theta = sel.rows ? f.read_chain_rows(sel.first, sel.last, sel.stride) : std::vector<double>{};
  k.rows = k.theta.size() / k.dim;
  k.median.resize(k.dim);
  std::vector<double> col(k.rows);
  for (std::size_t p = 0; p < k.dim; ++p) {
    for (std::size_t r = 0; r < k.rows; ++r) col[r] = k.theta[r * k.dim + p];
    k.median[p] = percentile(col, 50.0);
  }
  return k;
}

std::vector<InstrumentSeries> series_by_instrument(const VelocityData& d, const std::vector<double>& value,
                                                   const std::vector<double>* time_override = nullptr) {
  std::vector<InstrumentSeries> out(d.n_instruments());
  for (std::size_t i = 0; i < d.n_instruments(); ++i) out[i].name = d.instrument_names[i];
  for (std::size_t i = 0; i < d.size(); ++i) {
    auto& s = out[static_cast<std::size_t>(d.instrument[i])];
    s.time_bjd.push_back(time_override ? (*time_override)[i] : d.time_days[i] + d.reference_epoch_bjd);
    s.value.push_back(value[i]);
    s.error.push_back(d.uncertainty_m_s[i]);
  }
  std::erase_if(out, [](const InstrumentSeries& s) { return s.time_bjd.empty(); });
  return out;
}

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

std::string fmt_q(const Quantiles& q) { return format_with_uncertainty(q); }

}  // namespace

// ---- Comparison into the results file ---------------------------------------------------

void write_comparison(ResultsFile& file, const CompareResult& r) {
  std::vector<double> col(r.rows.size());
  auto column = [&](auto get) {
    for (std::size_t i = 0; i < r.rows.size(); ++i) col[i] = get(r.rows[i]);
    return std::span<const double>(col);
  };
  std::vector<long long> n_planets;
  for (const auto& row : r.rows) n_planets.push_back(row.n_planets);
  file.write_ints("/comparison/n_planets", n_planets, "number of Keplerians of each model");
  file.write_vector("/comparison/ln_evidence", column([](const ComparisonRow& x) { return x.ln_evidence; }), "nats",
                    "ln Z by nested sampling");
  file.write_vector("/comparison/ln_evidence_err", column([](const ComparisonRow& x) { return x.ln_evidence_err; }),
                    "nats", "sqrt(H / n_live) (Skilling 2006)");
  file.write_vector("/comparison/ln_like_max", column([](const ComparisonRow& x) { return x.ln_like_max; }), "nats",
                    "highest ln L visited by nested sampling");
  file.write_vector("/comparison/bic", column([](const ComparisonRow& x) { return x.bic; }), "", "k ln n - 2 ln L");
  file.write_vector("/comparison/aicc", column([](const ComparisonRow& x) { return x.aicc; }), "",
                    "2k - 2 ln L + 2k(k+1)/(n-k-1)");
  file.write_vector("/comparison/information_nats", column([](const ComparisonRow& x) { return x.information_nats; }),
                    "nats", "information H (Kullback-Leibler divergence prior -> posterior)");
  file.write_vector("/comparison/ln_bayes_vs_previous",
                    column([](const ComparisonRow& x) { return x.ln_bayes_vs_previous; }), "nats",
                    "ln Z(k) - ln Z(previous row); NaN for the first row");
  file.set_attribute("/comparison", "selected_n_planets", static_cast<long long>(r.selected_n_planets));
  file.set_attribute("/comparison", "selection_rule", r.selection_rule);
  for (const auto& row : r.rows) {
    if (row.nested.samples.empty()) continue;  // e.g. a comparison reused from the cache
    const std::string g = fmt::format("/nested_samples/k{}", row.n_planets);
    const auto& s = row.nested.samples;
    const std::size_t dim = s.empty() ? 0 : s.front().theta.size();
    std::vector<double> theta, ln_like, ln_w, ln_x;
    theta.reserve(s.size() * dim);
    for (const auto& x : s) {
      theta.insert(theta.end(), x.theta.begin(), x.theta.end());
      ln_like.push_back(x.ln_like);
      ln_w.push_back(x.ln_weight);
      ln_x.push_back(x.ln_prior_volume);
    }
    file.write_matrix(g + "/theta", theta, s.size(), dim, "parameter units (see names)",
                      "dead points then final live points, in parameter order");
    file.write_strings(g + "/names", row.nested.names, "parameter names (theta columns)");
    file.write_vector(g + "/ln_like", ln_like, "nats", "ln L of each point");
    file.write_vector(g + "/ln_weight", ln_w, "nats", "normalised posterior weight, sum exp = 1");
    file.write_vector(g + "/ln_prior_volume", ln_x, "nats", "expected ln X at removal");
    file.set_attribute(g, "ln_evidence", row.ln_evidence);
    file.set_attribute(g, "ln_evidence_err", row.ln_evidence_err);
    file.set_attribute(g, "live_points", static_cast<long long>(row.nested.live_points));
    file.set_attribute(g, "termination", to_string(row.nested.termination));
    file.set_attribute(g, "ordering", row.ordering_note);
  }
  file.flush();
}

// ---- Contract JSON ------------------------------------------------------------------------

std::string summary_json(const ResultsFile& file) {
  const RunSummary s = summarize_run(file);
  auto q = [&](const std::string& name) -> json {
    const SummaryRow* r = s.find(name);
    if (r == nullptr) return nullptr;
    return json{{"median", r->q.median}, {"minus", r->q.minus}, {"plus", r->q.plus}};
  };
  json j;
  j["data"] = {{"n_points", s.n_points}, {"instruments", s.instruments}, {"baseline_d", s.baseline_d}};
  j["comparison"] = json::array();
  j["selected_n_planets"] = s.n_planets;
  if (file.exists("/comparison/n_planets")) {
    const auto n = file.read_ints("/comparison/n_planets");
    const auto lz = file.read_vector("/comparison/ln_evidence");
    const auto le = file.read_vector("/comparison/ln_evidence_err");
    const auto ll = file.read_vector("/comparison/ln_like_max");
    const auto bic = file.read_vector("/comparison/bic");
    const auto aicc = file.read_vector("/comparison/aicc");
    for (std::size_t i = 0; i < n.size(); ++i) {
      j["comparison"].push_back({{"n_planets", n[i]}, {"ln_like_max", finite_or_null(ll[i])}, {"bic", finite_or_null(bic[i])},
                                 {"aicc", finite_or_null(aicc[i])}, {"ln_evidence", finite_or_null(lz[i])},
                                 {"ln_evidence_err", finite_or_null(le[i])}});
    }
    j["selection_rule"] = file.string_attribute("/comparison", "selection_rule");
    j["comparison_selected_n_planets"] = file.int_attribute("/comparison", "selected_n_planets");
  }
  j["planets"] = json::array();
  for (int p = 0; p < s.n_planets; ++p) {
    const std::string l = planet_label(p);
    json pl = {{"label", l}};
    for (const char* k : {"period_d", "K_ms", "ecc", "omega_deg", "t_conj_bjd", "t_peri_bjd", "msini_mjup",
                          "msini_mearth", "a_au", "r_peri_au", "r_apo_au"})
      pl[k] = q(l + "." + k);
    j["planets"].push_back(pl);
  }
  j["instruments"] = json::array();
  for (const auto& name : s.instruments) {
    json in = {{"name", name}, {"offset_ms", q(name + ".offset_ms")}};
    in["jitter_ms"] = s.find(name + ".jitter_ms") ? q(name + ".jitter_ms") : json(nullptr);
    j["instruments"].push_back(in);
  }
  j["sampler"] = {{"walkers", s.walkers},          {"steps", s.steps},
                  {"burn_in_steps", s.burn_in_steps}, {"rhat_max", finite_or_null(s.rhat_max)},
                  {"ess_min", finite_or_null(s.ess_min)}, {"tau_max", finite_or_null(s.tau_max)},
                  {"converged", s.converged},         {"termination", s.termination}};
  j["notes"] = {"m sin i is a minimum mass: the inclination is unknown from velocities alone",
                "quantities are {median, minus, plus} from the 16th, 50th and 84th percentiles"};
  return j.dump(2) + "\n";
}

// ---- Figures of a run -------------------------------------------------------------------

std::vector<std::string> write_run_figures(const ResultsFile& file, const std::string& dir,
                                           const FigureOptions& options) {
  std::error_code ec;
  fs::create_directories(dir, ec);
  if (!fs::is_directory(dir)) throw InputError(fmt::format("{}: cannot create the figures directory", dir));
  std::vector<std::string> written;
  const VelocityData data = read_data(file);
  const std::vector<std::string> names = file.read_strings("/parameters/names");
  const ModelLayout L = layout_from_names(names, data.n_instruments());
  if (L.n_params() != names.size())
    throw InputError(fmt::format("{}: cannot rebuild the model from its parameter names", file.path()));
  const KeplerianModel model(data, L);
  const KeptSamples kept = read_kept(file, 20000);
  const std::vector<double>& th = kept.median;

  // (1) Velocities with the model (offsets removed so instruments share one scale).
  {
    TimeSeriesFigureData ts;
    std::vector<double> shifted(data.size()), resid = model.residuals(th);
    for (std::size_t i = 0; i < data.size(); ++i)
      shifted[i] = data.velocity_m_s[i] - th[L.offset_index(data.instrument[i])];
    ts.instruments = series_by_instrument(data, shifted);
    ts.residuals = series_by_instrument(data, resid);
    const auto [tmin, tmax] = std::minmax_element(data.time_days.begin(), data.time_days.end());
    const int n = 3000;
    std::vector<double> tg(n), vg(n);
    const double pad = 0.02 * (*tmax - *tmin);
    for (int i = 0; i < n; ++i) tg[static_cast<std::size_t>(i)] = *tmin - pad + (*tmax - *tmin + 2 * pad) * i / (n - 1);
    model.planets_velocity(th, tg, vg);
    for (int i = 0; i < n; ++i) {
      const double t = tg[static_cast<std::size_t>(i)];
      if (L.trend_order() >= 1) vg[static_cast<std::size_t>(i)] += th[L.trend_index(1)] * t;
      if (L.trend_order() >= 2) vg[static_cast<std::size_t>(i)] += th[L.trend_index(2)] * t * t;
      tg[static_cast<std::size_t>(i)] = t + data.reference_epoch_bjd;
    }
    ts.model_time_bjd = tg;
    ts.model_value = vg;
    ts.model_label = fmt::format("{}-planet model (posterior median)", L.n_planets);
    ts.value_label = "Radial velocity − instrument offset [m/s]";
    FigureOptions o = options;
    if (o.title.empty()) o.title = "Velocities and model";
    written.push_back(write_time_series_figure(ts, figure_path(dir, "velocities", o.format), o).path);
  }
  // (2) Phase folds.
  if (L.n_planets > 0) {
    PhaseFoldFigureData pf;
    const std::vector<double> resid = model.residuals(th);
    for (int j = 0; j < L.n_planets; ++j) {
      std::vector<double> single(th.begin(), th.end());
      for (int k = 0; k < L.n_planets; ++k)
        if (k != j) single[L.planet_index(k) + 1] = 0.0;  // K = 0 removes planet k
      // This planet's signal alone plus the residuals.
      std::vector<double> only(data.size());
      ModelLayout Lj = L;
      std::vector<double> pj(5 * 1);
      const Planet p = planet_from(th, L, j);
      for (std::size_t i = 0; i < data.size(); ++i) only[i] = planet_velocity(p, data.time_days[i]) + resid[i];
      (void)single;
      (void)Lj;
      PhaseFoldPanel panel;
      panel.planet_label = planet_label(j);
      panel.period_days = p.period_days;
      panel.t_ref_bjd = p.t_conj_days + data.reference_epoch_bjd;
      panel.data = series_by_instrument(data, only);
      panel.residuals = series_by_instrument(data, resid);
      const int n = 400;
      for (int i = 0; i <= n; ++i) {
        const double ph = -0.5 + static_cast<double>(i) / n;
        panel.model_phase.push_back(ph);
        panel.model_value.push_back(planet_velocity(p, p.t_conj_days + ph * p.period_days));
      }
      panel.subtitle = fmt::format("P = {:.5g} d, K = {:.3g} m/s, e = {:.2f}; phase 0 = conjunction", p.period_days,
                                   p.semi_amplitude_m_s, p.ecc());
      pf.planets.push_back(panel);
    }
    FigureOptions o = options;
    if (o.title.empty()) o.title = "Phase-folded orbits (other planets and offsets removed)";
    o.width_px = std::max(o.width_px, 500 * L.n_planets);
    written.push_back(write_phase_fold_figure(pf, figure_path(dir, "phase_folds", o.format), o).path);
  }
  // (3) Corner plot per planet from the derived chains.
  for (int j = 0; j < L.n_planets; ++j) {
    const std::string l = planet_label(j);
    CornerFigureData cd;
    const std::vector<std::pair<std::string, std::string>> wanted = {
        {l + ".period_d", "Period [d]"},       {l + ".K_ms", "K [m/s]"},
        {l + ".ecc", "Eccentricity"},          {l + ".omega_deg", "ω (star) [deg]"},
        {l + ".msini_mjup", "m sin i [M_J]"}};
    for (const auto& [name, label] : wanted) {
      const std::string path = "/derived/" + name;
      if (!file.exists(path)) continue;
      std::vector<double> v = file.read_vector(path);
      if (v.size() > 20000) {
        std::vector<double> thin;
        const std::size_t stride = v.size() / 20000 + 1;
        for (std::size_t i = 0; i < v.size(); i += stride) thin.push_back(v[i]);
        v = thin;
      }
      cd.parameters.push_back({label, v, std::numeric_limits<double>::quiet_NaN()});
    }
    if (cd.parameters.size() < 2) continue;
    FigureOptions o = options;
    o.width_px = o.height_px = std::max(options.height_px, 1000);
    if (o.title.empty()) o.title = fmt::format("Planet {}: posterior", l);
    written.push_back(write_corner_figure(cd, figure_path(dir, "corner_" + l, o.format), o).path);
  }
  // (4) Trace plots of the sampled parameters (at most 12 per figure).
  {
    const long steps = file.chain_steps();
    const ResultsFile::StepSelection sel = file.select_steps(0, steps, 1500 * static_cast<std::size_t>(file.chain_walkers()));
    const long stride = sel.stride;
    const std::vector<double> rows = file.read_chain_rows(sel.first, sel.last, stride);
    const std::size_t nw = static_cast<std::size_t>(file.chain_walkers()), dim = kept.dim;
    const std::size_t n_rows = rows.size() / (nw * dim);
    const long burn = file.has_attribute("/chains", "burn_in_steps") ? static_cast<long>(file.int_attribute("/chains", "burn_in_steps")) : steps / 2;
    for (std::size_t first = 0, part = 1; first < dim; first += 12, ++part) {
      const std::size_t np = std::min<std::size_t>(12, dim - first);
      TraceFigureData td;
      td.n_steps = n_rows;
      td.n_walkers = nw;
      td.burn_in_step = static_cast<double>(burn / stride);
      for (std::size_t p = 0; p < np; ++p) td.labels.push_back(names[first + p]);
      td.chain.resize(n_rows * nw * np);
      for (std::size_t s = 0; s < n_rows; ++s)
        for (std::size_t w = 0; w < nw; ++w)
          for (std::size_t p = 0; p < np; ++p) td.chain[(s * nw + w) * np + p] = rows[(s * nw + w) * dim + first + p];
      FigureOptions o = options;
      o.height_px = std::max(options.height_px, static_cast<int>(160 * np));
      if (o.title.empty()) o.title = fmt::format("Walker traces (every {} steps; shaded: burn-in)", stride);
      written.push_back(write_trace_figure(td, figure_path(dir, dim > 12 ? fmt::format("traces_{}", part) : "traces", o.format), o).path);
    }
  }
  return written;
}

// ---- The whole job --------------------------------------------------------------------

AnalysisOutcome run_analysis(const Project& project, const AnalysisOptions& options) {
  AnalysisOutcome out;
  auto stage = [&](const std::string& s, const std::string& status) {
    if (options.on_stage) options.on_stage(s, status);
  };
  std::error_code ec;
  fs::create_directories(options.out_dir, ec);
  if (!fs::is_directory(options.out_dir)) throw InputError(fmt::format("{}: cannot create the output directory", options.out_dir));
  const fs::path dir(options.out_dir);
  const fs::path fig_dir = dir / "figures";
  const fs::path stages = dir / "stages";
  fs::create_directories(fig_dir, ec);
  fs::create_directories(stages, ec);
  out.results_path = (dir / "results.h5").string();
  out.summary_path = (dir / "summary.json").string();
  out.report_path = (dir / "report.md").string();
  FigureOptions fopt;
  fopt.format = options.format;

  const VelocityData data = project.load_velocities();
  const TransitData transits = project.load_transits();
  for (const auto& w : data.warnings) stage("warning", w);
  std::vector<std::string> report_figures;

  // 1. Scan.
  PeriodogramOptions popt;
  if (project.search.min_period_d) popt.min_period_days = *project.search.min_period_d;
  if (project.search.max_period_d) popt.max_period_days = *project.search.max_period_d;
  popt.oversample = project.search.oversample;
  popt.threads = options.threads;
  const PeriodogramResult scan = compute_periodogram(data, popt);
  stage("scan", scan.BriefReport());
  {
    PeriodogramFigureData pd;
    pd.periodogram = panel_from(scan, data, "Velocities");
    for (std::size_t i = 0; i < scan.frequency_per_day.size(); ++i) {
      if (scan.frequency_per_day[i] <= 0) continue;
      pd.window_period_days.push_back(1.0 / scan.frequency_per_day[i]);
      pd.window_power.push_back(scan.window_power[i]);
    }
    FigureOptions o = fopt;
    o.title = "Generalised Lomb–Scargle periodogram and window function";
    report_figures.push_back(write_periodogram_figure(pd, figure_path(fig_dir.string(), "periodogram", o.format), o).path);
  }

  // 2. Planet search, with the residual periodogram of each step.
  const SearchProblem problem = search_problem(project, data, transits);
  const SearchResult search = search_planets(problem, search_options(project));
  stage("search", search.BriefReport());
  std::vector<PeriodogramPanel> step_panels;
  for (std::size_t k = 0; k < search.fits.size() && k < 7; ++k) {
    std::vector<Planet> planets;
    for (int j = 0; j < search.fits[k].layout.n_planets; ++j) planets.push_back(planet_from(search.fits[k].theta, search.fits[k].layout, j));
    const PeriodogramResult r = k == 0 ? scan : compute_residual_periodogram(data, planets, popt);
    step_panels.push_back(panel_from(r, data, k == 0 ? "Velocities" : fmt::format("Residuals after {} planet(s)", k)));
  }
  {
    FigureOptions o = fopt;
    o.title = "Planet search: periodogram of each step";
    o.height_px = std::max(800, 300 * static_cast<int>(step_panels.size()));
    report_figures.push_back(write_periodogram_steps_figure(step_panels, figure_path(fig_dir.string(), "search_steps", o.format), o).path);
  }

  // 3. Comparison (unless [model] planets decides).
  CompareResult comparison;
  int n_planets = search.selected_n_planets;
  const fs::path compare_cache = stages / "comparison.json";
  if (project.model.planets) {
    n_planets = *project.model.planets;
    out.decision = fmt::format("{} planet(s), as [model] planets sets (no evidence comparison run).", n_planets);
    stage("compare", "skipped: [model] planets is set");
  } else {
    CompareOptions copt;
    copt.min_planets = std::max(0, search.selected_n_planets - 1);
    copt.max_planets = std::min(project.search.max_planets, search.selected_n_planets + 1);
    copt.max_planets = std::max(copt.max_planets, copt.min_planets);
    copt.nested.live_points = options.live_points > 0 ? options.live_points : project.evidence.live_points;
    copt.nested.seed = project.evidence.seed;
    copt.nested.threads = options.threads;
    copt.bayes_threshold = project.evidence.bayes_threshold;
    copt.search_hints = search_signals(search);
    const ModelLayout base = problem_layout(problem, 0);
    auto priors_for = [&](const ModelLayout& layout) { return problem_priors(problem, layout); };
    // The comparison is the slow stage: cache it (keyed by the project text and the
    // options) so that --resume does not redo it.
    const std::string key = fmt::format("v3|{}|{}|{}|{}|{}|{}", std::hash<std::string>{}(project.text), copt.min_planets,
                                        copt.max_planets, copt.nested.live_points, copt.nested.seed, copt.bayes_threshold);
    bool cached = false;
    if (options.resume && fs::exists(compare_cache)) {
      try {
        std::ifstream in(compare_cache);
        const json c = json::parse(in);
        if (c.at("key").get<std::string>() == key) {
          comparison.selected_n_planets = c.at("selected_n_planets");
          comparison.selection_rule = c.at("selection_rule");
          comparison.notes = c.at("notes").get<std::vector<std::string>>();
          comparison.message = c.at("message");
          for (const auto& r : c.at("rows")) {
            ComparisonRow row;
            row.n_planets = r.at("n_planets");
            row.n_params = r.at("n_params");
            auto num = [&](const char* k) { return r.at(k).is_null() ? std::nan("") : r.at(k).get<double>(); };
            row.ln_evidence = num("ln_evidence");
            row.ln_evidence_err = num("ln_evidence_err");
            row.ln_like_max = num("ln_like_max");
            row.bic = num("bic");
            row.aicc = num("aicc");
            row.information_nats = num("information_nats");
            row.ln_bayes_vs_previous = num("ln_bayes_vs_previous");
            row.ln_bayes_err = num("ln_bayes_err");
            row.bayes_wording = r.at("bayes_wording");
            row.ordering_note = r.at("ordering");
            comparison.rows.push_back(row);
          }
          cached = true;
          stage("compare", "reusing the comparison in " + compare_cache.string());
        }
      } catch (const std::exception&) {
        comparison = CompareResult{};
        cached = false;
      }
    }
    if (!cached) {
      comparison = compare_planet_counts(data, base, priors_for, copt, [&](int k, const std::string& s) {
        stage("compare", fmt::format("nested sampling, {}", s));
        (void)k;
      }, &transits);
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
      write_text_atomic(compare_cache.string(), c.dump(1) + "\n");
    }
    n_planets = comparison.selected_n_planets;
    const ComparisonRow* sel = nullptr;
    const ComparisonRow* next = nullptr;
    for (const auto& r : comparison.rows) {
      if (r.n_planets == n_planets) sel = &r;
      if (r.n_planets == n_planets + 1) next = &r;
    }
    out.decision = fmt::format("{} planet(s): {}", n_planets, comparison.selection_rule);
    if (sel && std::isfinite(sel->ln_bayes_vs_previous))
      out.decision += fmt::format("; ln B({} vs {}) = {:.1f} ± {:.1f}", n_planets, n_planets - 1, sel->ln_bayes_vs_previous, sel->ln_bayes_err);
    if (next) out.decision += fmt::format("; ln B({} vs {}) = {:.1f} ± {:.1f}", n_planets + 1, n_planets, next->ln_bayes_vs_previous, next->ln_bayes_err);
    stage("compare", comparison.BriefReport());
  }

  // 4. Sampling of the selected model.
  std::unique_ptr<ResultsFile> file;
  bool reuse = false;
  if (options.resume && fs::exists(out.results_path)) {
    try {
      ResultsFile f(out.results_path, ResultsFile::Mode::kReadOnly);
      reuse = f.exists("/project/text") && f.read_text("/project/text") == project.text &&
              f.has_attribute("/chains", "termination") && f.string_attribute("/chains", "termination") != "interrupted" &&
              f.has_attribute("/chains", "n_planets") && f.int_attribute("/chains", "n_planets") == n_planets;
    } catch (const InputError&) {
      reuse = false;
    }
  }
  if (reuse) {
    stage("sample", "reusing the finished run in " + out.results_path);
  } else if (n_planets == 0) {
    stage("sample", "no planet selected: sampling the 0-planet model (offsets and jitters)");
  }
  if (!reuse) {
    SamplingRunOptions sopt;
    sopt.out_path = out.results_path;
    sopt.max_steps = options.max_steps;
    sopt.threads = options.threads;
    sopt.n_planets = n_planets;
    if (static_cast<std::size_t>(n_planets) < search.fits.size()) sopt.start = &search.fits[static_cast<std::size_t>(n_planets)];
    sopt.progress = options.on_sampling;
    const SamplingRun run = sample_project(project, sopt);
    if (!run.failure.empty()) throw std::runtime_error(run.failure);
    out.sampler_message = run.result.message;
    stage("sample", run.result.BriefReport());
  }
  file = std::make_unique<ResultsFile>(out.results_path, ResultsFile::Mode::kReadWrite);
  if (!comparison.rows.empty() && !(reuse && file->exists("/comparison/n_planets"))) write_comparison(*file, comparison);
  {
    std::vector<double> f = scan.frequency_per_day;
    file->write_vector("/periodograms/velocities/frequency_per_d", f, "1/d", "frequency grid");
    file->write_vector("/periodograms/velocities/power", scan.power, "", "generalised Lomb-Scargle power (standard normalisation)");
    file->write_vector("/periodograms/velocities/window_power", scan.window_power, "", "window function on the same grid");
  }
  {
    std::vector<long long> k;
    std::vector<double> lnl, bic, aicc, fap, period;
    for (const auto& s : search.steps) {
      k.push_back(s.n_planets);
      lnl.push_back(s.log_likelihood);
      bic.push_back(s.bic);
      aicc.push_back(s.aicc);
      fap.push_back(s.admitting_fap);
      period.push_back(s.admitting_period_days);
    }
    file->write_ints("/search/n_planets", k, "planets fitted at each step");
    file->write_vector("/search/ln_like", lnl, "nats", "maximum ln L of each step");
    file->write_vector("/search/bic", bic, "", "BIC of each step");
    file->write_vector("/search/aicc", aicc, "", "AICc of each step");
    file->write_vector("/search/admitting_fap", fap, "", "Baluev FAP of the residual peak that admitted the planet");
    file->write_vector("/search/admitting_period_d", period, "d", "period of that peak");
  }
  file->flush();
  const RunSummary summary = summarize_run(*file);
  out.selected_n_planets = summary.n_planets;
  out.converged = summary.converged;
  if (out.sampler_message.empty()) out.sampler_message = summary.message;
  write_text_atomic(out.summary_path, summary_json(*file));
  stage("summarize", fmt::format("{} planet(s); R-hat max {:.4f}, ESS min {:.0f}", summary.n_planets, summary.rhat_max, summary.ess_min));

  // 5. Transits.
  std::vector<std::pair<std::string, EphemerisResult>> ephemerides;
  if (transits.size() > 0) {
    std::vector<std::string> labels;
    for (const auto& l : transits.planet)
      if (std::find(labels.begin(), labels.end(), l) == labels.end()) labels.push_back(l);
    for (const auto& l : labels) {
      const TransitData td = transits.for_planet(l);
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
      FigureOptions o = fopt;
      o.title = fmt::format("Planet {}: transit times minus the linear ephemeris", l);
      report_figures.push_back(write_oc_figure(oc, figure_path(fig_dir.string(), "o_minus_c_" + l, o.format), o).path);
      stage("ephemeris", fmt::format("planet {}: {}", l, er.BriefReport()));
      ephemerides.emplace_back(l, std::move(er));
    }
  }

  // 6. Figures of the run.
  for (const auto& p : write_run_figures(*file, fig_dir.string(), fopt)) report_figures.push_back(p);
  out.figures = report_figures;
  stage("figures", fmt::format("{} figure(s) in {}", report_figures.size(), fig_dir.string()));

  // 7. Report.
  out.cautions = {
      "A periodic velocity signal can come from stellar rotation or magnetic activity rather than a planet: "
      "check activity indicators (line shapes, chromospheric emission) for the same periods before calling it a planet.",
      "Sampling creates aliases: a peak at |f ± 1/day| or |f ± 1/year| of a stronger one may be its alias; "
      "the scan flags such peaks and the fit tried them.",
      "m sin i is a minimum mass: the true mass is m sin i / sin i, and sin i is unknown from velocities alone "
      "(a transiting planet has sin i ≈ 1).",
      "The results depend on the priors, listed below; the evidence in particular scales with the prior ranges.",
  };
  std::ostringstream md;
  const std::string star = project.star.name.empty() ? "the star" : project.star.name;
  md << fmt::format("# apsides report: {}\n\n", star);
  md << fmt::format("**Decision.** {}\n\n", out.decision);
  md << fmt::format("**Sampling.** {}\n\n", out.sampler_message);
  md << fmt::format("Data: {} velocities from {} instrument(s) ({}), baseline {:.1f} d; {} transit time(s).\n\n",
                    data.size(), data.n_instruments(), fmt::join(data.instrument_names, ", "), data.baseline_days(),
                    transits.size());
  md << "## Planets (posterior medians, 16th–84th percentile intervals)\n\n";
  if (summary.n_planets == 0) md << "No planet is supported by the data.\n\n";
  else {
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
    if (!project.star.mass_msun) md << "; it and a need the star's mass ([star] mass_msun), which this project does not give";
    md << ".\n\n";
  }
  md << "## Instruments\n\n| instrument | offset [m/s] | jitter [m/s] |\n|---|---|---|\n";
  for (const auto& n : summary.instruments) {
    const SummaryRow* o = summary.find(n + ".offset_ms");
    const SummaryRow* j = summary.find(n + ".jitter_ms");
    md << fmt::format("| {} | {} | {} |\n", n, o ? fmt_q(o->q) : "—", j ? fmt_q(j->q) : "—");
  }
  md << "\n## Periodogram and planet search\n\n";
  md << fmt::format("![periodogram](figures/periodogram{})\n\n", figure_extension(options.format));
  md << "| step | planets | ln L | BIC | AICc | admitted by (period, FAP) |\n|---|---|---|---|---|---|\n";
  for (std::size_t i = 0; i < search.steps.size(); ++i) {
    const auto& s = search.steps[i];
    md << fmt::format("| {} | {} | {:.2f} | {:.2f} | {:.2f} | {} |\n", i, s.n_planets, s.log_likelihood, s.bic, s.aicc,
                      std::isfinite(s.admitting_fap) ? fmt::format("{:.5g} d, {:.2g}", s.admitting_period_days, s.admitting_fap) : "—");
  }
  md << fmt::format("\n{}\n\n![search steps](figures/search_steps{})\n\n", search.message, figure_extension(options.format));
  if (!comparison.rows.empty()) {
    md << "## How many planets: evidence\n\n";
    md << "| planets | ln Z | ± | max ln L | BIC | AICc | ln B vs previous row | Kass & Raftery |\n|---|---|---|---|---|---|---|---|\n";
    for (const auto& r : comparison.rows) {
      md << fmt::format("| {} | {:.2f} | {:.2f} | {:.2f} | {:.2f} | {:.2f} | {} | {} |\n", r.n_planets, r.ln_evidence,
                        r.ln_evidence_err, r.ln_like_max, r.bic, r.aicc,
                        std::isfinite(r.ln_bayes_vs_previous) ? fmt::format("{:.1f} ± {:.1f}", r.ln_bayes_vs_previous, r.ln_bayes_err) : "—",
                        r.bayes_wording.empty() ? "—" : r.bayes_wording);
    }
    md << fmt::format("\nRule: {}. Models compared: the search's answer and its neighbours.\n\n", comparison.selection_rule);
    for (const auto& n : comparison.notes)
      if (n.rfind("prior: ", 0) != 0) md << "- " << n << "\n";
    md << "\n";
  }
  md << "## Orbits\n\n";
  md << fmt::format("![velocities](figures/velocities{})\n\n", figure_extension(options.format));
  if (summary.n_planets > 0) md << fmt::format("![phase folds](figures/phase_folds{})\n\n", figure_extension(options.format));
  for (int p = 0; p < summary.n_planets; ++p)
    md << fmt::format("![corner {0}](figures/corner_{0}{1})\n\n", planet_label(p), figure_extension(options.format));
  if (!ephemerides.empty()) {
    md << "## Transits\n\n";
    for (const auto& [l, er] : ephemerides) {
      md << fmt::format("Planet {}: {}\n\n", l, er.BriefReport());
      md << fmt::format("![O-C {0}](figures/o_minus_c_{0}{1})\n\n", l, figure_extension(options.format));
      md << "| epoch | predicted mid-transit [BJD_TDB] | ± [min] | UTC |\n|---|---|---|---|\n";
      for (const auto& pr : er.predictions)
        md << fmt::format("| {} | {:.5f} | {:.1f} | {} |\n", pr.epoch, pr.t_mid_bjd, pr.err_days * 1440.0, pr.utc);
      md << "\nUTC: BJD_TDB − (32.184 s + leap seconds) at the barycentre; add your site's light-time (up to ±8.3 min).\n\n";
    }
  }
  md << "## Convergence\n\n```\n" << summary.FullReport() << "```\n\n";
  for (const auto& f : report_figures)  // one trace figure per 12 parameters (traces.png, or traces_1.png, ...)
    if (const std::string n = fs::path(f).filename().string(); n.rfind("traces", 0) == 0)
      md << fmt::format("![{}](figures/{})\n\n", fs::path(n).stem().string(), n);
  md << "## Priors\n\n";
  for (const auto& pr : file->read_strings("/parameters/priors")) md << "- " << pr << "\n";
  md << "\n## Cautions\n\n";
  for (const auto& c : out.cautions) md << "- " << c << "\n";
  md << fmt::format("\nEverything (data, chains, derived chains, diagnostics, periodograms, comparison, nested samples) is in `results.h5`; the machine-readable summary is `summary.json`.\n");
  write_text_atomic(out.report_path, md.str());
  return out;
}

}  // namespace apsides
