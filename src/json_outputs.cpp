// The --json documents of scan, fit, compare and sample (json_outputs.h), moved here from
// src/cli/cmd_*.cpp unchanged so the Python module returns the same documents.
#include "apsides/json_outputs.h"

#include <cmath>
#include <nlohmann/json.hpp>

#include "apsides/ephemeris.h"
#include "apsides/parameter_blocks.h"

namespace apsides {
using nlohmann::json;

namespace {
json finite_or_null(double x) { return std::isfinite(x) ? json(x) : json(nullptr); }
json value_json(double x) { return json{{"value", finite_or_null(x)}}; }
std::string text(const json& j) { return j.dump(2) + "\n"; }
json data_json(const VelocityData& data) {
  return {{"n_points", data.size()}, {"instruments", data.instrument_names}, {"baseline_d", data.baseline_days()}};
}

json peak_json(const Peak& p, const std::vector<Peak>& peaks, bool window) {
  json j = {{"period_d", p.period_days}, {"frequency_per_d", p.frequency_per_day}, {"power", p.power}};
  if (window) return j;
  j["fap"] = p.fap;
  j["power_standard"] = p.power_standard;
  if (p.fap_bootstrap >= 0) j["fap_bootstrap"] = p.fap_bootstrap;
  j["possible_alias"] = p.alias_of >= 0;
  if (p.alias_of >= 0) {
    j["alias_of_period_d"] = peaks[static_cast<std::size_t>(p.alias_of)].period_days;
    j["alias_window_frequency_per_d"] = p.alias_window_frequency;
  }
  return j;
}

json fit_result_json(const FitResult& fit, const std::vector<PlanetSummary>& planets, bool has_mass) {
  json j;
  j["planets"] = json::array();
  for (const auto& p : planets) {
    json q;
    q["label"] = p.label;
    q["period_d"] = value_json(p.period_d);
    q["K_ms"] = value_json(p.K_ms);
    q["ecc"] = value_json(p.ecc);
    q["omega_deg"] = value_json(p.omega_deg);
    q["t_conj_bjd"] = value_json(p.t_conj_bjd);
    q["t_peri_bjd"] = value_json(p.t_peri_bjd);
    if (has_mass) {
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
  j["instruments"] = json::array();
  const ParameterLayout blocks = fit.parameters();
  for (const InstrumentBlock* b : blocks.instruments()) {
    json q;
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

json search_json(const SearchResult& sr) {
  json j;
  j["search"] = json::array();
  for (const auto& st : sr.steps) {
    json q;
    q["n_planets"] = st.n_planets;
    q["ln_like"] = st.log_likelihood;
    q["k"] = st.n_free;
    q["bic"] = st.bic;
    q["aicc"] = st.aicc;
    q["admitting_fap"] = finite_or_null(st.admitting_fap);
    q["admitting_period_d"] = finite_or_null(st.admitting_period_days);
    j["search"].push_back(q);
  }
  j["search_message"] = sr.message;
  j["selected_n_planets"] = sr.selected_n_planets;
  return j;
}

// The ephemeris document (moved from src/cli/cmd_ephemeris.cpp unchanged).
json estimate_json(const Estimate& e) { return {{"value", e.value}, {"err", e.err}}; }
json number_or_null(double x) { return std::isfinite(x) ? json(x) : json(nullptr); }

json ephemeris_document(const EphemerisResult& r, const std::string& path, const std::string& planet,
                       const std::vector<std::string>& ignored) {
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

std::string scan_json(const PeriodogramResult& r, const VelocityData& data) {
  json j;
  j["peaks"] = json::array();
  for (const Peak& p : r.peaks) j["peaks"].push_back(peak_json(p, r.peaks, false));
  j["window_peaks"] = json::array();
  for (const Peak& p : r.window_peaks) j["window_peaks"].push_back(peak_json(p, r.peaks, true));
  j["normalization"] = to_string(r.normalization);
  j["method"] = r.method_used;
  j["grid"] = {{"min_frequency_per_d", r.min_frequency_per_day},
               {"max_frequency_per_d", r.max_frequency_per_day},
               {"step_per_d", r.frequency_step_per_day},
               {"n_frequencies", r.frequency_per_day.size()}};
  j["data"] = data_json(data);
  j["offsets"] = r.offsets_note;
  return text(j);
}

std::string fit_json(const FitRun& run, const SearchProblem& problem) {
  const std::optional<double>& mass = problem.star.mass_msun;
  json fj = fit_result_json(run.fit, run.planets, mass.has_value());
  if (run.search) fj.update(search_json(*run.search));
  fj["data"] = data_json(problem.data);
  if (mass) fj["star"] = {{"mass_msun", *mass}, {"mass_err_msun", problem.star.mass_err_msun}};
  return text(fj);
}

std::string compare_json(const CompareResult& r, const VelocityData& data) {
  json rows = json::array();
  for (const auto& row : r.rows) {
    rows.push_back({{"n_planets", row.n_planets},
                    {"n_params", row.n_params},
                    {"ln_like_max", finite_or_null(row.ln_like_max)},
                    {"bic", finite_or_null(row.bic)},
                    {"aicc", finite_or_null(row.aicc)},
                    {"ln_evidence", finite_or_null(row.ln_evidence)},
                    {"ln_evidence_err", finite_or_null(row.ln_evidence_err)},
                    {"information_nats", finite_or_null(row.information_nats)},
                    {"ln_bayes_vs_previous", finite_or_null(row.ln_bayes_vs_previous)},
                    {"ln_bayes_err", finite_or_null(row.ln_bayes_err)},
                    {"bayes_wording", row.bayes_wording},
                    {"termination", to_string(row.nested.termination)},
                    {"unreliable", row.unreliable},
                    {"likelihood_calls", row.likelihood_calls},
                    {"seconds", row.seconds},
                    {"ordering", row.ordering_note}});
  }
  const json j = {{"data", data_json(data)},
                  {"comparison", rows},
                  {"selected_n_planets", r.selected_n_planets},
                  {"selection_rule", r.selection_rule},
                  {"notes", r.notes},
                  {"message", r.message}};
  return text(j);
}

std::string sampling_json(const SamplerResult& result) {
  json j;
  j["sampler"] = {{"walkers", result.walkers},         {"steps", result.steps},
                  {"burn_in_steps", result.burn_in_steps}, {"rhat_max", result.rhat_max},
                  {"ess_min", result.ess_min},         {"tau_max", result.tau_max},
                  {"termination", to_string(result.termination)}, {"message", result.message}};
  return text(j);
}

std::string ephemeris_json(const EphemerisResult& result, const std::string& file, const std::string& planet,
                           const std::vector<std::string>& ignored_columns) {
  return text(ephemeris_document(result, file, planet, ignored_columns));
}

}  // namespace apsides
