// apsides summarize run.h5 [--json FILE]
#include <fmt/format.h>

#include <cmath>

#include "apsides/posterior.h"
#include "apsides/results_file.h"
#include "cli/common.h"

namespace apsides::cli {
namespace {

struct SummarizeArgs {
  std::string results;
  CommonOptions common;
};

nlohmann::json q_json(const RunSummary& s, const std::string& name) {
  const SummaryRow* r = s.find(name);
  if (r == nullptr) return nullptr;
  return quantiles_json(r->q.median, r->q.minus, r->q.plus);
}

nlohmann::json number(double x) { return std::isfinite(x) ? nlohmann::json(x) : nlohmann::json(nullptr); }

}  // namespace

Command register_summarize(CLI::App& app) {
  auto args = std::make_shared<SummarizeArgs>();
  CLI::App* cmd = app.add_subcommand(
      "summarize",
      "Posterior table of a sampling run: medians with 16/84 % intervals of the parameters and the derived\n"
      "quantities (m sin i, a, periastron/apastron, time of periastron), and the convergence diagnostics.");
  cmd->add_option("results", args->results, "Results file written by apsides sample")->required();
  add_common_options(cmd, args->common);
  return {cmd, [args]() -> int {
            const ResultsFile file(args->results, ResultsFile::Mode::kReadOnly);
            const RunSummary s = summarize_run(file);
            fmt::print("{}", s.FullReport());
            if (!args->common.json_path.empty()) {
              nlohmann::json j;
              j["data"] = {{"n_points", s.n_points}, {"instruments", s.instruments}, {"baseline_d", s.baseline_d}};
              j["selected_n_planets"] = s.n_planets;
              j["planets"] = nlohmann::json::array();
              for (int p = 0; p < s.n_planets; ++p) {
                const std::string l = planet_label(p);
                nlohmann::json pl = {{"label", l}};
                for (const char* k : {"period_d", "K_ms", "ecc", "omega_deg", "t_conj_bjd", "t_peri_bjd", "msini_mjup",
                                      "msini_mearth", "a_au", "r_peri_au", "r_apo_au"})
                  pl[k] = q_json(s, l + "." + k);
                j["planets"].push_back(pl);
              }
              j["instruments"] = nlohmann::json::array();
              for (const auto& name : s.instruments) {
                nlohmann::json in = {{"name", name}, {"offset_ms", q_json(s, name + ".offset_ms")}};
                in["jitter_ms"] = s.find(name + ".jitter_ms") ? q_json(s, name + ".jitter_ms") : nlohmann::json(nullptr);
                j["instruments"].push_back(in);
              }
              j["sampler"] = {{"walkers", s.walkers},          {"steps", s.steps},
                              {"burn_in_steps", s.burn_in_steps}, {"rhat_max", number(s.rhat_max)},
                              {"ess_min", number(s.ess_min)},     {"tau_max", number(s.tau_max)},
                              {"converged", s.converged},        {"termination", s.termination}};
              j["notes"] = {"m sin i is a minimum mass: the inclination is unknown from velocities alone"};
              write_json(args->common.json_path, j);
            }
            return 0;
          }};
}

}  // namespace apsides::cli
