// apsides compare PROJECT.toml --max-planets N [--live-points N] [--seed N] [--threshold X]
//                 [--json FILE] [--out run.h5] [--quiet]
#include <fmt/format.h>

#include <filesystem>
#include <memory>

#include "apsides/analysis.h"
#include "apsides/error.h"
#include "apsides/evidence.h"
#include "apsides/fit.h"
#include "apsides/json_outputs.h"
#include "apsides/model_priors.h"
#include "apsides/project.h"
#include "apsides/project_stages.h"
#include "apsides/results_file.h"
#include "cli/common.h"

namespace apsides::cli {
namespace {

struct CompareArgs {
  std::string project;
  int max_planets = -1;
  int min_planets = 0;
  int live_points = -1;
  int slice_steps = 0;
  double jumps_per_step = -1.0;
  long long seed = -1;
  double threshold = std::numeric_limits<double>::quiet_NaN();
  int threads = 2;
  std::string out;
  CommonOptions common;
};

}  // namespace

Command register_compare(CLI::App& app) {
  auto args = std::make_shared<CompareArgs>();
  CLI::App* cmd = app.add_subcommand(
      "compare",
      "Bayesian evidence (nested sampling) and BIC/AICc for 0..N Keplerians; Bayes factors of each k against\n"
      "k - 1 with the Kass & Raftery (1995) wording, and the number of planets the data support.\n"
      "Defaults from the project's [evidence] table (live_points, seed, bayes_threshold).");
  cmd->add_option("project", args->project, "Project TOML file")->required();
  cmd->add_option("--max-planets", args->max_planets, "Largest number of planets compared (default [search] max_planets)")
      ->check(CLI::Range(0, 9));
  cmd->add_option("--min-planets", args->min_planets,
                  "Smallest number of planets compared (default 0; the Bayes factor of the smallest model is not shown)")
      ->check(CLI::Range(0, 9));
  cmd->add_option("--live-points", args->live_points, "Live points (default [evidence] live_points = 500)")
      ->check(CLI::Range(20, 100000));
  cmd->add_option("--slice-steps", args->slice_steps,
                  "Slice moves per new live point (default 3 x the sampled dimensions, 5 x with two or more planets of free period)")
      ->check(CLI::Range(1, 100000));
  cmd->add_option("--jumps-per-step", args->jumps_per_step,
                  "Period-jump attempts per slice move (default 2; 0 turns the jumps off)")
      ->check(CLI::Range(0.0, 100.0));
  cmd->add_option("--seed", args->seed, "Random seed (default [evidence] seed)")->check(CLI::NonNegativeNumber);
  cmd->add_option("--threshold", args->threshold,
                  "Selection: largest k whose ln B against k - 1 exceeds this (default 5)");
  cmd->add_option("--threads", args->threads, "Threads (results do not depend on it)")->check(CLI::Range(1, 64));
  cmd->add_option("-o,--out", args->out, "Also write the comparison and nested samples into this HDF5 results file");
  add_common_options(cmd, args->common);
  return {cmd, [args]() -> int {
            const Project project = load_project(args->project);
            require_keplerian(project, "compare");
            const VelocityData data = project.load_velocities();
            print_warnings(data);
            const TransitData transits = project.transits.empty() ? TransitData{} : project.load_transits();
            CompareOptions opt;
            opt.max_planets = args->max_planets >= 0 ? args->max_planets : project.search.max_planets;
            opt.min_planets = args->min_planets;
            opt.nested.live_points = args->live_points > 0 ? args->live_points : project.evidence.live_points;
            opt.nested.seed = args->seed >= 0 ? static_cast<std::uint64_t>(args->seed) : project.evidence.seed;
            opt.nested.threads = args->threads;
            opt.nested.slice_steps = args->slice_steps;
            if (args->jumps_per_step >= 0.0) opt.nested.jumps_per_step = args->jumps_per_step;
            opt.bayes_threshold = std::isnan(args->threshold) ? project.evidence.bayes_threshold : args->threshold;
            if (const std::string v = opt.Validate(); !v.empty()) throw InputError(v);
            auto bar = std::make_shared<std::unique_ptr<ProgressBar>>();
            int current_k = 0;
            opt.nested.progress = [bar, &current_k](long it, double ln_z, double ln_rem) {
              if (*bar) (*bar)->update(std::min(1.0, std::max(0.0, 1.0 - (ln_rem - ln_z) / 50.0)),
                                       fmt::format("k = {}  iteration {}  ln Z {:.2f}", current_k, it, ln_z));
            };
            const bool quiet = args->common.quiet;
            // compare_project validates every model's priors first; the heading waits for the
            // first model, so bad input still gives one line on stderr.
            const CompareResult r = compare_project(project, data, transits, opt, [&](int k, const std::string& status) {
              if (!quiet && k == opt.min_planets)
                fmt::print(stderr, "Nested sampling for {}..{} planets: {} points, {} instrument(s), {} live points.\n",
                           opt.min_planets, opt.max_planets, data.size(), data.n_instruments(), opt.nested.live_points);
              current_k = k;
              *bar = std::make_unique<ProgressBar>(fmt::format("evidence k={}", k), 1.0, quiet);
              if (!quiet && !(*bar)->active()) fmt::print(stderr, "  {}\n", status);
            });
            bar->reset();
            fmt::print("Model comparison by nested sampling ({} points, {} instrument(s), {} live points, seed {}):\n",
                       data.size(), data.n_instruments(), opt.nested.live_points, opt.nested.seed);
            fmt::print("{}", r.FullReport());
            fmt::print("Priors:\n");
            for (const auto& n : r.notes)
              if (n.rfind("prior: ", 0) == 0) fmt::print("  {}\n", n.substr(7));
            if (!r.rows.empty() && r.rows.back().n_planets > 1) fmt::print("Labelling: {}.\n", r.rows.back().ordering_note);
            if (transits.size() == 0) fmt::print("Velocities only: the project has no transit times.\n");
            for (const auto& n : r.notes)
              if (n.rfind("prior: ", 0) != 0) fmt::print("Note: {}\n", n);
            fmt::print("Time: {:.1f} s.\n", r.seconds);
            if (!args->common.json_path.empty()) write_file_atomic(args->common.json_path, compare_json(r, data));
            if (!args->out.empty()) save_comparison(args->out, project, data, r);
            bool ok = true;
            for (const auto& row : r.rows)
              if (row.nested.termination != NestedTermination::kConverged) ok = false;
            return ok ? 0 : 1;
          }};
}

}  // namespace apsides::cli
