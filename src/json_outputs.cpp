// The --json documents of scan, fit, compare and sample (json_outputs.h), moved here from
// src/cli/cmd_*.cpp unchanged so the Python module returns the same documents.
#include "apsides/json_outputs.h"

#include <cmath>
#include <nlohmann/json.hpp>

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

}  // namespace apsides
