// apsides limits PROJECT --out DIR : detection limits by injection and recovery.
#include <fmt/format.h>

#include <algorithm>
#include <fstream>
#include <sstream>
#include <thread>

#include "apsides/error.h"
#include "apsides/limits.h"
#include "apsides/parallel.h"
#include "apsides/project.h"
#include "cli/common.h"

namespace apsides::cli {
namespace {
struct LimitsArgs {
  std::string project;
  std::string out_dir;
  int period_cells = -1, mass_cells = -1, injections = -1;
  long long seed = -1;
  double min_period = 0, max_period = 0, min_mass = 0, max_mass = 0;
  std::string noise, recovery, eccentricity;
  double match_width = 1.0;
  bool at_centres = false;
  bool fresh = false;
  int threads = 0;
  std::string format = "png";
  CommonOptions common;
};

// Command-line values override the project's [limits] table.
LimitsOptions options_from(const Project& project, const LimitsArgs& a, const ParallelSession& session) {
  LimitsOptions o = limits_options(project);
  if (a.period_cells != -1) o.period_cells = a.period_cells;
  if (a.mass_cells != -1) o.mass_cells = a.mass_cells;
  if (a.injections != -1) o.injections = a.injections;
  if (a.seed >= 0) o.seed = static_cast<unsigned long long>(a.seed);
  if (a.min_period > 0) o.min_period_d = a.min_period;
  if (a.max_period > 0) o.max_period_d = a.max_period;
  if (a.min_mass > 0) o.min_msini_mearth = a.min_mass;
  if (a.max_mass > 0) o.max_msini_mearth = a.max_mass;
  if (!a.noise.empty()) o.noise = parse_injection_noise(a.noise, "--noise");
  if (!a.recovery.empty()) o.recovery = parse_recovery_test(a.recovery, "--recovery");
  if (a.eccentricity == "beta") o.eccentricity.kind = EccentricityPriorKind::kBeta;
  if (a.eccentricity == "uniform") o.eccentricity.kind = EccentricityPriorKind::kUniform;
  if (a.eccentricity == "circular") o.eccentricity.kind = EccentricityPriorKind::kCircular;
  o.match_width = a.match_width;
  o.draw_within_cell = !a.at_centres;
  // One thread per rank under mpirun (ranks are the parallelism), else every core.
  o.threads = a.threads > 0 ? a.threads
              : session.uses_mpi() ? 1
                                   : std::clamp(static_cast<int>(std::thread::hardware_concurrency()), 1, 64);
  return o;
}
}  // namespace

Command register_limits(CLI::App& app) {
  auto args = std::make_shared<LimitsArgs>();
  CLI::App* cmd = app.add_subcommand(
      "limits",
      "Detection limits by injection and recovery: planets injected on a period x m sin i grid into the\n"
      "residuals of the model the planet search selects (or into white noise), searched again as\n"
      "`fit --search` searches, and counted as recovered when a signal within 1/baseline of the injected\n"
      "frequency is admitted (window aliases counted apart). DIR gets limits.json, limits.h5 (finished\n"
      "cells are kept: a rerun continues) and figures/completeness. Settings default to the project's\n"
      "[limits] table. Under `mpirun -np N` the cells are shared out among the ranks.");
  cmd->add_option("project", args->project, "Project TOML file (needs [star] mass_msun)")->required();
  cmd->add_option("-o,--out", args->out_dir, "Output directory (created if missing)")->required();
  cmd->add_option("--period-cells", args->period_cells, "Period cells, log-spaced [20]");
  cmd->add_option("--mass-cells", args->mass_cells, "m sin i cells, log-spaced [20]");
  cmd->add_option("--injections", args->injections, "Injections per cell [20]");
  cmd->add_option("--seed", args->seed, "Random seed [1]")->check(CLI::NonNegativeNumber);
  cmd->add_option("--min-period", args->min_period, "Shortest period (d) [1]")->check(CLI::PositiveNumber);
  cmd->add_option("--max-period", args->max_period, "Longest period (d) [3 x baseline]")->check(CLI::PositiveNumber);
  cmd->add_option("--min-msini", args->min_mass, "Lowest m sin i (Earth masses) [0.1 x the mass of K = rms at the shortest period]")
      ->check(CLI::PositiveNumber);
  cmd->add_option("--max-msini", args->max_mass, "Highest m sin i (Earth masses) [100 x the mass of K = rms at the longest period]")
      ->check(CLI::PositiveNumber);
  cmd->add_option("--noise", args->noise, "Inject into: residuals (of the selected model) or white (noise with the fitted jitters)")
      ->check(CLI::IsMember({"residuals", "white"}));
  cmd->add_option("--recovery", args->recovery,
                  "first_step (the search's first step: FAP, then one-planet fit and BIC rule), search (the whole\n"
                  "search), periodogram (FAP threshold only)")
      ->check(CLI::IsMember({"first_step", "search", "periodogram"}));
  cmd->add_option("--eccentricity", args->eccentricity, "Eccentricity prior of the injections: beta (Kipping 2013), uniform, circular")
      ->check(CLI::IsMember({"beta", "uniform", "circular"}));
  cmd->add_option("--match-width", args->match_width, "Recovery window in units of 1/baseline [1]")->check(CLI::NonNegativeNumber);
  cmd->add_flag("--at-cell-centres", args->at_centres, "Inject at the cell centres instead of drawing inside the cells");
  cmd->add_flag("--fresh", args->fresh, "Ignore finished cells in DIR/limits.h5 and start over");
  cmd->add_option("--threads", args->threads, "Compute threads per process [all cores; 1 per rank under mpirun]")
      ->check(CLI::Range(1, 1024));
  cmd->add_option("--format", args->format, "Figure format: png or pdf")->check(CLI::IsMember({"png", "pdf"}));
  add_common_options(cmd, args->common);
  return {cmd, [args]() -> int {
            ParallelSession session;
            try {
              const Project project = load_project(args->project);
              const LimitsOptions o = options_from(project, *args, session);
              LimitsRunOptions run;
              run.out_dir = args->out_dir;
              run.resume = !args->fresh;
              run.format = parse_figure_format(args->format, "--format");
              auto bar = std::make_shared<ProgressBar>("injections", 1.0, args->common.quiet || !session.is_root());
              run.progress = [bar](std::size_t done, std::size_t total) {
                bar->update(static_cast<double>(done) / static_cast<double>(total), fmt::format("{}/{} cells", done, total));
              };
              const LimitsResult r = run_limits(project, o, run, &session);
              bar->finish();
              if (!session.is_root()) return 0;
              fmt::print("{}\n{}", r.BriefReport(), r.FullReport());
              fmt::print("Results:  {}/limits.json, {}/limits.h5, {}/figures/completeness.{}\n", args->out_dir,
                         args->out_dir, args->out_dir, args->format);
              if (!args->common.json_path.empty()) {
                std::ifstream in(args->out_dir + "/limits.json");
                std::stringstream ss;
                ss << in.rdbuf();
                write_file_atomic(args->common.json_path, ss.str());
              }
              return r.complete ? 0 : 1;
            } catch (const InputError&) {
              if (!session.is_root()) return 2;  // every rank sees the same input; the root reports it
              throw;
            }
          }};
}

}  // namespace apsides::cli
