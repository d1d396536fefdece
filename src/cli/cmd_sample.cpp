// apsides sample PROJECT.toml --out run.h5 [--resume] [--max-steps N] [--walkers N] [--seed N]
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <csignal>

#include "apsides/error.h"
#include "apsides/json_outputs.h"
#include "apsides/project.h"
#include "apsides/sampling_run.h"
#include "cli/common.h"

namespace apsides::cli {
namespace {

volatile std::sig_atomic_t g_interrupted = 0;
extern "C" void on_sigint(int) { g_interrupted = 1; }

struct SampleArgs {
  std::string project;
  std::string out;
  bool resume = false;
  long max_steps = -1;
  int walkers = -1;
  long long seed = -1;
  int threads = 2;
  CommonOptions common;
};

}  // namespace

Command register_sample(CLI::App& app) {
  auto args = std::make_shared<SampleArgs>();
  CLI::App* cmd = app.add_subcommand(
      "sample",
      "Sample the posterior with an ensemble MCMC (stretch + differential-evolution moves) into an HDF5 file.\n"
      "Stops when R-hat < rhat_max, ESS >= ess_target for every parameter and the kept chain is longer\n"
      "than min_tau_multiple x tau ([sampler] in the project), or at --max-steps with a warning.\n"
      "Burn-in: the first half of the steps is discarded. Ctrl-C saves a checkpoint; --resume continues.");
  cmd->add_option("project", args->project, "Project TOML file")->required();
  cmd->add_option("-o,--out", args->out, "Results file (HDF5)")->required();
  cmd->add_flag("--resume", args->resume, "Continue the run saved in --out (bitwise as if never stopped)");
  cmd->add_option("--max-steps", args->max_steps, "Limit on steps (overrides [sampler] max_steps)")->check(CLI::Range(1L, 1000000000L));
  cmd->add_option("--walkers", args->walkers, "Number of walkers (even; overrides [sampler] walkers)")->check(CLI::Range(4, 100000));
  cmd->add_option("--seed", args->seed, "Random seed (overrides [sampler] seed)")->check(CLI::NonNegativeNumber);
  cmd->add_option("--threads", args->threads, "Threads (results do not depend on it)")->check(CLI::Range(1, 64));
  add_common_options(cmd, args->common);
  return {cmd, [args]() -> int {
            const Project project = load_project(args->project);
            require_keplerian(project, "sample");
            SamplingRunOptions o;
            o.out_path = args->out;
            o.resume = args->resume;
            o.max_steps = args->max_steps;
            o.walkers = args->walkers;
            o.seed = args->seed;
            o.threads = args->threads;
            auto bar = std::make_shared<std::unique_ptr<ProgressBar>>();
            o.progress = [bar, quiet = args->common.quiet](long step, long max_steps, const std::string& status) {
              if (!*bar) *bar = std::make_unique<ProgressBar>("sampling", static_cast<double>(max_steps), quiet);
              (*bar)->update(static_cast<double>(step), status);
            };
            o.should_stop = [] { return g_interrupted != 0; };
            o.on_warning = [](const std::string& w) { fmt::print(stderr, "apsides: warning: {}\n", w); };
            g_interrupted = 0;
            auto previous = std::signal(SIGINT, on_sigint);
            const SamplingRun run = sample_project(project, o);
            std::signal(SIGINT, previous);
            if (*bar) (*bar)->finish();
            if (!run.note.empty()) fmt::print("{}\n", run.note);
            if (!run.failure.empty()) {
              fmt::print(stderr, "apsides: {}\n", run.failure);
              return 1;
            }
            const SamplerResult& result = run.result;
            if (result.termination == SamplerTermination::kFailed) {
              fmt::print(stderr, "apsides: sampling failed: {}\n", result.message);
              return 1;
            }
            fmt::print("{}", result.FullReport(run.names));
            fmt::print("{:.0f} posterior evaluations/s this session ({} threads).\n",
                       result.seconds > 0 ? static_cast<double>(result.evaluations) / result.seconds : 0.0, args->threads);
            fmt::print("Wrote {}{}\n", args->out,
                       result.termination == SamplerTermination::kInterrupted ? " (interrupted; continue with --resume)" : "");
            if (!args->common.json_path.empty()) write_file_atomic(args->common.json_path, sampling_json(result));
            return result.termination == SamplerTermination::kInterrupted ? 1 : 0;
          }};
}

}  // namespace apsides::cli
