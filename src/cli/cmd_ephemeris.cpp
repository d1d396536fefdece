// apsides ephemeris TIMES [--planet b] [--next N | --from BJD --to BJD] ...
#include <fmt/format.h>

#include <cmath>
#include <set>

#include "apsides/data.h"
#include "apsides/ephemeris.h"
#include "apsides/error.h"
#include "cli/common.h"

namespace apsides::cli {

namespace {
struct EphemerisArgs {
  std::string times;
  std::string planet;
  bool planet_given = false;
  int next = 10;
  double from_bjd = std::numeric_limits<double>::quiet_NaN();
  double to_bjd = std::numeric_limits<double>::quiet_NaN();
  bool scale_errors = false;
  double outlier_sigma = 5.0;
  bool drop_outliers = false;
  double companion_period = 0.0;
  long long epoch = 0;
  std::string model = "auto";
  bool no_ttv = false;
  bool minutes = false;
  bool days = false;
  double time_offset = 0.0;
  CommonOptions common;
};

nlohmann::json estimate_json(const Estimate& e) { return {{"value", e.value}, {"err", e.err}}; }
nlohmann::json number_or_null(double x) { return std::isfinite(x) ? nlohmann::json(x) : nlohmann::json(nullptr); }

nlohmann::json to_json(const EphemerisResult& r, const std::string& path, const std::string& planet,
                       const std::vector<std::string>& ignored) {
  using nlohmann::json;
  const double ref = r.reference_epoch_bjd;
  auto bjd = [&](double reduced) { return static_cast<double>(static_cast<long double>(ref) + reduced); };
  json j;
  j["file"] = path;
  j["planet"] = planet;
  j["n_transits"] = r.n_transits;
  j["reference_bjd"] = ref;
  j["t0_bjd"] = {{"value", bjd(r.t0_days.value)},
                 {"err", r.t0_days.err},
                 {"epoch", r.user_epoch},
                 {"text", format_bjd(ref, r.t0_days.value, 8)}};
  j["t_ref_bjd"] = {{"value", bjd(r.t_ref_days.value)},
                    {"err", r.t_ref_days.err},
                    {"epoch", r.n_ref},
                    {"text", format_bjd(ref, r.t_ref_days.value, 8)},
                    {"correlation_with_period", r.t_ref_period_correlation}};
  j["period_d"] = estimate_json(r.period_days);
  j["cov_t0_period_d2"] = r.t0_period_covariance;
  j["chi2"] = r.linear.chi2;
  j["dof"] = r.linear.dof;
  j["reduced_chi2"] = r.reduced_chi2;
  j["errors_scaled"] = r.errors_scaled;
  j["error_scale_factor"] = std::sqrt(r.linear.scale_factor);
  j["n_outliers"] = r.n_outliers;
  json oc = json::array();
  for (const auto& o : r.o_minus_c) {
    oc.push_back({{"epoch", o.epoch},
                  {"t_mid_bjd", bjd(o.t_days)},
                  {"o_minus_c_d", o.o_minus_c_days},
                  {"o_minus_c_min", o.o_minus_c_days * 1440.0},
                  {"err_d", o.sigma_days},
                  {"err_min", o.sigma_days * 1440.0},
                  {"normalized", o.normalized},
                  {"outlier", o.outlier},
                  {"used", o.used},
                  {"origin", o.origin}});
  }
  j["o_minus_c"] = oc;
  if (!r.quadratic.coefficients.empty()) {
    j["quadratic"] = {{"dp_dn", estimate_json(r.dp_dn_days)},
                      {"dp_dt", estimate_json(r.dp_dt)},
                      {"dp_dt_ms_per_yr", estimate_json(r.dp_dt_ms_per_year)},
                      {"period_d", r.quadratic.coefficients[1]},
                      {"t_ref_bjd", bjd(r.quadratic.coefficients[0])},
                      {"chi2", r.quadratic.chi2},
                      {"dof", r.quadratic.dof},
                      {"delta_chi2", r.delta_chi2},
                      {"delta_bic", r.delta_bic},
                      {"delta_bic_vs_sinusoid", number_or_null(r.delta_bic_vs_sinusoid)},
                      {"delta_bic_vs_best_other", number_or_null(r.delta_bic_vs_best_other)},
                      {"period_change_favoured", r.period_change_favoured}};
  } else {
    j["quadratic"] = nullptr;
  }
  const auto& t = r.ttv;
  json tj = {{"searched", t.searched}, {"fitted", t.fitted}, {"message", t.message}};
  if (t.searched) {
    tj["fap"] = t.fap;
    tj["power"] = t.best_power;
  }
  if (t.fitted) {
    tj["period_d"] = t.period_days.value;
    tj["period_err_d"] = t.period_days.err;
    tj["period_epochs"] = estimate_json(t.period_epochs);
    tj["amplitude_d"] = t.amplitude_days.value;
    tj["amplitude_err_d"] = t.amplitude_days.err;
    tj["amplitude_min"] = t.amplitude_days.value * 1440.0;
    tj["phase_rad"] = estimate_json(t.phase_rad);
    tj["delta_bic"] = t.delta_bic;
  }
  json res = json::array();
  for (const auto& rs : t.resonances)
    res.push_back({{"j", rs.j}, {"delta", rs.delta}, {"super_period_d", rs.super_period_days},
                   {"super_period_epochs", rs.super_period_epochs}});
  tj["resonances"] = res;
  j["ttv"] = tj;
  j["prediction_model"] = to_string(r.prediction_model);
  const auto& b = r.prediction;
  j["prediction"] = {{"model", to_string(b.model)},
                     {"chosen_automatically", b.chosen_automatically},
                     {"rule", b.rule},
                     {"reason", b.reason},
                     {"excess_scatter_d", b.excess_scatter_days},
                     {"excess_scatter_min", b.excess_scatter_days * 1440.0},
                     {"refit_chi2", number_or_null(b.refit_chi2)},
                     {"refit_dof", b.refit_dof},
                     {"err_d_is", "predictive 1-sigma: the model's parameter covariance propagated to the epoch, "
                                  "plus the excess scatter in quadrature"}};
  json scores = json::array();
  for (const auto& m : r.model_scores)
    scores.push_back({{"model", to_string(m.model)},
                      {"n_parameters", m.n_parameters},
                      {"candidate", m.candidate},
                      {"why_not", m.why_not},
                      {"chi2", number_or_null(m.chi2)},
                      {"bic", number_or_null(m.bic)},
                      {"delta_bic_vs_linear", number_or_null(m.delta_bic_vs_linear)}});
  j["model_scores"] = scores;
  json pr = json::array();
  for (const auto& p : r.predictions)
    pr.push_back({{"epoch", p.epoch},
                  {"t_mid_bjd", p.t_mid_bjd},
                  {"t_mid_text", format_bjd(ref, p.t_days, 7)},
                  {"err_d", p.err_days},
                  {"utc", p.utc}});
  j["predictions"] = pr;
  j["time_scales"] =
      "UTC = BJD_TDB - 32.184 s (TT-TAI) - TAI-UTC (IERS leap seconds; 37 s since 2017-01-01); TDB-TT (< 2 ms) "
      "neglected; UTC is the barycentric instant (site light-time not applied).";
  j["ignored_columns"] = ignored;
  j["notes"] = r.notes;
  return j;
}
}  // namespace

Command register_ephemeris(CLI::App& app) {
  auto args = std::make_shared<EphemerisArgs>();
  CLI::App* cmd = app.add_subcommand(
      "ephemeris",
      "Transit ephemeris (linear and quadratic), O-C with outliers, timing-variation search and\n"
      "predicted transit times from a file of mid-transit times (epoch, BJD_TDB, error in days).");
  cmd->add_option("times", args->times, "Transit-time file: epoch, mid-transit BJD_TDB, uncertainty (d)[, planet]")
      ->required();
  cmd->add_option("--planet", args->planet, "Planet label to use when the file holds several");
  auto* next = cmd->add_option("--next", args->next, "Predict the next N transits (after --from, or after the "
                                                     "last observed one) [10]")
                   ->check(CLI::NonNegativeNumber);
  auto* from = cmd->add_option("--from", args->from_bjd, "Predict from this BJD_TDB");
  auto* to = cmd->add_option("--to", args->to_bjd, "Predict every transit up to this BJD_TDB (needs --from)");
  to->needs(from);
  to->excludes(next);
  cmd->add_option("--epoch", args->epoch, "Also report T0 at this epoch (the file's numbering) [0]");
  cmd->add_flag("--scale-errors", args->scale_errors,
                "Scale uncertainties by sqrt(chi2/dof) when chi2/dof > 1 (stated in the output)");
  cmd->add_option("--outlier-sigma", args->outlier_sigma, "Flag transits with |O-C| above this many sigma [5]")
      ->check(CLI::PositiveNumber);
  cmd->add_flag("--drop-outliers", args->drop_outliers, "Refit without the flagged transits (listed anyway)");
  cmd->add_option("--companion-period", args->companion_period,
                  "Period (d) of another planet: print the expected near-resonant TTV super-period")
      ->check(CLI::PositiveNumber);
  cmd->add_option("--model", args->model,
                  "Ephemeris for the predictions: auto (the best supported by BIC), linear, quadratic or "
                  "sinusoid [auto]")
      ->check(CLI::IsMember({"auto", "linear", "quadratic", "sinusoid", "ttv"}));
  cmd->add_flag("--no-ttv", args->no_ttv, "Skip the timing-variation search");
  auto* minutes = cmd->add_flag("--minutes", args->minutes, "O-C and errors in minutes (default)");
  cmd->add_flag("--days", args->days, "O-C and errors in days")->excludes(minutes);
  const CLI::Option* time_offset = add_time_offset_option(cmd, args->time_offset);
  add_common_options(cmd, args->common);

  return {cmd, [args, time_offset]() -> int {
            TransitFileOptions file_options;
            file_options.time_offset_days = time_offset_value(time_offset, args->time_offset);
            TransitData all = read_transit_file(args->times, file_options);
            std::set<std::string> labels(all.planet.begin(), all.planet.end());
            std::string planet = args->planet;
            TransitData data;
            if (!planet.empty()) {
              if (!labels.count(planet)) {
                std::string known;
                for (const auto& l : labels) known += (known.empty() ? "" : ", ") + (l.empty() ? "(none)" : l);
                throw InputError(fmt::format("--planet {}: {} has no transits of that planet (labels: {})", planet,
                                             args->times, known));
              }
              data = all.for_planet(planet);
            } else if (labels.size() > 1) {
              std::string known;
              for (const auto& l : labels) known += (known.empty() ? "" : ", ") + l;
              throw InputError(fmt::format("{}: holds transits of several planets ({}); choose one with --planet",
                                           args->times, known));
            } else {
              data = all;
              planet = labels.empty() ? "" : *labels.begin();
            }
            EphemerisOptions opt;
            opt.user_epoch = args->epoch;
            opt.scale_errors = args->scale_errors;
            opt.outlier_sigma = args->outlier_sigma;
            opt.drop_outliers = args->drop_outliers;
            opt.search_ttv = !args->no_ttv;
            opt.companion_period_days = args->companion_period;
            opt.n_next = args->next;
            opt.from_bjd = args->from_bjd;
            opt.to_bjd = args->to_bjd;
            opt.prediction_model = parse_ephemeris_model(args->model, "--model");
            if (const std::string e = opt.Validate(); !e.empty()) throw InputError(e);
            const EphemerisResult r = fit_ephemeris(data, opt);
            if (r.termination != "converged") {
              fmt::print(stderr, "apsides: {}\n", r.message);
              return 1;
            }
            fmt::print("Transit times: {} ({} transits{})\n", args->times, data.size(),
                       planet.empty() ? "" : fmt::format(", planet {}", planet));
            if (!all.ignored_columns.empty()) {
              std::string cols;
              for (const auto& c : all.ignored_columns) cols += (cols.empty() ? "" : ", ") + c;
              fmt::print("Note: extra column(s) not used: {} (O-C is recomputed from the fitted ephemeris).\n", cols);
            }
            fmt::print("{}", r.FullReport(!args->days));
            if (!args->common.json_path.empty())
              write_json(args->common.json_path, to_json(r, args->times, planet, all.ignored_columns));
            return 0;
          }};
}

}  // namespace apsides::cli
