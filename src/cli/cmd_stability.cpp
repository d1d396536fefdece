// apsides stability RUN.h5|PROJECT, and `apsides fit PROJECT` with [model] dynamics = "nbody".
#include <fmt/format.h>

#include <chrono>
#include <cmath>
#include <filesystem>

#include "apsides/error.h"
#include "apsides/fit.h"
#include "apsides/nbody_model.h"
#include "apsides/orbit.h"
#include "apsides/project.h"
#include "apsides/stability_analysis.h"
#include "cli/common.h"

namespace apsides::cli {
namespace {

nlohmann::json nbody_fit_json(const NbodyFitResult& r, const NbodyProblem& pb) {
  nlohmann::json j;
  j["dynamics"] = "nbody";
  j["planets"] = nlohmann::json::array();
  const NbodyPosterior post = make_nbody_posterior(pb);  // for the blocks' names
  for (std::size_t p = 0; p < r.planet_labels.size(); ++p) {
    const NbodyPlanet q = post.signal->planets()[p]->planet(r.theta);
    nlohmann::json o;
    o["label"] = r.planet_labels[p];
    o["mass_mearth"] = value_json(r.mass_mearth[p]);
    o["mass_ratio"] = value_json(q.mass_ratio);
    o["period_d"] = value_json(q.period_days);
    o["ecc"] = value_json(q.ecc());
    o["omega_deg"] = value_json(q.omega_rad() * 180.0 / 3.14159265358979323846);
    o["t_conj_bjd"] = value_json(q.t_conj_days + r.reference_epoch_bjd);
    o["inclination_deg"] = value_json(q.inclination_rad * 180.0 / 3.14159265358979323846);
    o["node_deg"] = value_json(q.node_rad * 180.0 / 3.14159265358979323846);
    o["transiting"] = static_cast<bool>(r.transiting[p]);
    j["planets"].push_back(o);
  }
  j["osculating_epoch_bjd"] = r.osculating_epoch_bjd;
  j["star_mass_msun"] = r.star_mass_msun;
  j["ln_like"] = r.log_likelihood;
  j["ln_posterior"] = r.log_posterior;
  j["theta"] = r.theta;
  j["parameter_names"] = r.names;
  j["reference_epoch_bjd"] = r.reference_epoch_bjd;
  j["perturber_periods_tried_d"] = r.seed_periods_tried;
  j["evaluations"] = r.evaluations;
  j["converged"] = r.converged;
  j["message"] = r.message;
  j["note"] = "Masses are true masses for the stated inclinations (coplanar edge-on by default); elements are "
              "osculating Jacobi elements at the osculating epoch.";
  return j;
}

nlohmann::json stability_json(const StabilityRunResult& r, const StabilityRunOptions& o) {
  auto frac = [](double f) { return std::isfinite(f) ? nlohmann::json(f) : nlohmann::json(nullptr); };
  const StabilitySummary& s = r.summary;
  nlohmann::json j;
  j["source"] = r.source;
  j["configuration"] = r.configuration;
  j["planets"] = r.planet_labels;
  j["star_mass_msun"] = r.star_mass_msun;
  j["draws"] = s.draws;
  j["invalid_draws"] = s.invalid_draws;
  j["fractions"] = {{"hill_two_sqrt3", frac(s.fraction_hill_two_sqrt3)}, {"hill_gladman", frac(s.fraction_hill_gladman)},
                    {"amd", frac(s.fraction_amd)},         {"amd_mmr", frac(s.fraction_amd_mmr)},
                    {"survived", frac(s.fraction_survived)}, {"megno_regular", frac(s.fraction_megno_regular)}};
  j["megno_inner_orbits"] = o.stability.nbody ? nlohmann::json(o.stability.megno.inner_orbits) : nlohmann::json(nullptr);
  j["per_draw"] = nlohmann::json::array();
  for (const DrawStability& d : s.per_draw) {
    j["per_draw"].push_back({{"valid", d.valid},
                             {"min_hill_separation", frac(d.min_separation_hill)},
                             {"max_amd_beta", frac(d.max_amd_beta)},
                             {"mean_megno", frac(d.mean_megno)},
                             {"survived", d.survived}});
  }
  j["caution"] = "A stable-looking result is not proof of stability (necessary conditions and a finite-time test).";
  return j;
}

struct StabilityArgs {
  std::string input;
  std::size_t draws = 200;
  double orbits = 5000.0;
  bool no_nbody = false;
  int threads = 0;
  std::string figure;
  CommonOptions common;
};

}  // namespace

void require_keplerian(const Project& pr, const std::string& command) {
  if (pr.model.dynamics != Dynamics::kNbody) return;
  throw InputError(fmt::format("{}: model.dynamics = \"nbody\": `apsides {}` has only the Keplerian model yet; use "
                               "`apsides fit` (N-body MAP) and `apsides stability`",
                               pr.path, command));
}

int run_nbody_fit(const Project& pr, const CommonOptions& common) {
  const NbodyProblem pb = nbody_problem(pr);
  const auto t0 = std::chrono::steady_clock::now();
  const NbodyFitResult r = fit_nbody_map(pb);
  const double secs = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  fmt::print("{}", r.FullReport());
  fmt::print("Run time: {:.1f} s\n", secs);
  nlohmann::json j = nbody_fit_json(r, pb);
  j["run_time_s"] = secs;
  if (!common.json_path.empty()) write_json(common.json_path, j);
  return std::isfinite(r.log_posterior) ? 0 : 1;
}

Command register_stability(CLI::App& app) {
  auto args = std::make_shared<StabilityArgs>();
  CLI::App* cmd = app.add_subcommand(
      "stability",
      "Orbital stability of a fitted multi-planet system: mutual Hill separations, AMD stability and an N-body\n"
      "run with MEGNO, as fractions of posterior draws (RUN.h5 of sample/analyze), or of the MAP fit (PROJECT).\n"
      "A stable-looking result is not proof of stability.");
  cmd->add_option("input", args->input, "Results file (RUN.h5) or project (.toml)")->required();
  cmd->add_option("--draws", args->draws, "Posterior draws assessed [200]")->check(CLI::Range(1, 100000));
  cmd->add_option("--orbits", args->orbits, "N-body run length in inner orbits [5000]")->check(CLI::Range(1.0, 1e8));
  cmd->add_flag("--no-nbody", args->no_nbody, "Only the Hill and AMD criteria (no N-body run)");
  cmd->add_option("--threads", args->threads, "Threads (0: all cores) [0]")->check(CLI::Range(0, 256));
  cmd->add_option("--figure", args->figure, "Write the figure (PNG) to FILE");
  add_common_options(cmd, args->common);
  return {cmd, [args]() -> int {
            StabilityRunOptions o;
            o.max_draws = args->draws;
            o.stability.nbody = !args->no_nbody;
            o.stability.megno.inner_orbits = args->orbits;
            o.stability.threads = args->threads;
            StabilityRunResult r;
            if (is_project_file(args->input)) {
              const Project pr = load_project(args->input);
              if (pr.model.dynamics == Dynamics::kNbody) {
                const NbodyProblem pb = nbody_problem(pr);
                const NbodyFitResult fit = fit_nbody_map(pb);
                if (!std::isfinite(fit.log_posterior)) throw InputError(fmt::format("{}: the N-body fit failed: {}", args->input, fit.message));
                const NbodyPosterior post = make_nbody_posterior(pb);
                r = stability_of_systems(args->input, "the N-body MAP fit (one system; sample the posterior for fractions)",
                                         {post.signal->system(fit.theta)}, fit.planet_labels, o);
              } else {
                throw InputError(fmt::format("{}: for a Keplerian project give the run's results file (RUN.h5 of "
                                             "`apsides sample` or `analyze`): stability needs posterior draws",
                                             args->input));
              }
            } else {
              r = stability_of_run(args->input, o);
            }
            fmt::print("{}", r.FullReport());
            if (!args->figure.empty()) fmt::print("Figure: {}\n", write_stability_figure(r, args->figure));
            if (!args->common.json_path.empty()) write_json(args->common.json_path, stability_json(r, o));
            return 0;
          }};
}

}  // namespace apsides::cli
