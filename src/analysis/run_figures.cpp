// The figures of a finished run (analysis.h: write_run_figures).
#include <fmt/format.h>

#include <algorithm>
#include <filesystem>
#include <limits>

#include "analysis/run_reading.h"
#include "apsides/analysis.h"
#include "apsides/error.h"

namespace apsides {
namespace fs = std::filesystem;
using analysis::KeptSamples;

namespace {

std::vector<InstrumentSeries> series_by_instrument(const VelocityData& d, const std::vector<double>& value) {
  std::vector<InstrumentSeries> out(d.n_instruments());
  for (std::size_t i = 0; i < d.n_instruments(); ++i) out[i].name = d.instrument_names[i];
  for (std::size_t i = 0; i < d.size(); ++i) {
    auto& s = out[static_cast<std::size_t>(d.instrument[i])];
    s.time_bjd.push_back(d.time_days[i] + d.reference_epoch_bjd);
    s.value.push_back(value[i]);
    s.error.push_back(d.uncertainty_m_s[i]);
  }
  std::erase_if(out, [](const InstrumentSeries& s) { return s.time_bjd.empty(); });
  return out;
}

// (1) Velocities with the model (offsets removed so instruments share one scale).
std::string velocities_figure(const KeplerianModel& model, const std::vector<double>& th, const std::string& dir,
                              const FigureOptions& options) {
  const VelocityData& data = model.data();
  const ParameterLayout& L = model.parameters();
  const auto instruments = L.instruments();
  TimeSeriesFigureData ts;
  std::vector<double> shifted(data.size());
  for (std::size_t i = 0; i < data.size(); ++i)
    shifted[i] = data.velocity_m_s[i] - instruments[static_cast<std::size_t>(data.instrument[i])]->offset(th);
  ts.instruments = series_by_instrument(data, shifted);
  ts.residuals = series_by_instrument(data, model.residuals(th));
  const auto [tmin, tmax] = std::minmax_element(data.time_days.begin(), data.time_days.end());
  const int n = 3000;
  std::vector<double> tg(n), vg(n);
  const double pad = 0.02 * (*tmax - *tmin);
  for (int i = 0; i < n; ++i) tg[static_cast<std::size_t>(i)] = *tmin - pad + (*tmax - *tmin + 2 * pad) * i / (n - 1);
  model.planets_velocity(th, tg, vg);
  for (std::size_t i = 0; i < tg.size(); ++i) {
    if (const TrendBlock* trend = L.trend()) vg[i] += trend->at(th, tg[i]);
    tg[i] += data.reference_epoch_bjd;
  }
  ts.model_time_bjd = tg;
  ts.model_value = vg;
  ts.model_label = fmt::format("{}-planet model (posterior median)", L.planets().size());
  ts.value_label = "Radial velocity − instrument offset [m/s]";
  FigureOptions o = options;
  if (o.title.empty()) o.title = "Velocities and model";
  return write_time_series_figure(ts, figure_path(dir, "velocities", o.format), o).path;
}

// (2) Each planet's signal plus the residuals, folded on its period.
std::string phase_fold_figure(const KeplerianModel& model, const std::vector<double>& th, const std::string& dir,
                              const FigureOptions& options) {
  const VelocityData& data = model.data();
  const auto planets = model.parameters().planets();
  PhaseFoldFigureData pf;
  const std::vector<double> resid = model.residuals(th);
  for (const PlanetBlock* b : planets) {
    const Planet p = b->planet(th);
    std::vector<double> only(data.size());
    for (std::size_t i = 0; i < data.size(); ++i) only[i] = planet_velocity(p, data.time_days[i]) + resid[i];
    PhaseFoldPanel panel;
    panel.planet_label = b->label();
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
  o.width_px = std::max(o.width_px, 500 * static_cast<int>(planets.size()));
  return write_phase_fold_figure(pf, figure_path(dir, "phase_folds", o.format), o).path;
}

// (3) A corner plot per planet from the derived chains.
void corner_figures(const ResultsFile& file, const ParameterLayout& L, const std::string& dir,
                    const FigureOptions& options, std::vector<std::string>& written) {
  for (const PlanetBlock* b : L.planets()) {
    const std::string& l = b->label();
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
}

// (4) Trace plots of the sampled parameters (at most 12 per figure).
void trace_figures(const ResultsFile& file, const std::vector<std::string>& names, std::size_t dim,
                   const std::string& dir, const FigureOptions& options, std::vector<std::string>& written) {
  const long steps = file.chain_steps();
  const ResultsFile::StepSelection sel = file.select_steps(0, steps, 1500 * static_cast<std::size_t>(file.chain_walkers()));
  const long stride = sel.stride;
  const std::vector<double> rows = file.read_chain_rows(sel.first, sel.last, stride);
  const std::size_t nw = static_cast<std::size_t>(file.chain_walkers());
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
    const std::string stem = dim > 12 ? fmt::format("traces_{}", part) : "traces";
    written.push_back(write_trace_figure(td, figure_path(dir, stem, o.format), o).path);
  }
}

}  // namespace

std::vector<std::string> write_run_figures(const ResultsFile& file, const std::string& dir,
                                           const FigureOptions& options) {
  std::error_code ec;
  fs::create_directories(dir, ec);
  if (!fs::is_directory(dir)) throw InputError(fmt::format("{}: cannot create the figures directory", dir));
  std::vector<std::string> written;
  const VelocityData data = analysis::read_data(file);
  const std::vector<std::string> names = file.read_strings("/parameters/names");
  const KeplerianModel model(data, analysis::read_layout(file, data));
  const KeptSamples kept = analysis::read_kept(file, 20000);
  written.push_back(velocities_figure(model, kept.median, dir, options));
  if (!model.parameters().planets().empty()) written.push_back(phase_fold_figure(model, kept.median, dir, options));
  corner_figures(file, model.parameters(), dir, options, written);
  trace_figures(file, names, kept.dim, dir, options, written);
  return written;
}

}  // namespace apsides
