// apsides sample PROJECT.toml --out run.h5 [--resume] [--max-steps N] [--walkers N] [--seed N]
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <csignal>

#include "apsides/error.h"
#include "apsides/fit.h"
#include "apsides/model_priors.h"
#include "apsides/posterior.h"
#include "apsides/project.h"
#include "apsides/results_file.h"
#include "apsides/sampler.h"
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

// Streams steps to the results file at each checkpoint; nothing touches the file between.
class FileObserver : public SamplerObserver {
 public:
  FileObserver(ResultsFile& file, long max_steps, bool quiet)
      : file_(file), bar_("sampling", static_cast<double>(max_steps), quiet) {}
  void on_step(long step, std::span<const double> p, std::span<const double> lp) override {
    positions_.emplace_back(p.begin(), p.end());
    log_prob_.emplace_back(lp.begin(), lp.end());
    bar_.update(static_cast<double>(step), status_);
  }
  void on_checkpoint(const SamplerState& state) override {
    file_.append_chain_rows(positions_, log_prob_);
    positions_.clear();
    log_prob_.clear();
    file_.write_checkpoint(state);
  }
  void on_check(const SamplerResult& r) override {
    status_ = fmt::format("step {}  R-hat {:.3f}  ESS {:.0f}  tau {:.0f}", r.steps, r.rhat_max, r.ess_min, r.tau_max);
  }
  bool should_stop() override { return g_interrupted != 0; }
  void finish() { bar_.finish(status_); }

 private:
  ResultsFile& file_;
  ProgressBar bar_;
  std::string status_ = "first check pending";
  std::vector<std::vector<double>> positions_, log_prob_;
};

// Ball half-widths around the MAP: small against any posterior width, so the ensemble
// starts concentrated and the stretch moves expand it.
std::vector<double> ball_scale(const ModelLayout& layout, std::span<const double> theta) {
  std::vector<double> s(theta.size(), 1e-3);
  for (int p = 0; p < layout.n_planets; ++p) {
    const std::size_t i = layout.planet_index(p);
    s[i] = 1e-6 * std::abs(theta[i]) + 1e-9;         // period
    s[i + 1] = 1e-3 * std::abs(theta[i + 1]) + 1e-3;  // K
    s[i + 2] = s[i + 3] = 1e-3;                       // sqrt(e) cos w, sqrt(e) sin w
    s[i + 4] = 1e-5 * std::abs(theta[i]) + 1e-6;      // t_conj: a tiny fraction of P
  }
  for (std::size_t i = layout.planet_index(layout.n_planets); i < theta.size(); ++i)
    s[i] = 1e-3 * std::abs(theta[i]) + 1e-3;
  return s;
}

std::string options_text(const SamplerOptions& o) {
  return fmt::format("walkers={} max_steps={} ess_target={} rhat_max={} min_tau_multiple={} seed={} "
                     "stretch_a={} de_probability={} checkpoint_steps={}",
                     o.walkers, o.max_steps, o.ess_target, o.rhat_max, o.min_tau_multiple, o.seed, o.stretch_a,
                     o.de_probability, o.checkpoint_steps);
}

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
            const VelocityData data = project.load_velocities();
            SearchProblem sp;
            sp.data = data;
            sp.search = project.search;
            sp.model = project.model;
            sp.priors = project.priors;

            SamplerOptions opt;
            opt.max_steps = project.sampler.max_steps;
            opt.ess_target = project.sampler.ess_target;
            opt.rhat_max = project.sampler.rhat_max;
            opt.min_tau_multiple = project.sampler.min_tau_multiple;
            opt.seed = project.sampler.seed;
            opt.checkpoint_steps = project.sampler.checkpoint_steps;
            opt.threads = args->threads;
            if (args->max_steps > 0) opt.max_steps = args->max_steps;
            if (args->seed >= 0) opt.seed = static_cast<std::uint64_t>(args->seed);

            std::unique_ptr<ResultsFile> file;
            ModelLayout layout;
            ModelPriors priors;
            SamplerState start;
            std::vector<std::vector<double>> resume_rows;
            std::vector<std::string> names;
            if (args->resume) {
              file = std::make_unique<ResultsFile>(args->out, ResultsFile::Mode::kReadWrite);
              if (!file->exists("/project/text") || file->read_text("/project/text") != project.text)
                throw InputError(fmt::format("{}: --resume needs the same project file the run started with ({} differs)",
                                             args->out, args->project));
              const FitProblem fp = make_fit_problem(sp, static_cast<int>(file->int_attribute("/chains", "n_planets")));
              layout = fp.layout;
              priors = fp.priors;
              opt.walkers = file->chain_walkers();
              opt.seed = std::stoull(file->string_attribute("/chains", "seed"));
              if (args->seed >= 0 && static_cast<std::uint64_t>(args->seed) != opt.seed)
                throw InputError(fmt::format("--seed = {}: a resumed run keeps its seed {}", args->seed, opt.seed));
              start = file->read_checkpoint();
              for (long s : diagnostic_steps(start.step, opt.diagnostic_rows)) resume_rows.push_back(file->read_chain_row(s));
              names = file->read_strings("/parameters/names");
              if (names.size() != layout.n_params())
                throw InputError(fmt::format("{}: the stored run has {} parameters, the project's model {}", args->out,
                                             names.size(), layout.n_params()));
              if (start.step >= opt.max_steps)
                throw InputError(fmt::format("--max-steps = {}: the run already has {} steps", opt.max_steps, start.step));
            } else {
              FitResult fit;
              FitProblem fp;
              if (project.model.planets) {
                fp = make_fit_problem(sp, *project.model.planets);
                fit = fit_map(fp);
              } else {
                SearchOptions so;
                so.max_planets = project.search.max_planets;
                so.fap_threshold = project.search.fap_threshold;
                const SearchResult search = search_planets(sp, so);
                fp = make_fit_problem(sp, search.selected_n_planets);
                fit = search.best();
                fmt::print("Planet search selected {} planet(s) ([model] planets sets the number).\n",
                           search.selected_n_planets);
              }
              if (!fit.success()) {
                fmt::print(stderr, "apsides: the MAP fit that starts the sampler failed: {}\n", fit.message);
                return 1;
              }
              layout = fp.layout;
              priors = fp.priors;
              names = layout.names(data.instrument_names);
              const int dim = static_cast<int>(layout.n_params());
              opt.walkers = project.sampler.walkers > 0 ? project.sampler.walkers : std::max(32, 4 * dim);
              if (args->walkers > 0) opt.walkers = args->walkers;
              if (opt.walkers % 2) ++opt.walkers;
              if (const std::string e = opt.Validate(); !e.empty()) throw InputError(e);
              file = std::make_unique<ResultsFile>(args->out, ResultsFile::Mode::kCreate);
              file->write_velocity_data(data);
              file->write_project_text(project.text);
              file->write_parameters(names, layout.units(), describe_priors(priors, layout, data.instrument_names));
              file->write_vector("/map/theta", fit.theta, "see /parameters/units", "MAP fit the walkers start around");
              file->set_attribute("/map", "log_posterior", fit.log_posterior);
              file->set_attribute("/map", "log_likelihood", fit.log_likelihood);
              file->create_chains(opt.walkers, layout.n_params(), opt.seed, options_text(opt));
              file->set_attribute("/chains", "n_planets", static_cast<long long>(layout.n_planets));
              const KeplerianModel probe(data, layout);
              const LogDensity probe_density = [&](std::span<const double> th) {
                const double lp = priors.log_density(th, layout.n_planets);
                return std::isfinite(lp) ? lp + probe.log_likelihood(th) : lp;
              };
              start.positions = initial_ball(probe_density, fit.theta, ball_scale(layout, fit.theta), opt.walkers, opt.seed);
              if (start.positions.empty()) {
                fmt::print(stderr, "apsides: the MAP point has a non-finite posterior; cannot start the walkers\n");
                return 1;
              }
            }
            if (const std::string e = opt.Validate(); !e.empty()) throw InputError(e);

            const KeplerianModel model(data, layout);
            const LogDensity log_post = [&](std::span<const double> th) {
              const double lp = priors.log_density(th, layout.n_planets);
              return std::isfinite(lp) ? lp + model.log_likelihood(th) : lp;
            };
            g_interrupted = 0;
            auto previous = std::signal(SIGINT, on_sigint);
            FileObserver observer(*file, opt.max_steps, args->common.quiet);
            const SamplerResult result =
                run_sampler(log_post, layout.n_params(), opt, start, &observer, args->resume ? &resume_rows : nullptr);
            observer.finish();
            std::signal(SIGINT, previous);
            if (result.termination == SamplerTermination::kFailed) {
              fmt::print(stderr, "apsides: sampling failed: {}\n", result.message);
              return 1;
            }
            DerivedOptions dopt;
            dopt.star_mass_msun = project.star.mass_msun;
            dopt.star_mass_err_msun = project.star.mass_err_msun;
            dopt.reference_epoch_bjd = data.reference_epoch_bjd;
            dopt.seed = opt.seed;
            if (result.termination != SamplerTermination::kInterrupted)
              write_posterior(*file, layout, names, result, dopt);
            fmt::print("{}", result.FullReport(names));
            fmt::print("{:.0f} posterior evaluations/s this session ({} threads).\n",
                       result.seconds > 0 ? static_cast<double>(result.evaluations) / result.seconds : 0.0, opt.threads);
            fmt::print("Wrote {}{}\n", args->out,
                       result.termination == SamplerTermination::kInterrupted ? " (interrupted; continue with --resume)" : "");
            if (!args->common.json_path.empty()) {
              nlohmann::json j;
              j["sampler"] = {{"walkers", result.walkers}, {"steps", result.steps},
                              {"burn_in_steps", result.burn_in_steps}, {"rhat_max", result.rhat_max},
                              {"ess_min", result.ess_min}, {"tau_max", result.tau_max},
                              {"termination", to_string(result.termination)}, {"message", result.message}};
              write_json(args->common.json_path, j);
            }
            return result.termination == SamplerTermination::kInterrupted ? 1 : 0;
          }};
}

}  // namespace apsides::cli
