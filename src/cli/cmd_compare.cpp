// apsides compare PROJECT.toml --max-planets N [--live-points N] [--seed N] [--threshold X]
//                 [--json FILE] [--out run.h5] [--quiet]
#include <fmt/format.h>

#include <filesystem>
#include <memory>

#include "apsides/analysis.h"
#include "apsides/error.h"
#include "apsides/evidence.h"
#include "apsides/fit.h"
#include "apsides/model_priors.h"
#include "apsides/project.h"
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

nlohmann::json finite_or_null(double x) { return std::isfinite(x) ? nlohmann::json(x) : nlohmann::json(nullptr); }

nlohmann::json to_json(const CompareResult& r, const VelocityData& data) {
  nlohmann::json rows = nlohmann::json::array();
  for (const auto& row : r.rows) {
    rows.push_back({{"n_planets", row.n_planets},
                    {"n_params", row.n_params},
                    {"ln_like_max", finite_or_null(row.ln_like_max)},
                    {"bic", finite_or_null(row.bic)},
                    {"aicc", finite_or_null(row.aicc)},
                    {"ln_evidence", finite_or_null(row.ln_evidence)},
                    {"ln_evidence_err", finite_or_null(row.ln_evidence_err)},
                    {"information_nats", finite_or_null(row.information_nats)},
                    {"ln_bayes_vs_previous", finite_or_null(row.ln_bayes_vs_previous)},
                    {"ln_bayes_err", finite_or_null(row.ln_bayes_err)},
                    {"bayes_wording", row.bayes_wording},
                    {"termination", to_string(row.nested.termination)},
                    {"unreliable", row.unreliable},
                    {"likelihood_calls", row.likelihood_calls},
                    {"seconds", row.seconds},
                    {"ordering", row.ordering_note}});
  }
  return {{"data", {{"n_points", data.size()}, {"instruments", data.instrument_names}, {"baseline_d", data.baseline_days()}}},
          {"comparison", rows},
          {"selected_n_planets", r.selected_n_planets},
          {"selection_rule", r.selection_rule},
          {"notes", r.notes},
          {"message", r.message}};
}

void write_results(const std::string& path, const Project& project, const VelocityData& data, const CompareResult& r) {
  const bool exists = std::filesystem::exists(path);
  ResultsFile file(path, exists ? ResultsFile::Mode::kReadWrite : ResultsFile::Mode::kCreate);
  if (!exists) {
    file.write_velocity_data(data);
    file.write_project_text(project.text);
  }
  write_comparison(file, r);
}
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
            SearchProblem problem = search_problem(project, data, transits);
            problem.search.max_planets = opt.max_planets;  // [priors] may name planets up to this one
            const ModelLayout base = problem_layout(problem, 0);
            auto priors_for = [&](const ModelLayout& layout) { return problem_priors(problem, layout); };
            // Validate every model's priors before the long computation starts.
            for (int k = opt.min_planets; k <= opt.max_planets; ++k) {
              ModelLayout l = base;
              l.n_planets = k;
              (void)priors_for(l);
            }
            // A quick planet search (seconds) gives the nested sampler periods to jump to.
            if (opt.max_planets > 0) {
              SearchOptions so = search_options(project);
              so.max_planets = opt.max_planets;
              opt.search_hints = search_signals(search_planets(problem, so));
            }
            if (!args->common.quiet) {
              fmt::print(stderr, "Nested sampling for {}..{} planets: {} points, {} instrument(s), {} live points.\n",
                         opt.min_planets, opt.max_planets, data.size(), data.n_instruments(), opt.nested.live_points);
            }
            auto bar = std::make_shared<std::unique_ptr<ProgressBar>>();
            int current_k = 0;
            opt.nested.progress = [bar, &current_k](long it, double ln_z, double ln_rem) {
              if (*bar) (*bar)->update(std::min(1.0, std::max(0.0, 1.0 - (ln_rem - ln_z) / 50.0)),
                                       fmt::format("k = {}  iteration {}  ln Z {:.2f}", current_k, it, ln_z));
            };
            const bool quiet = args->common.quiet;
            const CompareResult r = compare_planet_counts(
                data, base, priors_for, opt, [&](int k, const std::string& status) {
                  current_k = k;
                  *bar = std::make_unique<ProgressBar>(fmt::format("evidence k={}", k), 1.0, quiet);
                  if (!quiet && !(*bar)->active()) fmt::print(stderr, "  {}\n", status);
                },
                &transits);
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
            if (!args->common.json_path.empty()) write_json(args->common.json_path, to_json(r, data));
            if (!args->out.empty()) write_results(args->out, project, data, r);
            bool ok = true;
            for (const auto& row : r.rows)
              if (row.nested.termination != NestedTermination::kConverged) ok = false;
            return ok ? 0 : 1;
          }};
}

}  // namespace apsides::cli
