// apsides summarize run.h5 [--json FILE]
#include <fmt/format.h>

#include <cmath>

#include "apsides/analysis.h"
#include "apsides/posterior.h"
#include "apsides/results_file.h"
#include "cli/common.h"

namespace apsides::cli {
namespace {

struct SummarizeArgs {
  std::string results;
  std::string figures_dir;
  std::string format = "png";
  CommonOptions common;
};

}  // namespace

Command register_summarize(CLI::App& app) {
  auto args = std::make_shared<SummarizeArgs>();
  CLI::App* cmd = app.add_subcommand(
      "summarize",
      "Posterior table of a sampling run: medians with 16/84 % intervals of the parameters and the derived\n"
      "quantities (m sin i, a, periastron/apastron, time of periastron), and the convergence diagnostics.");
  cmd->add_option("results", args->results, "Results file written by apsides sample")->required();
  cmd->add_option("--figures", args->figures_dir, "Also draw the run's figures into this directory");
  cmd->add_option("--format", args->format, "Figure format: png or pdf")->check(CLI::IsMember({"png", "pdf"}));
  add_common_options(cmd, args->common);
  return {cmd, [args]() -> int {
            const ResultsFile file(args->results, ResultsFile::Mode::kReadOnly);
            const RunSummary s = summarize_run(file);
            fmt::print("{}", s.FullReport());
            if (!args->common.json_path.empty()) write_file_atomic(args->common.json_path, summary_json(file));
            if (!args->figures_dir.empty()) {
              FigureOptions fo;
              fo.format = parse_figure_format(args->format, "--format");
              const auto paths = write_run_figures(file, args->figures_dir, fo);
              fmt::print("Wrote {} figure(s) to {}\n", paths.size(), args->figures_dir);
            }
            return 0;
          }};
}

}  // namespace apsides::cli
