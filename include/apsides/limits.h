// Detection limits by injection and recovery (`apsides limits`): what planets could the
// search have missed around this star?
//
// The grid. Cells in period x minimum mass, both log-spaced. Defaults: periods from 1 d to
// 3 x the baseline T (the search's longest period); masses from 0.1 x m_rms(P_min) to
// 100 x m_rms(P_max), where m_rms(P) is the minimum mass whose circular semi-amplitude
// equals the rms of the residuals of the selected model, so that at every period the band
// 0.1-100 x m_rms(P) lies inside the grid. Mass <-> K: K = (2 pi G / P)^(1/3) m sin i
// (M + m)^(-2/3) / sqrt(1 - e^2) and its exact inverse m^3 = f (M + m)^2 with the mass
// function f = P K^3 (1 - e^2)^(3/2) / (2 pi G) (orbit.h: semi_amplitude_m_s,
// minimum_mass_msun); M is [star] mass_msun, so a project needs it.
//
// One injection. Period and mass drawn log-uniformly inside the cell (or at the cell's
// centre, `draw_within_cell = false`); e from the eccentricity prior (default Beta(0.867,
// 3.03), Kipping 2013, MNRAS 434, L51), truncated below the eccentricity at which the
// periastron would touch the star (the search's own prior limit); omega uniform in
// [0, 2 pi); the time of conjunction uniform over one period (random phase). Its velocity
// (Keplerian, m sin i at sin i = 1) is added to
//   - `residuals` (default): the residuals of the model the planet search selects on the
//     real data (observed minus that model's planets, offsets and trend), so the
//     injection sees the star's own times, uncertainties, instruments and the noise the
//     model leaves; or
//   - `white`: Gaussian noise with sd sqrt(sigma_i^2 + jitter^2), sigma_i the stated
//     uncertainties and the jitter that model fitted for the point's instrument.
// The injected data keep every instrument; transit times are not used (they belong to the
// known planets), nor [priors] entries for planets (b.*, c.*, ...): the searched planet is
// a new one. Instrument and global priors ([priors] eccentricity, offsets, jitters) stay.
//
// Recovery (`recovery`): the injected data are searched as `fit --search` searches
// (fit.h: search_planets with the project's [search] and [model] settings):
//   - `search`: the whole planet search; recovered when any planet it admits has a
//     frequency within `match_width` / T of the injected one.
//   - `first_step` (default): the search's first step only -- the fit without planets
//     (offsets, jitters), the residual periodogram, its strongest peak admitted when the
//     Baluev FAP < [search] fap_threshold, then one Keplerian fitted from seeds at that
//     peak and its window aliases (the search's seeding, with one peak instead of four and
//     two joint starts instead of four), admitted when the velocities' BIC falls by at
//     least min_bic_improvement. The same code (search_planets with max_planets = 1) and
//     the same two admission rules; it differs from `search` only when a false planet is
//     admitted first and the injected one second, or when the injected signal is not the
//     strongest residual peak but is reached from a weaker one.
//   - `periodogram`: no fit at all; the largest GLS power (zero planets, one floating
//     mean, weights 1/(sigma^2 + jitter^2) with the jitters of the selected model) within
//     `match_width` / T of the injected frequency (the injected frequency itself always
//     included) has Baluev FAP below fap_threshold, with the FAP's f_max the top of the
//     search's grid. A detector with a known distribution, for checks (noncentral chi^2).
// Aliases are counted apart: a signal recovered not at f but within match_width / T of
// |f +- 1/sidereal day|, |f +- 1/day| or |f +- 1/yr| is an alias, not a recovery.
//
// Determinism and resuming. Injection k of cell c draws from its own stream,
// std::mt19937_64 seeded from (seed, c, k) through SplitMix64, and the search is
// deterministic, so a cell's result does not depend on threads, MPI ranks or the order
// cells are run in: outputs are bitwise identical for any split. Finished cells are kept
// in DIR/limits.h5 (rewritten atomically every few seconds); a rerun of the same project
// and settings skips them (`resume`).
#pragma once

#include <functional>
#include <limits>
#include <optional>
#include <string>
#include <vector>

#include "apsides/figures.h"
#include "apsides/fit.h"
#include "apsides/parallel.h"
#include "apsides/project.h"

namespace apsides {

struct LimitsOptions {
  // Grid. Values <= 0 mean "from the data" (see above).
  int period_cells = 20;            // >= 1
  int mass_cells = 20;              // >= 1
  double min_period_d = 0.0;        // default 1 d
  double max_period_d = 0.0;        // default 3 x baseline
  double min_msini_mearth = 0.0;    // default 0.1 x m_rms(min period)
  double max_msini_mearth = 0.0;    // default 100 x m_rms(max period)
  bool draw_within_cell = true;     // log-uniform inside the cell; false: at its centre
  int injections = 20;              // per cell, >= 1
  unsigned long long seed = 1;
  // Eccentricity of the injected orbits (Kipping 2013 beta by default; kCircular: e = 0).
  EccentricityPrior eccentricity{EccentricityPriorKind::kBeta, 0.867, 3.03, 0.99};
  InjectionNoise noise = InjectionNoise::kResiduals;
  RecoveryTest recovery = RecoveryTest::kFirstStep;
  double match_width = 1.0;         // recovery window in units of 1/baseline, >= 0
  int threads = 2;                  // compute threads per process, >= 1

  std::string Validate() const;
};

// The options a project's [limits] table sets (grid, injections, seed, noise, recovery,
// eccentricity prior).
LimitsOptions limits_options(const Project& project);

// What every cell needs, computed once from the project: the search on the real data and
// the data the injections go into.
struct LimitsProblem {
  SearchProblem search;            // injected data go into search.data (velocities replaced)
  SearchOptions search_options;    // the project's search settings
  std::vector<double> base_m_s;    // residuals of the selected model (residuals mode), per point
  std::vector<double> noise_sd_m_s;  // sqrt(sigma^2 + jitter^2) per point (white mode, periodogram weights)
  double star_mass_msun = 0.0;
  double rms_m_s = 0.0;            // rms of the selected model's residuals, all points
  double baseline_days = 0.0;
  double search_max_frequency = 0.0;  // top of the search's periodogram grid (1/d): the FAP's f_max
  double search_min_period_d = 0.0, search_max_period_d = 0.0;
  int selected_n_planets = 0;
  std::vector<PlanetSummary> detected;  // planets of the selected model (figure, report)
  ModelPriors one_planet_priors;   // priors of a one-planet model (the periastron limit)
  std::string key;                 // fingerprint of the inputs and settings (resume check)
};

// Loads the data, runs the project's planet search on them and prepares the injection
// data. Throws InputError (no [star] mass_msun, too few points, bad options).
LimitsProblem make_limits_problem(const Project& project, const LimitsOptions& options);

struct LimitsGrid {
  std::vector<double> period_edges_d;      // period_cells + 1, increasing
  std::vector<double> msini_edges_mearth;  // mass_cells + 1, increasing
  std::vector<double> period_d;            // cell centres (geometric means)
  std::vector<double> msini_mearth;
  std::size_t n_cells() const { return period_d.size() * msini_mearth.size(); }
  // Cell index = i_period * mass_cells + j_mass.
  std::size_t cell(std::size_t i_period, std::size_t j_mass) const { return i_period * msini_mearth.size() + j_mass; }
};
// Throws InputError for an empty grid or impossible ranges.
LimitsGrid make_limits_grid(const LimitsProblem& problem, const LimitsOptions& options);

enum class RecoveryOutcome : int { kMissed = 0, kRecovered = 1, kAlias = 2 };

struct Injection {
  double period_d = 0.0, msini_mearth = 0.0, K_ms = 0.0, ecc = 0.0, omega_rad = 0.0;
  double t_conj_d = 0.0;           // days after the data's reference epoch
  RecoveryOutcome outcome = RecoveryOutcome::kMissed;
  // The nearest signal the recovery test admitted (period) and the FAP of the residual
  // peak (search modes: the peak that admitted it; periodogram: the best power tested).
  double found_period_d = std::numeric_limits<double>::quiet_NaN();
  double fap = std::numeric_limits<double>::quiet_NaN();
};

struct CellResult {
  long cell = -1;
  std::vector<Injection> injections;
  int recovered() const;
  int aliases() const;
};

// One injection (k of cell c) and its recovery; pure function of its arguments.
Injection run_injection(const LimitsProblem& problem, const LimitsGrid& grid, const LimitsOptions& options,
                        long cell, int k);
CellResult run_cell(const LimitsProblem& problem, const LimitsGrid& grid, const LimitsOptions& options, long cell);

// Bytes of a cell result (exact doubles), for MPI messages.
std::string encode_cell(const CellResult& cell);
CellResult decode_cell(const std::string& bytes);

struct LimitLine {
  double level = 0.0;              // 0.5, 0.9, 0.99
  std::vector<double> msini_mearth;  // per period cell; NaN where the grid never reaches the level
};

struct LimitsResult {
  LimitsGrid grid;
  LimitsOptions options;
  std::vector<CellResult> cells;   // one per grid cell; a cell not run has no injections
  // completeness[i][j]: fraction recovered at period i, mass j (NaN for cells not run);
  // alias_fraction likewise.
  std::vector<std::vector<double>> completeness, alias_fraction;
  std::vector<LimitLine> limits;   // 50, 90, 99 %
  std::size_t cells_done = 0, cells_reused = 0;
  std::vector<PlanetSummary> detected;
  double rms_m_s = 0.0, baseline_days = 0.0, star_mass_msun = 0.0, search_max_frequency = 0.0;
  int selected_n_planets = 0;
  std::string key;
  bool complete = false;           // every cell done
  std::string message = "Detection limits were not run.";

  std::string BriefReport() const;
  std::string FullReport() const;
};

// Completeness, alias fractions and limit lines from the cells (pure).
void summarise_cells(LimitsResult& result);
// The lowest mass above which completeness stays >= level, per period (log-interpolated
// between the last cell below and the first at or above; NaN when never reached).
LimitLine limit_line(const LimitsGrid& grid, const std::vector<std::vector<double>>& completeness, double level);

struct LimitsRunOptions {
  std::string out_dir;             // receives limits.h5, limits.json, figures/
  bool resume = true;              // keep finished cells of the same inputs
  FigureFormat format = FigureFormat::kPng;
  double checkpoint_seconds = 5.0; // limits.h5 rewritten at most this often
  std::function<void(std::size_t done, std::size_t total)> progress;  // root only
};

// The whole job: problem, grid, cells over threads/ranks (parallel.h), outputs. Under MPI
// every rank calls it; only the root writes files and gets a filled result (the others'
// `message` says so). `session` null: this process's threads only. Throws InputError for
// bad options or inputs.
LimitsResult run_limits(const Project& project, const LimitsOptions& options, const LimitsRunOptions& run,
                        const ParallelSession* session = nullptr);

// Outputs of a result: DIR/limits.json, DIR/limits.h5, DIR/figures/completeness.<fmt>.
// JSON keys: grid{period_d[], msini_mearth[]} (cell centres), completeness[i][j] (i period,
// j mass; null for cells not run), n_injected (per cell), limit[{level, period_d[],
// msini_mearth[]}] for 50/90/99 % (null where not reached), plus alias_fraction, counts
// and the settings.
void write_limits_json(const LimitsResult& result, const std::string& path);
void write_limits_h5(const LimitsResult& result, const std::string& path);
// Reads the finished cells of a limits.h5 written with the same key; empty otherwise.
std::vector<CellResult> read_limits_cells(const std::string& path, const std::string& key, const LimitsGrid& grid);
std::string write_limits_figure(const LimitsResult& result, const std::string& dir, FigureFormat format);

// For `apsides analyze` when [limits] enabled = true (to be called by the analysis
// pipeline after its search stage): runs the limits of the project's [limits] settings
// on this process's threads into `analysis_out_dir`/limits (resuming finished cells), and
// returns the report section (Markdown, "## Detection limits" ...) and the figure path.
struct LimitsReportSection {
  std::string markdown;
  std::vector<std::string> figures;
  std::string json_path;
  LimitsResult result;
};
LimitsReportSection run_limits_for_analysis(const Project& project, const std::string& analysis_out_dir,
                                            int threads, FigureFormat format = FigureFormat::kPng);

}  // namespace apsides
