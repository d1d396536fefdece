// apsides analyze PROJECT.toml --out DIR [--resume] [--format png|pdf]
#include <fmt/format.h>

#include <chrono>
#include <fstream>
#include <sstream>

#include "apsides/analysis.h"
#include "apsides/error.h"
#include "apsides/project.h"
#include "cli/common.h"

namespace apsides::cli {
namespace {
struct AnalyzeArgs {
  std::string project;
  std::string out_dir;
  bool resume = false;
  std::string format = "png";
  long max_steps = -1;
  int live_points = -1;
  int threads = 2;
  CommonOptions common;
};
}  // namespace

Command register_analyze(CLI::App& app) {
  auto args = std::make_shared<AnalyzeArgs>();
  CLI::App* cmd = app.add_subcommand(
      "analyze",
      "The whole job on a project: periodogram, planet search, evidence for the search's answer and its\n"
      "neighbours, posterior sampling of the selected model to convergence, transit ephemerides, figures\n"
      "and a report. DIR gets results.h5, summary.json, report.md and figures/.");
  cmd->add_option("project", args->project, "Project TOML file")->required();
  cmd->add_option("-o,--out", args->out_dir, "Output directory (created if missing)")->required();
  cmd->add_flag("--resume", args->resume, "Reuse a finished sampling run in DIR/results.h5 (same project)");
  cmd->add_option("--format", args->format, "Figure format: png or pdf")->check(CLI::IsMember({"png", "pdf"}));
  cmd->add_option("--max-steps", args->max_steps, "Limit on sampler steps (overrides [sampler] max_steps)")
      ->check(CLI::Range(10L, 1000000000L));
  cmd->add_option("--live-points", args->live_points, "Nested-sampling live points (overrides [evidence] live_points)")
      ->check(CLI::Range(20, 100000));
  cmd->add_option("--threads", args->threads, "Threads (results do not depend on it)")->check(CLI::Range(1, 64));
  add_common_options(cmd, args->common);
  return {cmd, [args]() -> int {
            const Project project = load_project(args->project);
            require_keplerian(project, "analyze");
            AnalysisOptions o;
            o.out_dir = args->out_dir;
            o.resume = args->resume;
            o.format = parse_figure_format(args->format, "--format");
            o.max_steps = args->max_steps;
            o.live_points = args->live_points;
            o.threads = args->threads;
            const auto t0 = std::chrono::steady_clock::now();
            const bool quiet = args->common.quiet;
            o.on_stage = [quiet, t0](const std::string& stage, const std::string& status) {
              if (quiet) return;
              const double s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
              fmt::print(stderr, "[{:6.1f} s] {:<9} {}\n", s, stage, status);
            };
            auto bar = std::make_shared<std::unique_ptr<ProgressBar>>();
            o.on_sampling = [bar, quiet](long step, long max_steps, const std::string& status) {
              if (!*bar) *bar = std::make_unique<ProgressBar>("sampling", static_cast<double>(max_steps), quiet);
              (*bar)->update(static_cast<double>(step), status);
              if (step >= max_steps) (*bar)->finish(status);
            };
            const AnalysisOutcome r = run_analysis(project, o);
            if (*bar) (*bar)->finish();
            fmt::print("{}\n", r.decision);
            fmt::print("{}\n", r.sampler_message);
            fmt::print("Report:   {}\nSummary:  {}\nResults:  {}\nFigures:  {} file(s) in {}/figures\n", r.report_path,
                       r.summary_path, r.results_path, r.figures.size(), args->out_dir);
            if (!args->common.json_path.empty()) {
              std::ifstream in(r.summary_path);
              std::stringstream ss;
              ss << in.rdbuf();
              write_file_atomic(args->common.json_path, ss.str());
            }
            return r.converged ? 0 : 1;
          }};
}

}  // namespace apsides::cli
