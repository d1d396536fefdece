// What a finished run writes for others to read: the comparison table in the results
// file, and the contract JSON of DESIGN.md (analysis.h).
#include <fmt/format.h>

#include <cmath>
#include <nlohmann/json.hpp>

#include "apsides/analysis.h"
#include "apsides/keplerian_model.h"
#include "apsides/posterior.h"

namespace apsides {
using nlohmann::json;

namespace {
json finite_or_null(double x) { return std::isfinite(x) ? json(x) : json(nullptr); }
}  // namespace

// ---- Comparison into the results file ---------------------------------------------------

void write_comparison(ResultsFile& file, const CompareResult& r) {
  std::vector<double> col(r.rows.size());
  auto column = [&](auto get) {
    for (std::size_t i = 0; i < r.rows.size(); ++i) col[i] = get(r.rows[i]);
    return std::span<const double>(col);
  };
  std::vector<long long> n_planets;
  for (const auto& row : r.rows) n_planets.push_back(row.n_planets);
  file.write_ints("/comparison/n_planets", n_planets, "number of Keplerians of each model");
  file.write_vector("/comparison/ln_evidence", column([](const ComparisonRow& x) { return x.ln_evidence; }), "nats",
                    "ln Z by nested sampling");
  file.write_vector("/comparison/ln_evidence_err", column([](const ComparisonRow& x) { return x.ln_evidence_err; }),
                    "nats", "sqrt(H / n_live) (Skilling 2006)");
  file.write_vector("/comparison/ln_like_max", column([](const ComparisonRow& x) { return x.ln_like_max; }), "nats",
                    "highest ln L visited by nested sampling");
  file.write_vector("/comparison/bic", column([](const ComparisonRow& x) { return x.bic; }), "", "k ln n - 2 ln L");
  file.write_vector("/comparison/aicc", column([](const ComparisonRow& x) { return x.aicc; }), "",
                    "2k - 2 ln L + 2k(k+1)/(n-k-1)");
  file.write_vector("/comparison/information_nats", column([](const ComparisonRow& x) { return x.information_nats; }),
                    "nats", "information H (Kullback-Leibler divergence prior -> posterior)");
  file.write_vector("/comparison/ln_bayes_vs_previous",
                    column([](const ComparisonRow& x) { return x.ln_bayes_vs_previous; }), "nats",
                    "ln Z(k) - ln Z(previous row); NaN for the first row");
  file.set_attribute("/comparison", "selected_n_planets", static_cast<long long>(r.selected_n_planets));
  file.set_attribute("/comparison", "selection_rule", r.selection_rule);
  for (const auto& row : r.rows) {
    if (row.nested.samples.empty()) continue;  // e.g. a comparison reused from the cache
    const std::string g = fmt::format("/nested_samples/k{}", row.n_planets);
    const auto& s = row.nested.samples;
    const std::size_t dim = s.empty() ? 0 : s.front().theta.size();
    std::vector<double> theta, ln_like, ln_w, ln_x;
    theta.reserve(s.size() * dim);
    for (const auto& x : s) {
      theta.insert(theta.end(), x.theta.begin(), x.theta.end());
      ln_like.push_back(x.ln_like);
      ln_w.push_back(x.ln_weight);
      ln_x.push_back(x.ln_prior_volume);
    }
    file.write_matrix(g + "/theta", theta, s.size(), dim, "parameter units (see names)",
                      "dead points then final live points, in parameter order");
    file.write_strings(g + "/names", row.nested.names, "parameter names (theta columns)");
    file.write_vector(g + "/ln_like", ln_like, "nats", "ln L of each point");
    file.write_vector(g + "/ln_weight", ln_w, "nats", "normalised posterior weight, sum exp = 1");
    file.write_vector(g + "/ln_prior_volume", ln_x, "nats", "expected ln X at removal");
    file.set_attribute(g, "ln_evidence", row.ln_evidence);
    file.set_attribute(g, "ln_evidence_err", row.ln_evidence_err);
    file.set_attribute(g, "live_points", static_cast<long long>(row.nested.live_points));
    file.set_attribute(g, "termination", to_string(row.nested.termination));
    file.set_attribute(g, "ordering", row.ordering_note);
  }
  file.flush();
}

// ---- Contract JSON ------------------------------------------------------------------------

std::string summary_json(const ResultsFile& file) {
  const RunSummary s = summarize_run(file);
  auto q = [&](const std::string& name) -> json {
    const SummaryRow* r = s.find(name);
    if (r == nullptr) return nullptr;
    return json{{"median", r->q.median}, {"minus", r->q.minus}, {"plus", r->q.plus}};
  };
  json j;
  j["data"] = {{"n_points", s.n_points}, {"instruments", s.instruments}, {"baseline_d", s.baseline_d}};
  j["comparison"] = json::array();
  j["selected_n_planets"] = s.n_planets;
  if (file.exists("/comparison/n_planets")) {
    const auto n = file.read_ints("/comparison/n_planets");
    const auto lz = file.read_vector("/comparison/ln_evidence");
    const auto le = file.read_vector("/comparison/ln_evidence_err");
    const auto ll = file.read_vector("/comparison/ln_like_max");
    const auto bic = file.read_vector("/comparison/bic");
    const auto aicc = file.read_vector("/comparison/aicc");
    for (std::size_t i = 0; i < n.size(); ++i) {
      j["comparison"].push_back({{"n_planets", n[i]}, {"ln_like_max", finite_or_null(ll[i])}, {"bic", finite_or_null(bic[i])},
                                 {"aicc", finite_or_null(aicc[i])}, {"ln_evidence", finite_or_null(lz[i])},
                                 {"ln_evidence_err", finite_or_null(le[i])}});
    }
    j["selection_rule"] = file.string_attribute("/comparison", "selection_rule");
    j["comparison_selected_n_planets"] = file.int_attribute("/comparison", "selected_n_planets");
  }
  j["planets"] = json::array();
  for (int p = 0; p < s.n_planets; ++p) {
    const std::string l = planet_label(p);
    json pl = {{"label", l}};
    for (const char* k : {"period_d", "K_ms", "ecc", "omega_deg", "t_conj_bjd", "t_peri_bjd", "msini_mjup",
                          "msini_mearth", "a_au", "r_peri_au", "r_apo_au"})
      pl[k] = q(l + "." + k);
    j["planets"].push_back(pl);
  }
  j["instruments"] = json::array();
  for (const auto& name : s.instruments) {
    json in = {{"name", name}, {"offset_ms", q(name + ".offset_ms")}};
    in["jitter_ms"] = s.find(name + ".jitter_ms") ? q(name + ".jitter_ms") : json(nullptr);
    j["instruments"].push_back(in);
  }
  j["sampler"] = {{"walkers", s.walkers},          {"steps", s.steps},
                  {"burn_in_steps", s.burn_in_steps}, {"rhat_max", finite_or_null(s.rhat_max)},
                  {"ess_min", finite_or_null(s.ess_min)}, {"tau_max", finite_or_null(s.tau_max)},
                  {"converged", s.converged},         {"termination", s.termination}};
  j["notes"] = {"m sin i is a minimum mass: the inclination is unknown from velocities alone",
                "quantities are {median, minus, plus} from the 16th, 50th and 84th percentiles"};
  return j.dump(2) + "\n";
}

}  // namespace apsides
