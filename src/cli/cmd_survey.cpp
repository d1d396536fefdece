// apsides survey CATALOG --out DIR : the same job on many stars (threads, or MPI ranks).
#include <fmt/format.h>

#include <algorithm>
#include <fstream>
#include <sstream>
#include <thread>

#include "apsides/error.h"
#include "apsides/parallel.h"
#include "apsides/survey.h"
#include "cli/common.h"

namespace apsides::cli {
namespace {
struct SurveyArgs {
  std::string catalog;
  std::string out_dir;
  std::string stages;
  bool resume = false;
  int threads = 0;
  std::string format = "png";
  long max_steps = -1;
  int live_points = -1;
  CommonOptions common;
};
}  // namespace

Command register_survey(CLI::App& app) {
  auto args = std::make_shared<SurveyArgs>();
  CLI::App* cmd = app.add_subcommand(
      "survey",
      "Runs `analyze` (or some stages: --stages scan,search) on every star of a catalog, one star per\n"
      "thread or MPI rank at a time, each in DIR/stars/<star>/. A failing star is recorded with its\n"
      "error and the others go on. DIR gets survey.csv and survey.json (one row per star and planet)\n"
      "and figures/population. CATALOG is a TOML file of [[star]] project = \"...\" blocks, or a folder\n"
      "of project files. Under `mpirun -np N` the stars are shared out among the ranks.");
  cmd->add_option("catalog", args->catalog, "Catalog TOML file or a folder of project files")->required();
  cmd->add_option("-o,--out", args->out_dir, "Output directory (created if missing)")->required();
  cmd->add_option("--stages", args->stages, "all (the whole analyze), scan,search, scan, or search [the catalog's, else all]");
  cmd->add_flag("--resume", args->resume, "Skip stars whose record (DIR/stars/<star>/star.json) was written for the same project");
  cmd->add_option("--threads", args->threads, "Stars at once per process [all cores; 1 per rank under mpirun]")
      ->check(CLI::Range(1, 1024));
  cmd->add_option("--format", args->format, "Figure format: png or pdf")->check(CLI::IsMember({"png", "pdf"}));
  cmd->add_option("--max-steps", args->max_steps, "analyze: limit on sampler steps")->check(CLI::Range(10L, 1000000000L));
  cmd->add_option("--live-points", args->live_points, "analyze: nested-sampling live points")->check(CLI::Range(20, 100000));
  add_common_options(cmd, args->common);
  return {cmd, [args]() -> int {
            ParallelSession session;
            try {
              const SurveyCatalog catalog = load_catalog(args->catalog);
              SurveyOptions o;
              o.out_dir = args->out_dir;
              const std::string stages = !args->stages.empty() ? args->stages : !catalog.stages.empty() ? catalog.stages : "all";
              o.stages = parse_survey_stages(stages, args->stages.empty() ? catalog.path + ": stages" : "--stages");
              o.resume = args->resume;
              o.threads = args->threads > 0 ? args->threads
                          : session.uses_mpi() ? 1
                                               : std::clamp(static_cast<int>(std::thread::hardware_concurrency()), 1, 64);
              o.format = parse_figure_format(args->format, "--format");
              o.max_steps = args->max_steps;
              o.live_points = args->live_points;
              const bool quiet = args->common.quiet;
              const SurveyResult r = run_survey(catalog, o, &session, [quiet](const StarRecord& s, std::size_t done, std::size_t total) {
                if (quiet) return;
                fmt::print(stderr, "[{}/{}] {}: {}{} ({:.1f} s)\n", done, total, s.name, s.status,
                           s.error.empty() ? "" : " - " + s.error, s.seconds);
              });
              if (!session.is_root()) return 0;
              fmt::print("{}\n{}\nTables:   {}, {}\n", r.message, r.BriefReport(), r.csv_path, r.json_path);
              for (const auto& f : r.figures) fmt::print("Figure:   {}\n", f);
              if (!args->common.json_path.empty()) {
                std::ifstream in(r.json_path);
                std::stringstream ss;
                ss << in.rdbuf();
                write_file_atomic(args->common.json_path, ss.str());
              }
              return r.failed == 0 ? 0 : 1;
            } catch (const InputError&) {
              if (!session.is_root()) return 2;
              throw;
            }
          }};
}

}  // namespace apsides::cli
