// apsides fit FILE... --planets N | --search [--max-planets N]
#include <fmt/format.h>

#include <cmath>
#include <filesystem>
#include <optional>

#include "apsides/error.h"
#include "apsides/fit.h"
#include "apsides/json_outputs.h"
#include "apsides/model_priors.h"
#include "apsides/project.h"
#include "apsides/project_stages.h"
#include "cli/common.h"

namespace apsides::cli {
namespace {
struct FitArgs {
  std::vector<std::string> files;
  int planets = -1;
  bool search = false;
  int max_planets = -1;
  double star_mass = 0.0;
  double star_mass_err = 0.0;
  double star_radius = 0.0;
  double min_bic_improvement = -1.0;
  std::string velocity_unit = "m/s";
  std::string instrument;
  std::string trend;
  std::string residuals_path;
  double fap_threshold = 0.0;
  double time_offset = 0.0;
  CommonOptions common;
};

std::string fmt_or_dash(double x, const char* spec) {
  return std::isfinite(x) ? fmt::format(fmt::runtime(spec), x) : "-";
}

void print_fit(const FitResult& fit, const std::vector<PlanetSummary>& planets, const std::optional<double>& mass) {
  fmt::print("{}\n", fit.message);
  if (!planets.empty()) {
    fmt::print("\n{:<5} {:>14} {:>10} {:>7} {:>8} {:>16} {:>10} {:>11} {:>8}\n", "planet", "P (d)", "K (m/s)", "e",
               "w (deg)", "T_conj (BJD)", "msini MJ", "msini ME", "a (au)");
    for (const auto& p : planets) {
      fmt::print("{:<6} {:>14.6f} {:>10.3f} {:>7.4f} {:>8.2f} {:>16.5f} {:>10} {:>11} {:>8}\n", p.label, p.period_d,
                 p.K_ms, p.ecc, p.omega_deg, p.t_conj_bjd, fmt_or_dash(p.msini_mjup, "{:.4f}"),
                 fmt_or_dash(p.msini_mearth, "{:.2f}"), fmt_or_dash(p.a_au, "{:.4f}"));
    }
    if (mass) fmt::print("m sin i is a MINIMUM mass (sin i unknown); star mass {} Msun.\n", *mass);
    else fmt::print("No star mass given (--star-mass or [star] mass_msun): m sin i and a not computed.\n");
  }
  const ParameterLayout blocks = fit.parameters();
  fmt::print("\n{:<16} {:>14} {:>11} {:>10}\n", "instrument", "offset (m/s)", "jitter", "rms (m/s)");
  for (const InstrumentBlock* b : blocks.instruments()) {
    fmt::print("{:<16} {:>14.3f} {:>11.3f} {:>10.3f}\n", b->label(), b->offset(fit.theta), b->jitter(fit.theta),
               fit.rms_m_s[static_cast<std::size_t>(b->instrument())]);
  }
  if (const TrendBlock* t = blocks.trend()) {
    if (t->order() >= 1) fmt::print("trend c1 = {:.6g} m/s/d\n", t->coefficient(fit.theta, 1));
    if (t->order() >= 2) fmt::print("trend c2 = {:.6g} m/s/d^2\n", t->coefficient(fit.theta, 2));
  }
  for (const auto& b : blocks.blocks()) {
    if (b->kind() != BlockKind::kTransitJitter) continue;
    const double jit = static_cast<const TransitJitterBlock&>(*b).jitter(fit.theta);
    fmt::print("transit-time jitter {}: {:.3g} d ({:.2f} min)\n", b->label(), jit, jit * 1440.0);
  }
  fmt::print("\nln L = {:.4f}   chi2 = {:.3f}   k = {}   n = {}   BIC = {:.3f}   AICc = {:.3f}\n", fit.log_likelihood,
             fit.chi2, fit.n_free, fit.n_points, fit.bic, fit.aicc);
}
}  // namespace

Command register_fit(CLI::App& app) {
  auto args = std::make_shared<FitArgs>();
  CLI::App* cmd = app.add_subcommand(
      "fit",
      "Maximum-a-posteriori Keplerian fit seeded from periodogram peaks.\n"
      "FILE... are velocity files (time, velocity, uncertainty[, instrument]) or one project TOML.\n"
      "--planets N fits N planets; --search adds planets while the residual peak's FAP is below\n"
      "the threshold (default 0.1 %), up to --max-planets.");
  cmd->add_option("files", args->files, "Velocity files, or one project.toml")->required();
  auto* opt_planets = cmd->add_option("-n,--planets", args->planets, "Number of Keplerians to fit")->check(CLI::Range(0, 9));
  auto* opt_search = cmd->add_flag("--search", args->search, "Search planets iteratively (FAP threshold)");
  opt_planets->excludes(opt_search);
  cmd->add_option("--max-planets", args->max_planets, "Largest number of planets in a search [3]")->check(CLI::Range(0, 9));
  cmd->add_option("--fap-threshold", args->fap_threshold, "FAP below which a residual peak is admitted [0.001]")
      ->check(CLI::Range(1e-300, 0.999999));
  cmd->add_option("--min-bic-improvement", args->min_bic_improvement,
                  "BIC drop a new planet must bring to be admitted [10]")
      ->check(CLI::NonNegativeNumber);
  cmd->add_option("--star-mass", args->star_mass, "Stellar mass (solar masses), for m sin i and a")->check(CLI::PositiveNumber);
  cmd->add_option("--star-mass-err", args->star_mass_err, "Its 1-sigma error (solar masses)")->check(CLI::NonNegativeNumber);
  cmd->add_option("--star-radius", args->star_radius,
                  "Stellar radius (solar radii) for the periastron limit [from the mass, R = M^0.8]")
      ->check(CLI::PositiveNumber);
  cmd->add_option("--velocity-unit", args->velocity_unit, "Unit of the velocity files: m/s or km/s")
      ->check(CLI::IsMember({"m/s", "km/s"}));
  cmd->add_option("--instrument", args->instrument, "Instrument label for every file's rows");
  cmd->add_option("--trend", args->trend, "Long-term trend: none, linear, quadratic")
      ->check(CLI::IsMember({"none", "linear", "quadratic"}));
  cmd->add_option("--residuals", args->residuals_path, "Write time, residual, uncertainty, instrument to FILE");
  const CLI::Option* time_offset = add_time_offset_option(cmd, args->time_offset);
  add_common_options(cmd, args->common);
  return {cmd, [args, time_offset]() -> int {
            SearchProblem sp;
            std::optional<double> mass;
            const std::optional<double> offset = time_offset_value(time_offset, args->time_offset);
            if (args->files.size() == 1 && is_project_file(args->files[0])) {
              const Project pr = load_project_with_time_offset(args->files[0], offset);
              if (pr.model.dynamics == Dynamics::kNbody) return run_nbody_fit(pr, args->common);
              const VelocityData data = pr.load_velocities();
              print_warnings(data);
              sp = search_problem(pr, data, pr.transits.empty() ? TransitData{} : pr.load_transits());
              if (pr.star.mass_msun) mass = *pr.star.mass_msun;
              if (args->planets < 0 && !args->search && pr.model.planets) args->planets = *pr.model.planets;
            } else {
              sp.data = load_velocity_arguments(args->files, args->instrument, args->velocity_unit, offset);
            }
            if (args->star_mass > 0.0) {
              mass = args->star_mass;
              sp.star.mass_msun = args->star_mass;  // also the periastron limit of the priors
              sp.star.mass_err_msun = args->star_mass_err;
            }
            if (args->star_radius > 0.0) sp.star.radius_rsun = args->star_radius;
            if (!args->trend.empty()) sp.model.trend = parse_trend(args->trend, "--trend");
            if (args->max_planets >= 0) sp.search.max_planets = args->max_planets;
            if (args->fap_threshold > 0.0) sp.search.fap_threshold = args->fap_threshold;
            if (args->min_bic_improvement >= 0.0) sp.search.min_bic_improvement = args->min_bic_improvement;
            if (args->planets < 0 && !args->search) args->search = true;

            const std::optional<int> n = args->search ? std::nullopt : std::optional<int>(args->planets);
            const FitRun run = run_fit(sp, n);
            const FitResult& fit = run.fit;
            if (run.search) fmt::print("{}\n", run.search->FullReport());
            print_fit(fit, run.planets, mass);
            if (!args->residuals_path.empty()) {
              std::string s = "# time_bjd,residual_ms,uncertainty_ms,instrument\n";
              for (std::size_t i = 0; i < sp.data.size(); ++i) {
                s += fmt::format("{:.6f},{:.6f},{:.6f},{}\n", sp.data.reference_epoch_bjd + sp.data.time_days[i],
                                 fit.residuals_m_s[i], sp.data.uncertainty_m_s[i],
                                 sp.data.instrument_names[static_cast<std::size_t>(sp.data.instrument[i])]);
              }
              write_file_atomic(args->residuals_path, s);
            }
            if (!args->common.json_path.empty()) write_file_atomic(args->common.json_path, fit_json(run, sp));
            return fit.success() ? 0 : 1;
          }};
}

}  // namespace apsides::cli
