// Running the grid over threads and ranks, resuming, and the outputs (limits.h).
#include <fmt/format.h>

#include <H5Cpp.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>

#include "apsides/error.h"
#include "apsides/limits.h"
#include "apsides/results_file.h"

namespace apsides {
namespace fs = std::filesystem;
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

nlohmann::json number(double x) { return std::isfinite(x) ? nlohmann::json(x) : nlohmann::json(nullptr); }

nlohmann::json numbers(const std::vector<double>& v) {
  nlohmann::json a = nlohmann::json::array();
  for (double x : v) a.push_back(number(x));
  return a;
}

void write_text_atomic(const std::string& path, const std::string& text) {
  const std::string tmp = path + ".tmp-apsides";
  {
    std::ofstream out(tmp, std::ios::binary | std::ios::trunc);
    if (!out) throw InputError(fmt::format("{}: cannot be written", path));
    out << text;
    out.flush();
    if (!out) throw InputError(fmt::format("{}: write failed", path));
  }
  fs::rename(tmp, path);
}

std::vector<double> flatten(const std::vector<std::vector<double>>& m) {
  std::vector<double> out;
  for (const auto& row : m) out.insert(out.end(), row.begin(), row.end());
  return out;
}

// Per-cell counts as [period][mass] tables.
struct Counts {
  std::vector<std::vector<double>> injected, recovered, aliases;
};
Counts cell_counts(const LimitsResult& r) {
  const std::size_t np = r.grid.period_d.size(), nm = r.grid.msini_mearth.size();
  Counts c;
  c.injected.assign(np, std::vector<double>(nm, 0.0));
  c.recovered = c.aliases = c.injected;
  for (const CellResult& cell : r.cells) {
    if (cell.cell < 0) continue;
    const std::size_t i = static_cast<std::size_t>(cell.cell) / nm, j = static_cast<std::size_t>(cell.cell) % nm;
    c.injected[i][j] = static_cast<double>(cell.injections.size());
    c.recovered[i][j] = cell.recovered();
    c.aliases[i][j] = cell.aliases();
  }
  return c;
}

LimitsResult skeleton(const LimitsProblem& pb, const LimitsGrid& grid, const LimitsOptions& options) {
  LimitsResult r;
  r.grid = grid;
  r.options = options;
  r.cells.resize(grid.n_cells());
  for (std::size_t c = 0; c < r.cells.size(); ++c) r.cells[c].cell = -1;
  r.detected = pb.detected;
  r.rms_m_s = pb.rms_m_s;
  r.baseline_days = pb.baseline_days;
  r.star_mass_msun = pb.star_mass_msun;
  r.search_max_frequency = pb.search_max_frequency;
  r.selected_n_planets = pb.selected_n_planets;
  r.key = pb.key;
  return r;
}

}  // namespace

void write_limits_json(const LimitsResult& r, const std::string& path) {
  nlohmann::json j;
  j["grid"] = {{"period_d", numbers(r.grid.period_d)},
               {"msini_mearth", numbers(r.grid.msini_mearth)},
               {"period_edges_d", numbers(r.grid.period_edges_d)},
               {"msini_edges_mearth", numbers(r.grid.msini_edges_mearth)}};
  nlohmann::json comp = nlohmann::json::array(), alias = nlohmann::json::array();
  for (const auto& row : r.completeness) comp.push_back(numbers(row));
  for (const auto& row : r.alias_fraction) alias.push_back(numbers(row));
  j["completeness"] = comp;
  j["completeness_axes"] = {"period_d", "msini_mearth"};
  j["alias_fraction"] = alias;
  j["n_injected"] = r.options.injections;
  const Counts c = cell_counts(r);
  j["n_injected_per_cell"] = c.injected;
  j["n_recovered"] = c.recovered;
  j["n_alias"] = c.aliases;
  nlohmann::json lim = nlohmann::json::array();
  for (const LimitLine& l : r.limits)
    lim.push_back({{"level", l.level}, {"period_d", numbers(r.grid.period_d)}, {"msini_mearth", numbers(l.msini_mearth)}});
  j["limit"] = lim;
  nlohmann::json det = nlohmann::json::array();
  for (const PlanetSummary& p : r.detected)
    det.push_back({{"label", p.label}, {"period_d", number(p.period_d)}, {"K_ms", number(p.K_ms)}, {"ecc", number(p.ecc)},
                   {"msini_mearth", number(p.msini_mearth)}});
  j["detected"] = det;
  j["settings"] = {{"recovery", to_string(r.options.recovery)},
                   {"noise", to_string(r.options.noise)},
                   {"eccentricity", r.options.eccentricity.describe()},
                   {"seed", r.options.seed},
                   {"injections", r.options.injections},
                   {"match_width_per_baseline", r.options.match_width},
                   {"draw_within_cell", r.options.draw_within_cell}};
  j["star_mass_msun"] = number(r.star_mass_msun);
  j["residual_rms_ms"] = number(r.rms_m_s);
  j["baseline_d"] = number(r.baseline_days);
  j["fap_fmax_per_d"] = number(r.search_max_frequency);
  j["selected_n_planets"] = r.selected_n_planets;
  j["cells_done"] = r.cells_done;
  j["cells_total"] = r.grid.n_cells();
  j["complete"] = r.complete;
  j["key"] = r.key;
  write_text_atomic(path, j.dump(2) + "\n");
}

void write_limits_h5(const LimitsResult& r, const std::string& path) {
  const std::string tmp = path + ".tmp-apsides";
  {
    ResultsFile f(tmp, ResultsFile::Mode::kCreate);
    f.create_group("/limits");
    f.set_attribute("/limits", "key", r.key);
    f.set_attribute("/limits", "complete", static_cast<long long>(r.complete));
    f.set_attribute("/limits", "injections_per_cell", static_cast<long long>(r.options.injections));
    f.set_attribute("/limits", "seed", static_cast<long long>(r.options.seed));
    f.set_attribute("/limits", "recovery", to_string(r.options.recovery));
    f.set_attribute("/limits", "noise", to_string(r.options.noise));
    f.set_attribute("/limits", "eccentricity", r.options.eccentricity.describe());
    f.set_attribute("/limits", "star_mass_msun", r.star_mass_msun);
    f.set_attribute("/limits", "residual_rms_ms", r.rms_m_s);
    f.set_attribute("/limits", "baseline_d", r.baseline_days);
    f.set_attribute("/limits", "fap_fmax_per_d", r.search_max_frequency);
    f.write_vector("/limits/grid/period_edges_d", r.grid.period_edges_d, "d", "period cell edges (log-spaced)");
    f.write_vector("/limits/grid/msini_edges_mearth", r.grid.msini_edges_mearth, "Earth masses", "m sin i cell edges (log-spaced)");
    f.write_vector("/limits/grid/period_d", r.grid.period_d, "d", "period cell centres (geometric)");
    f.write_vector("/limits/grid/msini_mearth", r.grid.msini_mearth, "Earth masses", "m sin i cell centres (geometric)");
    const std::size_t np = r.grid.period_d.size(), nm = r.grid.msini_mearth.size();
    f.write_matrix("/limits/completeness", flatten(r.completeness), np, nm, "",
                   "fraction recovered [period][mass]; NaN for cells not run");
    f.write_matrix("/limits/alias_fraction", flatten(r.alias_fraction), np, nm, "", "fraction recovered at a window alias");
    const Counts c = cell_counts(r);
    f.write_matrix("/limits/n_injected", flatten(c.injected), np, nm, "", "injections per cell (0: not run)");
    f.write_matrix("/limits/n_recovered", flatten(c.recovered), np, nm, "", "recovered per cell");
    std::vector<double> levels, lines;
    for (const LimitLine& l : r.limits) {
      levels.push_back(l.level);
      lines.insert(lines.end(), l.msini_mearth.begin(), l.msini_mearth.end());
    }
    f.write_vector("/limits/limit/level", levels, "", "completeness levels");
    f.write_matrix("/limits/limit/msini_mearth", lines, levels.size(), np, "Earth masses",
                   "lowest m sin i above which completeness stays >= level, per period cell (NaN: not reached)");
    // Every injection of the finished cells, in cell order: what resuming reads back.
    std::vector<long long> cell, outcome;
    std::vector<double> P, m, K, e, w, tc, found, fap;
    for (const CellResult& cr : r.cells) {
      if (cr.cell < 0) continue;
      for (const Injection& i : cr.injections) {
        cell.push_back(cr.cell);
        outcome.push_back(static_cast<long long>(i.outcome));
        P.push_back(i.period_d);
        m.push_back(i.msini_mearth);
        K.push_back(i.K_ms);
        e.push_back(i.ecc);
        w.push_back(i.omega_rad);
        tc.push_back(i.t_conj_d);
        found.push_back(i.found_period_d);
        fap.push_back(i.fap);
      }
    }
    f.write_ints("/limits/injections/cell", cell, "grid cell (i_period * mass_cells + j_mass)");
    f.write_ints("/limits/injections/outcome", outcome, "0 missed, 1 recovered, 2 recovered at a window alias");
    f.write_vector("/limits/injections/period_d", P, "d", "injected period");
    f.write_vector("/limits/injections/msini_mearth", m, "Earth masses", "injected minimum mass");
    f.write_vector("/limits/injections/K_ms", K, "m/s", "injected semi-amplitude");
    f.write_vector("/limits/injections/ecc", e, "", "injected eccentricity");
    f.write_vector("/limits/injections/omega_rad", w, "rad", "injected argument of periastron (star)");
    f.write_vector("/limits/injections/t_conj_d", tc, "d", "injected time of conjunction after the reference epoch");
    f.write_vector("/limits/injections/found_period_d", found, "d", "period of the nearest admitted signal (NaN: none)");
    f.write_vector("/limits/injections/fap", fap, "", "Baluev FAP of the residual peak tested");
    std::vector<double> dp, dm;
    for (const PlanetSummary& p : r.detected) {
      dp.push_back(p.period_d);
      dm.push_back(p.msini_mearth);
    }
    f.write_vector("/limits/detected/period_d", dp, "d", "planets of the selected model");
    f.write_vector("/limits/detected/msini_mearth", dm, "Earth masses", "their minimum masses");
    f.flush();
  }
  fs::rename(tmp, path);
}

std::vector<CellResult> read_limits_cells(const std::string& path, const std::string& key, const LimitsGrid& grid) {
  std::vector<CellResult> out;
  std::error_code ec;
  if (!fs::exists(path, ec)) return out;
  try {
    ResultsFile f(path, ResultsFile::Mode::kReadOnly);
    if (!f.has_attribute("/limits", "key") || f.string_attribute("/limits", "key") != key) return out;
    const std::vector<long long> cell = f.read_ints("/limits/injections/cell");
    const std::vector<long long> outcome = f.read_ints("/limits/injections/outcome");
    const auto col = [&f](const char* name) { return f.read_vector(std::string("/limits/injections/") + name); };
    const auto P = col("period_d"), m = col("msini_mearth"), K = col("K_ms"), e = col("ecc"), w = col("omega_rad"),
               tc = col("t_conj_d"), found = col("found_period_d"), fap = col("fap");
    for (std::size_t r = 0; r < cell.size(); ++r) {
      if (cell[r] < 0 || static_cast<std::size_t>(cell[r]) >= grid.n_cells()) return {};
      if (out.empty() || out.back().cell != cell[r]) out.push_back(CellResult{static_cast<long>(cell[r]), {}});
      Injection i;
      i.period_d = P.at(r);
      i.msini_mearth = m.at(r);
      i.K_ms = K.at(r);
      i.ecc = e.at(r);
      i.omega_rad = w.at(r);
      i.t_conj_d = tc.at(r);
      i.outcome = static_cast<RecoveryOutcome>(outcome.at(r));
      i.found_period_d = found.at(r);
      i.fap = fap.at(r);
      out.back().injections.push_back(i);
    }
  } catch (const InputError&) {
    return {};  // unreadable (e.g. written by something else): start afresh
  } catch (const H5::Exception&) {
    return {};
  } catch (const std::out_of_range&) {
    return {};
  }
  return out;
}

std::string write_limits_figure(const LimitsResult& r, const std::string& dir, FigureFormat format) {
  CompletenessFigureData d;
  d.period_edges_d = r.grid.period_edges_d;
  d.mass_edges = r.grid.msini_edges_mearth;
  d.fraction = flatten(r.completeness);
  for (const PlanetSummary& p : r.detected)
    if (std::isfinite(p.msini_mearth) && p.msini_mearth > 0)
      d.planets.push_back({p.period_d, p.msini_mearth, p.label});
  FigureOptions o;
  o.format = format;
  o.title = fmt::format("Detection completeness ({} injections per cell, recovery: {})", r.options.injections,
                        to_string(r.options.recovery));
  return write_completeness_figure(d, figure_path(dir, "completeness", format), o).path;
}

LimitsResult run_limits(const Project& project, const LimitsOptions& options, const LimitsRunOptions& run,
                        const ParallelSession* session) {
  const bool root = !session || session->is_root();
  const LimitsProblem pb = make_limits_problem(project, options);
  const LimitsGrid grid = make_limits_grid(pb, options);
  LimitsResult result = skeleton(pb, grid, options);
  const fs::path dir(run.out_dir);
  const std::string h5 = (dir / "limits.h5").string();
  std::vector<long> pending;
  if (root) {
    std::error_code ec;
    fs::create_directories(dir / "figures", ec);
    if (!fs::is_directory(dir)) throw InputError(fmt::format("{}: cannot create the output directory", run.out_dir));
    if (run.resume) {
      for (CellResult& c : read_limits_cells(h5, pb.key, grid)) {
        const auto at = static_cast<std::size_t>(c.cell);
        result.cells[at] = std::move(c);
        ++result.cells_reused;
      }
    }
    for (std::size_t c = 0; c < result.cells.size(); ++c)
      if (result.cells[c].cell < 0) pending.push_back(static_cast<long>(c));
  }
  std::size_t done = result.cells_reused;
  bool dirty = false;
  auto last_write = std::chrono::steady_clock::now();
  auto checkpoint = [&](bool force) {
    const double since = std::chrono::duration<double>(std::chrono::steady_clock::now() - last_write).count();
    if (!dirty || (!force && since < run.checkpoint_seconds)) return;
    summarise_cells(result);
    write_limits_h5(result, h5);
    dirty = false;
    last_write = std::chrono::steady_clock::now();
  };
  FarmOptions fo;
  fo.threads = options.threads;
  fo.tick_seconds = std::min(1.0, run.checkpoint_seconds);
  const FarmStats stats = run_farm(
      session, pending, [&](long cell) { return encode_cell(run_cell(pb, grid, options, cell)); },
      [&](long, const std::string& bytes) {
        CellResult c = decode_cell(bytes);
        const auto at = static_cast<std::size_t>(c.cell);
        result.cells[at] = std::move(c);
        dirty = true;
        ++done;
        if (run.progress) run.progress(done, grid.n_cells());
      },
      [&] { checkpoint(false); }, fo);
  if (!root) {
    result.message = fmt::format("Rank {}: worked on the detection limits; rank 0 writes the results.", session->rank());
    return result;
  }
  summarise_cells(result);
  write_limits_h5(result, h5);
  write_limits_json(result, (dir / "limits.json").string());
  write_limits_figure(result, (dir / "figures").string(), run.format);
  const int ranks = session ? session->size() : 1;
  result.message = fmt::format("Detection limits: {} cells x {} injections ({} run now, {} reused) on {} rank(s) x {} thread(s) in {:.1f} s.",
                               grid.n_cells(), options.injections, stats.units_done, result.cells_reused, ranks,
                               options.threads, stats.wall_seconds);
  return result;
}

LimitsReportSection run_limits_for_analysis(const Project& project, const std::string& analysis_out_dir, int threads,
                                            FigureFormat format) {
  LimitsReportSection s;
  LimitsOptions o = limits_options(project);
  o.threads = std::max(1, threads);
  LimitsRunOptions run;
  run.out_dir = (fs::path(analysis_out_dir) / "limits").string();
  run.format = format;
  s.result = run_limits(project, o, run, nullptr);
  s.json_path = (fs::path(run.out_dir) / "limits.json").string();
  s.figures.push_back(figure_path((fs::path(run.out_dir) / "figures").string(), "completeness", format));
  const LimitsResult& r = s.result;
  std::string md = "## Detection limits\n\n";
  md += fmt::format(
      "Injection and recovery on this star's own times, uncertainties and instruments: {} period x {} mass cells, {} "
      "injected planets per cell (e from {}; random phase), added to {}, recovered by {} (a signal within {:g}/baseline "
      "of the injected frequency; window aliases counted apart). Residual rms {:.3g} m/s, baseline {:.0f} d, star "
      "{:.3g} Msun.\n\n",
      r.grid.period_d.size(), r.grid.msini_mearth.size(), o.injections, o.eccentricity.describe(),
      o.noise == InjectionNoise::kWhite ? "white noise with the fitted jitters" : "the residuals of the selected model",
      o.recovery == RecoveryTest::kFullSearch ? "the full planet search"
      : o.recovery == RecoveryTest::kPeriodogram ? "a periodogram threshold"
                                                 : "the search's first step (FAP then BIC rule)",
      o.match_width, r.rms_m_s, r.baseline_days, r.star_mass_msun);
  md += "| P [d] | m sin i at 50 % [M_E] | 90 % | 99 % |\n|---|---|---|---|\n";
  const std::size_t step = std::max<std::size_t>(1, r.grid.period_d.size() / 10);
  for (std::size_t i = 0; i < r.grid.period_d.size(); i += step) {
    md += fmt::format("| {:.4g} |", r.grid.period_d[i]);
    for (const LimitLine& l : r.limits)
      md += std::isfinite(l.msini_mearth[i]) ? fmt::format(" {:.3g} |", l.msini_mearth[i]) : std::string(" not reached |");
    md += "\n";
  }
  md += fmt::format("\n![Completeness](limits/figures/completeness{})\n\nFull map: `limits/limits.json`, `limits/limits.h5`.\n",
                    figure_extension(format));
  s.markdown = md;
  return s;
}

}  // namespace apsides
