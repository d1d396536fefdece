// apsides fit FILE... --planets N | --search [--max-planets N]
#include <fmt/format.h>

#include <cmath>
#include <filesystem>
#include <optional>

#include "apsides/error.h"
#include "apsides/fit.h"
#include "apsides/model_priors.h"
#include "apsides/project.h"
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

nlohmann::json fit_json(const FitResult& fit, const std::vector<PlanetSummary>& planets,
                        const std::optional<double>& mass) {
  nlohmann::json j;
  j["planets"] = nlohmann::json::array();
  for (const auto& p : planets) {
    nlohmann::json q;
    q["label"] = p.label;
    q["period_d"] = value_json(p.period_d);
    q["K_ms"] = value_json(p.K_ms);
    q["ecc"] = value_json(p.ecc);
    q["omega_deg"] = value_json(p.omega_deg);
    q["t_conj_bjd"] = value_json(p.t_conj_bjd);
    q["t_peri_bjd"] = value_json(p.t_peri_bjd);
    if (mass) {
      q["msini_mjup"] = value_json(p.msini_mjup);
      q["msini_mearth"] = value_json(p.msini_mearth);
      q["a_au"] = value_json(p.a_au);
    } else {
      q["msini_mjup"] = nullptr;
      q["msini_mearth"] = nullptr;
      q["a_au"] = nullptr;
    }
    j["planets"].push_back(q);
  }
  j["instruments"] = nlohmann::json::array();
  const ParameterLayout blocks = fit.parameters();
  for (const InstrumentBlock* b : blocks.instruments()) {
    nlohmann::json q;
    q["name"] = b->label();
    q["offset_ms"] = value_json(b->offset(fit.theta));
    q["jitter_ms"] = value_json(b->jitter(fit.theta));
    q["rms_ms"] = fit.rms_m_s[static_cast<std::size_t>(b->instrument())];
    j["instruments"].push_back(q);
  }
  if (const TrendBlock* t = blocks.trend()) {
    if (t->order() >= 1) j["trend_c1_ms_per_d"] = value_json(t->coefficient(fit.theta, 1));
    if (t->order() >= 2) j["trend_c2_ms_per_d2"] = value_json(t->coefficient(fit.theta, 2));
  }
  j["n_planets"] = fit.layout.n_planets;
  j["ln_like"] = fit.log_likelihood;
  j["ln_like_transits"] = fit.log_likelihood_transits;
  j["ln_prior"] = fit.log_prior;
  j["ln_posterior"] = fit.log_posterior;
  j["chi2"] = fit.chi2;
  j["k"] = fit.n_free;
  j["n_points"] = fit.n_points;
  j["bic"] = fit.bic;
  j["aicc"] = fit.aicc;
  j["termination"] = to_string(fit.termination);
  j["message"] = fit.message;
  j["theta"] = fit.theta;
  j["parameter_names"] = fit.names;
  j["reference_epoch_bjd"] = fit.reference_epoch_bjd;
  j["note"] = "m sin i is a minimum mass (the inclination is unknown).";
  return j;
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

            FitResult fit;
            nlohmann::json j;
            if (args->search) {
              SearchOptions so;
              so.max_planets = sp.search.max_planets;
              so.fap_threshold = sp.search.fap_threshold;
              so.fit.oversample = sp.search.oversample;
              so.min_bic_improvement = sp.search.min_bic_improvement;
              const SearchResult sr = search_planets(sp, so);
              fmt::print("{}\n", sr.FullReport());
              fit = sr.best();
              j["search"] = nlohmann::json::array();
              for (const auto& st : sr.steps) {
                nlohmann::json q;
                q["n_planets"] = st.n_planets;
                q["ln_like"] = st.log_likelihood;
                q["k"] = st.n_free;
                q["bic"] = st.bic;
                q["aicc"] = st.aicc;
                q["admitting_fap"] = std::isfinite(st.admitting_fap) ? nlohmann::json(st.admitting_fap) : nlohmann::json(nullptr);
                q["admitting_period_d"] = std::isfinite(st.admitting_period_days) ? nlohmann::json(st.admitting_period_days) : nlohmann::json(nullptr);
                j["search"].push_back(q);
              }
              j["search_message"] = sr.message;
              j["selected_n_planets"] = sr.selected_n_planets;
            } else {
              const FitProblem pb = make_fit_problem(sp, args->planets);
              fit = fit_map(pb, FitOptions{});
            }
            const std::vector<PlanetSummary> planets = derive_planets(fit, mass);
            print_fit(fit, planets, mass);
            nlohmann::json fj = fit_json(fit, planets, mass);
            if (j.is_object()) fj.update(j);
            fj["data"] = {{"n_points", sp.data.size()}, {"instruments", sp.data.instrument_names},
                          {"baseline_d", sp.data.baseline_days()}};
            if (mass) fj["star"] = {{"mass_msun", *mass}, {"mass_err_msun", args->star_mass_err}};
            if (!args->residuals_path.empty()) {
              std::string s = "# time_bjd,residual_ms,uncertainty_ms,instrument\n";
              for (std::size_t i = 0; i < sp.data.size(); ++i) {
                s += fmt::format("{:.6f},{:.6f},{:.6f},{}\n", sp.data.reference_epoch_bjd + sp.data.time_days[i],
                                 fit.residuals_m_s[i], sp.data.uncertainty_m_s[i],
                                 sp.data.instrument_names[static_cast<std::size_t>(sp.data.instrument[i])]);
              }
              write_file_atomic(args->residuals_path, s);
            }
            if (!args->common.json_path.empty()) write_json(args->common.json_path, fj);
            return fit.success() ? 0 : 1;
          }};
}

}  // namespace apsides::cli
