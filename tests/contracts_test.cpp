// Output contracts: what a command prints and what it writes with --json are the same
// numbers, to the printed precision (a user comparing the table with the JSON never sees
// two values), and every per-parameter array in the JSON has the length of its names.
// scan, fit, compare and ephemeris here on the worked examples' data (the demo system);
// sample and summarize in results_file_test.cpp and analyze in analysis_test.cpp, on the
// runs those suites already make.
#include <doctest/doctest.h>
#include <fmt/format.h>

#include <nlohmann/json.hpp>
#include <regex>
#include <string>
#include <vector>

#include "test_support.h"

using nlohmann::json;
namespace test = apsides::test;

namespace {

std::string demo(const std::string& name) { return test::source_dir() + "/datasets_synthetic/demo/" + name; }

// Runs `apsides <args> --json <dir>/out.json`; returns stdout and the parsed JSON.
struct Run {
  std::string text;
  json j;
  std::string json_text;
};
Run run(const std::string& dir, const std::string& args) {
  const std::string path = dir + "/out.json";
  const auto r = test::run_command(fmt::format("{} {} --quiet --json {}", test::apsides_binary(), args, path), false);
  REQUIRE_MESSAGE(r.status == 0, r.output);
  Run out;
  out.text = r.output;
  out.json_text = test::read_file(path);
  out.j = json::parse(out.json_text);
  return out;
}

// The JSON number agrees with the printed one to the printed precision.
void same(const std::string& what, const json& value, const std::string& printed) {
  INFO(what, ": JSON ", value.dump(), ", printed ", printed);
  REQUIRE(value.is_number());
  CHECK(test::agrees_to_printed(value.get<double>(), printed));
}

void lengths_match(const Run& r) {
  const auto bad = test::per_parameter_length_mismatches(r.json_text);
  for (const auto& b : bad) FAIL_CHECK(b);
  CHECK(bad.empty());
}

// Every match of `re` in the text, as its groups.
std::vector<std::smatch> rows(const std::string& text, const std::regex& re) {
  std::vector<std::smatch> out;
  for (std::sregex_iterator it(text.begin(), text.end(), re), end; it != end; ++it) out.push_back(*it);
  return out;
}

const std::string kNum = "(-?[0-9]+\\.?[0-9]*(?:e[-+][0-9]+)?)";

}  // namespace

TEST_SUITE("contracts") {

TEST_CASE("contracts: scan prints the peaks and window peaks of its JSON") {
  const std::string dir = test::temp_dir("contracts_scan");
  const Run r = run(dir, "scan " + demo("velocities_Kestrel.csv") + " --peaks 5");
  const auto head = rows(r.text, std::regex("([0-9]+) velocities, ([0-9]+) instrument\\(s\\), baseline " + kNum + " d"));
  REQUIRE(head.size() == 1);
  CHECK(std::stoi(head[0][1]) == r.j["data"]["n_points"].get<int>());
  CHECK(std::stoul(head[0][2]) == r.j["data"]["instruments"].size());
  same("baseline", r.j["data"]["baseline_d"], head[0][3]);
  const auto peaks = rows(r.text, std::regex("\\n +([0-9]+) +" + kNum + " +" + kNum + " +" + kNum + " +" + kNum));
  REQUIRE(peaks.size() == r.j["peaks"].size());
  REQUIRE(peaks.size() == 5);
  for (std::size_t i = 0; i < peaks.size(); ++i) {
    const json& p = r.j["peaks"][i];
    CAPTURE(i);
    CHECK(std::stoul(peaks[i][1]) == i + 1);
    same("period_d", p["period_d"], peaks[i][2]);
    same("frequency_per_d", p["frequency_per_d"], peaks[i][3]);
    same("power", p["power"], peaks[i][4]);
    same("fap", p["fap"], peaks[i][5]);
  }
  const auto window = rows(r.text, std::regex("f = " + kNum + " /d  \\(P = " + kNum + " d\\)  window power " + kNum));
  REQUIRE(window.size() == r.j["window_peaks"].size());
  for (std::size_t i = 0; i < window.size(); ++i) {
    same("window frequency", r.j["window_peaks"][i]["frequency_per_d"], window[i][1]);
    same("window period", r.j["window_peaks"][i]["period_d"], window[i][2]);
    same("window power", r.j["window_peaks"][i]["power"], window[i][3]);
  }
  lengths_match(r);
}

TEST_CASE("contracts: fit prints the orbits, instruments and statistics of its JSON") {
  const std::string dir = test::temp_dir("contracts_fit");
  const Run r = run(dir, "fit " + demo("project.toml") + " --planets 2");
  const auto planets = rows(r.text, std::regex("\\n([b-z]) +" + kNum + " +" + kNum + " +" + kNum + " +" + kNum + " +" +
                                               kNum + " +" + kNum + " +" + kNum + " +" + kNum + "(?=\\n)"));
  REQUIRE(planets.size() == 2);
  REQUIRE(r.j["planets"].size() == 2);
  const char* keys[] = {"period_d", "K_ms", "ecc", "omega_deg", "t_conj_bjd", "msini_mjup", "msini_mearth", "a_au"};
  for (std::size_t i = 0; i < 2; ++i) {
    const json& p = r.j["planets"][i];
    CHECK(p["label"] == planets[i][1].str());
    for (std::size_t k = 0; k < 8; ++k) same(p["label"].get<std::string>() + "." + keys[k], p[keys[k]]["value"], planets[i][k + 2]);
  }
  const auto insts = rows(r.text, std::regex("\\n([A-Za-z]+) +" + kNum + " +" + kNum + " +" + kNum + "(?=\\n)"));
  REQUIRE(insts.size() == r.j["instruments"].size());
  for (std::size_t i = 0; i < insts.size(); ++i) {
    const json& in = r.j["instruments"][i];
    CHECK(in["name"] == insts[i][1].str());
    same("offset_ms", in["offset_ms"]["value"], insts[i][2]);
    same("jitter_ms", in["jitter_ms"]["value"], insts[i][3]);
    same("rms_ms", in["rms_ms"], insts[i][4]);
  }
  const auto stats = rows(r.text, std::regex("ln L = " + kNum + " +chi2 = " + kNum + " +k = ([0-9]+) +n = ([0-9]+) +BIC = " +
                                             kNum + " +AICc = " + kNum));
  REQUIRE(stats.size() == 1);
  same("ln_like", r.j["ln_like"], stats[0][1]);
  same("chi2", r.j["chi2"], stats[0][2]);
  CHECK(std::stoi(stats[0][3]) == r.j["k"].get<int>());
  CHECK(std::stoi(stats[0][4]) == r.j["n_points"].get<int>());
  same("bic", r.j["bic"], stats[0][5]);
  same("aicc", r.j["aicc"], stats[0][6]);
  CHECK(r.j["theta"].size() == r.j["parameter_names"].size());
  lengths_match(r);
}

TEST_CASE("contracts: compare prints the evidence table of its JSON") {
  const std::string dir = test::temp_dir("contracts_compare");
  // Few live points: the contract, not the evidence, is under test (about a second).
  const Run r = run(dir, "compare " + demo("project.toml") + " --max-planets 1 --live-points 40 --seed 3");
  const auto table = rows(r.text, std::regex("\\n +([0-9]+) +([0-9]+) +" + kNum + " +" + kNum + " +" + kNum + " +" + kNum +
                                             " \\+- " + kNum + " +" + kNum + " +(?:-|" + kNum + " \\+- " + kNum + ")"));
  REQUIRE(table.size() == r.j["comparison"].size());
  REQUIRE(table.size() == 2);
  for (std::size_t i = 0; i < table.size(); ++i) {
    const json& c = r.j["comparison"][i];
    CAPTURE(i);
    CHECK(std::stoi(table[i][1]) == c["n_planets"].get<int>());
    CHECK(std::stoi(table[i][2]) == c["n_params"].get<int>());
    same("ln_like_max", c["ln_like_max"], table[i][3]);
    same("bic", c["bic"], table[i][4]);
    same("aicc", c["aicc"], table[i][5]);
    same("ln_evidence", c["ln_evidence"], table[i][6]);
    same("ln_evidence_err", c["ln_evidence_err"], table[i][7]);
    same("information_nats", c["information_nats"], table[i][8]);
    if (table[i][9].matched) {
      same("ln_bayes_vs_previous", c["ln_bayes_vs_previous"], table[i][9]);
      same("ln_bayes_err", c["ln_bayes_err"], table[i][10]);
    }
  }
  const auto selected = rows(r.text, std::regex("Selected: ([0-9]+) planet"));
  REQUIRE(selected.size() == 1);
  CHECK(std::stoi(selected[0][1]) == r.j["selected_n_planets"].get<int>());
  lengths_match(r);
}

TEST_CASE("contracts: ephemeris prints the ephemeris, the model choice and the predictions of its JSON") {
  const std::string dir = test::temp_dir("contracts_ephemeris");
  // The demo (linear chosen) and TRAPPIST-1 f (sinusoid chosen; Agol et al. 2021 times).
  for (const std::string args : {"ephemeris " + demo("transits.csv") + " --next 5",
                                 "ephemeris " + test::real_data("trappist1_transits_agol2021.csv") + " --planet f --next 5"}) {
    CAPTURE(args);
    const Run r = run(dir, args);
    const auto p = rows(r.text, std::regex("\\n  P +" + kNum + " \\+/- " + kNum + " d"));
    REQUIRE(p.size() == 1);
    same("period", r.j["period_d"]["value"], p[0][1]);
    same("period err", r.j["period_d"]["err"], p[0][2]);
    const auto t0 = rows(r.text, std::regex("T0    \\(epoch +(-?[0-9]+)\\)  " + kNum + " \\+/- " + kNum +
                                            " d BJD_TDB   cov\\(T0, P\\) = " + kNum));
    REQUIRE(t0.size() == 1);
    CHECK(std::stoll(t0[0][1]) == r.j["t0_bjd"]["epoch"].get<long long>());
    same("t0", r.j["t0_bjd"]["value"], t0[0][2]);
    same("t0 err", r.j["t0_bjd"]["err"], t0[0][3]);
    same("cov(T0, P)", r.j["cov_t0_period_d2"], t0[0][4]);
    const auto chi2 = rows(r.text, std::regex("chi2 = " + kNum + ", dof = ([0-9]+), chi2/dof = " + kNum));
    REQUIRE(chi2.size() == 1);
    same("chi2", r.j["chi2"], chi2[0][1]);
    CHECK(std::stoi(chi2[0][2]) == r.j["dof"].get<int>());
    same("reduced_chi2", r.j["reduced_chi2"], chi2[0][3]);
    const auto quad = rows(r.text, std::regex("dP/dn  ([-+][0-9.e+-]+) \\+/- ([0-9.e+-]+) d/orbit"));
    REQUIRE(quad.size() == 1);
    same("dp_dn", r.j["quadratic"]["dp_dn"]["value"], quad[0][1]);
    same("dp_dn err", r.j["quadratic"]["dp_dn"]["err"], quad[0][2]);
    const auto dbic = rows(r.text, std::regex("delta BIC = ([-+][0-9.]+) \\(([^)]*)\\)"));
    REQUIRE(dbic.size() == 1);
    same("quadratic delta_bic", r.j["quadratic"]["delta_bic"], dbic[0][1]);
    CHECK((dbic[0][2].str() == "period change favoured") == r.j["quadratic"]["period_change_favoured"].get<bool>());
    const auto sine = rows(r.text, std::regex("sinusoid: period " + kNum + " \\+/- " + kNum + " epochs = " + kNum + " \\+/- " +
                                              kNum + " d, amplitude " + kNum + " \\+/- " + kNum + " min"));
    REQUIRE(sine.size() == 1);
    same("ttv period epochs", r.j["ttv"]["period_epochs"]["value"], sine[0][1]);
    same("ttv period days", r.j["ttv"]["period_d"], sine[0][3]);
    same("ttv amplitude min", r.j["ttv"]["amplitude_min"], sine[0][5]);
    // The model choice.
    const auto scores = rows(r.text, std::regex("\\n  (linear|quadratic|sinusoid) +([0-9]) +" + kNum + " +" + kNum + " +([-+][0-9.]+)"));
    REQUIRE(scores.size() == r.j["model_scores"].size());
    for (std::size_t i = 0; i < scores.size(); ++i) {
      const json& m = r.j["model_scores"][i];
      CHECK(m["model"] == scores[i][1].str());
      CHECK(std::stoi(scores[i][2]) == m["n_parameters"].get<int>());
      same("chi2 " + scores[i][1].str(), m["chi2"], scores[i][3]);
      same("bic " + scores[i][1].str(), m["bic"], scores[i][4]);
      same("bic - linear " + scores[i][1].str(), m["delta_bic_vs_linear"], scores[i][5]);
    }
    const auto chosen = rows(r.text, std::regex("  -> ([a-z]+): "));
    REQUIRE(chosen.size() == 1);
    CHECK(chosen[0][1].str() == r.j["prediction"]["model"].get<std::string>());
    CHECK(r.j["prediction_model"] == r.j["prediction"]["model"]);
    const auto scatter = rows(r.text, std::regex("Predicted transits \\(([a-z]+) ephemeris; predictive 1-sigma = its covariance "
                                                 "\\(\\+\\) " + kNum + " min"));
    REQUIRE(scatter.size() == 1);
    CHECK(scatter[0][1].str() == r.j["prediction"]["model"].get<std::string>());
    same("excess scatter", r.j["prediction"]["excess_scatter_min"], scatter[0][2]);
    const auto preds = rows(r.text, std::regex("\\n +([0-9]+) +(24[0-9]+\\.[0-9]+) +" + kNum +
                                               " +([0-9]{4}-[0-9]{2}-[0-9]{2} [0-9:]{8})"));
    REQUIRE(preds.size() == 5);
    REQUIRE(r.j["predictions"].size() == 5);
    for (std::size_t i = 0; i < preds.size(); ++i) {
      const json& q = r.j["predictions"][i];
      CHECK(std::stoll(preds[i][1]) == q["epoch"].get<long long>());
      same("t_mid_bjd", q["t_mid_bjd"], preds[i][2]);
      same("sigma min", json(q["err_d"].get<double>() * 1440.0), preds[i][3]);
      CHECK(q["utc"] == preds[i][4].str());
    }
    lengths_match(r);
  }
}

TEST_CASE("contracts: the number checks themselves") {
  CHECK(test::half_last_digit("6.412701") == doctest::Approx(5e-7));
  CHECK(test::half_last_digit("5.35e-11") == doctest::Approx(5e-14));
  CHECK(test::half_last_digit("+0.0000020") == doctest::Approx(5e-8));
  CHECK(test::half_last_digit("120") == doctest::Approx(5.0));
  CHECK(test::half_last_digit("-12450.285") == doctest::Approx(5e-4));
  CHECK(test::agrees_to_printed(6.4127014, "6.412701"));
  CHECK_FALSE(test::agrees_to_printed(6.4127016, "6.412701"));
  CHECK(test::per_parameter_length_mismatches(R"({"a": {"names": ["x", "y"], "v": [1, 2]}})").empty());
  CHECK(test::per_parameter_length_mismatches(R"({"a": [{"parameter_names": ["x", "y"], "theta": [1]}]})").size() == 1);
}

}  // TEST_SUITE
