#include "apsides/sampling_run.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <memory>

#include "apsides/ephemeris.h"
#include "apsides/error.h"
#include "apsides/model_priors.h"
#include "apsides/posterior.h"
#include "apsides/posterior_model.h"
#include "apsides/results_file.h"

namespace apsides {

namespace {

// Streams steps to the results file at each checkpoint (results_file.h: ChainWriter);
// nothing touches the file between.
class FileObserver : public SamplerObserver {
 public:
  FileObserver(ResultsFile& file, long max_steps, const SamplingRunOptions& o, std::size_t diagnostic_rows)
      : writer_(file, diagnostic_rows), max_steps_(max_steps), options_(o) {}
  void on_step(long step, std::span<const double> p, std::span<const double> lp) override {
    writer_.add_step(step, p, lp);
    if (options_.progress) options_.progress(step, max_steps_, status_);
  }
  void on_checkpoint(const SamplerState& state) override { writer_.checkpoint(state); }
  void on_check(const SamplerResult& r) override {
    status_ = fmt::format("step {}  R-hat {:.3f}  ESS {:.0f}  tau {:.0f}", r.steps, r.rhat_max, r.ess_min, r.tau_max);
  }
  bool should_stop() override { return options_.should_stop && options_.should_stop(); }
  const std::string& status() const { return status_; }

 private:
  ChainWriter writer_;
  long max_steps_;
  const SamplingRunOptions& options_;
  std::string status_ = "first check pending";
};

// Ball half-widths around the MAP, from each block: small against any posterior width,
// so the ensemble starts concentrated and the stretch moves expand it.
std::vector<double> ball_scale(const ParameterLayout& layout, std::span<const double> theta) {
  std::vector<double> s(theta.size(), 1e-3);
  for (const auto& b : layout.blocks())
    for (int k = 0; k < b->size(); ++k) s[b->index(k)] = b->ball_scale(k, theta);
  return s;
}

// Every parameter's block kind and label, so that a reader can rebuild the model.
std::vector<std::string> block_of_each_parameter(const ParameterLayout& layout) {
  std::vector<std::string> out;
  for (const auto& b : layout.blocks())
    for (int k = 0; k < b->size(); ++k) out.push_back(to_string(b->kind()) + ":" + b->label());
  return out;
}

std::string options_text(const SamplerOptions& o) {
  return fmt::format("walkers={} max_steps={} ess_target={} rhat_max={} min_tau_multiple={} seed={} "
                     "stretch_a={} de_probability={} checkpoint_steps={}",
                     o.walkers, o.max_steps, o.ess_target, o.rhat_max, o.min_tau_multiple, o.seed, o.stretch_a,
                     o.de_probability, o.checkpoint_steps);
}

}  // namespace

SamplingRun sample_project(const Project& project, const SamplingRunOptions& args) {
  SamplingRun run;
  const VelocityData data = project.load_velocities();
  if (args.on_warning)
    for (const auto& w : data.warnings) args.on_warning(w);
  const TransitData transits = project.load_transits();
  const SearchProblem sp = search_problem(project, data, transits);

  SamplerOptions opt;
  opt.max_steps = project.sampler.max_steps;
  opt.ess_target = project.sampler.ess_target;
  opt.rhat_max = project.sampler.rhat_max;
  opt.min_tau_multiple = project.sampler.min_tau_multiple;
  opt.seed = project.sampler.seed;
  opt.checkpoint_steps = project.sampler.checkpoint_steps;
  opt.threads = args.threads;
  if (args.max_steps > 0) opt.max_steps = args.max_steps;
  if (args.seed >= 0) opt.seed = static_cast<std::uint64_t>(args.seed);

  std::unique_ptr<ResultsFile> file;
  ModelPriors priors;
  SamplerState start;
  std::vector<std::vector<double>> resume_rows;
  ModelLayout& layout = run.layout;
  if (args.resume) {
    file = std::make_unique<ResultsFile>(args.out_path, ResultsFile::Mode::kReadWrite);
    if (!file->exists("/project/text") || file->read_text("/project/text") != project.text)
      throw InputError(fmt::format("{}: --resume needs the same project file the run started with ({} differs)",
                                   args.out_path, project.path));
    const FitProblem fp = make_fit_problem(sp, static_cast<int>(file->int_attribute("/chains", "n_planets")));
    layout = fp.layout;
    priors = fp.priors;
    opt.walkers = file->chain_walkers();
    opt.seed = std::stoull(file->string_attribute("/chains", "seed"));
    if (args.seed >= 0 && static_cast<std::uint64_t>(args.seed) != opt.seed)
      throw InputError(fmt::format("--seed = {}: a resumed run keeps its seed {}", args.seed, opt.seed));
    start = file->read_checkpoint();
    for (long s : diagnostic_steps(start.step, opt.diagnostic_rows)) resume_rows.push_back(file->read_chain_row(s));
    run.names = file->read_strings("/parameters/names");
    if (run.names.size() != layout.n_params())
      throw InputError(fmt::format("{}: the stored run has {} parameters, the project's model {}", args.out_path,
                                   run.names.size(), layout.n_params()));
    if (start.step >= opt.max_steps)
      throw InputError(fmt::format("--max-steps = {}: the run already has {} steps", opt.max_steps, start.step));
  } else {
    FitProblem fp;
    const std::optional<int> n = args.n_planets ? args.n_planets : project.model.planets;
    if (args.start != nullptr) {
      fp = make_fit_problem(sp, args.start->layout.n_planets);
      run.map = *args.start;
    } else if (n) {
      fp = make_fit_problem(sp, *n);
      run.map = fit_map(fp);
    } else {
      const SearchResult search = search_planets(sp, search_options(project));
      fp = make_fit_problem(sp, search.selected_n_planets);
      run.map = search.best();
      run.note = fmt::format("The planet search selected {} planet(s) ([model] planets sets the number).",
                             search.selected_n_planets);
    }
    if (!run.map.success()) {
      run.failure = "the MAP fit that starts the sampler failed: " + run.map.message;
      return run;
    }
    layout = fp.layout;
    priors = fp.priors;
    run.names = layout.names(data.instrument_names);
    const int dim = static_cast<int>(layout.n_params());
    opt.walkers = project.sampler.walkers > 0 ? project.sampler.walkers : std::max(32, 4 * dim);
    if (args.walkers > 0) opt.walkers = args.walkers;
    if (opt.walkers % 2) ++opt.walkers;
    if (const std::string e = opt.Validate(); !e.empty()) throw InputError(e);
    file = std::make_unique<ResultsFile>(args.out_path, ResultsFile::Mode::kCreate);
    file->write_velocity_data(data);
    file->write_project_text(project.text);
    file->write_parameters(run.names, layout.units(), describe_priors(priors, layout, data.instrument_names));
    const ParameterLayout blocks = ParameterLayout::from(layout, data.instrument_names);
    file->write_strings("/parameters/blocks", block_of_each_parameter(blocks),
                        "block (kind:label) each parameter belongs to (parameter_blocks.h)");
    std::string notes;
    for (const auto& n : blocks.prior_notes(priors)) notes += (notes.empty() ? "" : "; ") + n;
    file->set_attribute("/parameters", "prior_notes", notes.empty() ? std::string("none") : notes);
    file->write_vector("/map/theta", run.map.theta, "see /parameters/units", "MAP fit the walkers start around");
    file->set_attribute("/map", "log_posterior", run.map.log_posterior);
    file->set_attribute("/map", "log_likelihood", run.map.log_likelihood);
    file->create_chains(opt.walkers, layout.n_params(), opt.seed, options_text(opt));
    file->set_attribute("/chains", "n_planets", static_cast<long long>(layout.n_planets));
    file->set_attribute("/chains", "transit_points", static_cast<long long>(transits.size()));
    const PosteriorModel probe = make_posterior(data, layout, priors, transits);
    const LogDensity probe_density = [&](std::span<const double> th) { return probe.log_posterior(th); };
    start.positions =
        initial_ball(probe_density, run.map.theta, ball_scale(probe.layout(), run.map.theta), opt.walkers, opt.seed);
    if (start.positions.empty()) {
      run.failure = "the MAP point has a non-finite posterior; cannot start the walkers";
      return run;
    }
  }
  if (const std::string e = opt.Validate(); !e.empty()) throw InputError(e);

  const PosteriorModel posterior = make_posterior(data, layout, priors, transits);
  const LogDensity log_post = [&](std::span<const double> th) { return posterior.log_posterior(th); };
  FileObserver observer(*file, opt.max_steps, args, opt.diagnostic_rows);
  run.result = run_sampler(log_post, layout.n_params(), opt, start, &observer, args.resume ? &resume_rows : nullptr);
  if (run.result.termination == SamplerTermination::kFailed) return run;
  DerivedOptions dopt;
  dopt.star_mass_msun = project.star.mass_msun;
  dopt.star_mass_err_msun = project.star.mass_err_msun;
  dopt.reference_epoch_bjd = data.reference_epoch_bjd;
  dopt.seed = opt.seed;
  if (run.result.termination != SamplerTermination::kInterrupted) write_posterior(*file, layout, run.names, run.result, dopt);
  return run;
}

}  // namespace apsides
