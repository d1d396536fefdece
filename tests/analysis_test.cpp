// End to end: `apsides analyze` on the bundled invented demo system, checked against the
// simulation's truth file and the output contract of DESIGN.md.
#include <doctest/doctest.h>
#include <fmt/format.h>

#include <cmath>
#include <cstdint>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>

#include "test_support.h"

namespace fs = std::filesystem;
using nlohmann::json;

namespace {
json read_json(const std::string& path) {
  std::ifstream in(path);
  return json::parse(in);
}
std::string read_all(const std::string& path) {
  std::ifstream in(path);
  std::stringstream ss;
  ss << in.rdbuf();
  return ss.str();
}
// Width and height from a PNG's IHDR chunk (big-endian at bytes 16..23).
std::pair<std::uint32_t, std::uint32_t> png_size(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  unsigned char b[24] = {};
  in.read(reinterpret_cast<char*>(b), 24);
  auto be = [&](int o) { return (std::uint32_t(b[o]) << 24) | (std::uint32_t(b[o + 1]) << 16) | (std::uint32_t(b[o + 2]) << 8) | b[o + 3]; };
  return {be(16), be(20)};
}
}  // namespace

TEST_SUITE("analysis") {
  TEST_CASE("analysis: analyze on the demo finds both planets, truth inside the 95 % intervals, every file written") {
    const std::string dir = apsides::test::temp_dir("analyze_demo");
    const std::string project = apsides::test::source_dir() + "/datasets_synthetic/demo/project.toml";
    const auto r = apsides::test::run_command(apsides::test::apsides_binary() + " analyze " + project + " --out " + dir +
                                              " --quiet --json " + dir + "/copy.json");
    INFO(r.output);
    REQUIRE(r.status == 0);
    for (const char* f : {"results.h5", "summary.json", "report.md", "copy.json"}) CHECK(fs::exists(fs::path(dir) / f));
    const json s = read_json(dir + "/summary.json");
    // DESIGN.md contract keys.
    for (const char* k : {"data", "comparison", "selected_n_planets", "planets", "instruments", "sampler"}) CHECK(s.contains(k));
    for (const char* k : {"n_points", "instruments", "baseline_d"}) CHECK(s["data"].contains(k));
    for (const char* k : {"walkers", "steps", "rhat_max", "ess_min", "tau_max"}) CHECK(s["sampler"].contains(k));
    REQUIRE(s["comparison"].size() >= 2);
    for (const auto& row : s["comparison"])
      for (const char* k : {"n_planets", "ln_like_max", "bic", "aicc", "ln_evidence", "ln_evidence_err"}) CHECK(row.contains(k));
    CHECK(s["selected_n_planets"] == 2);
    CHECK(s["data"]["n_points"] == 150);
    CHECK(s["sampler"]["converged"] == true);
    CHECK(s["sampler"]["rhat_max"].get<double>() < 1.01);

    // Truth from the simulation (datasets_synthetic/demo/truth.json): inside the 95 %
    // interval, taken as median -+ 2 x the 16/84 % half-widths.
    const json truth = read_json(apsides::test::source_dir() + "/datasets_synthetic/demo/truth.json");
    REQUIRE(s["planets"].size() == 2);
    for (std::size_t p = 0; p < 2; ++p) {
      const json& got = s["planets"][p];
      const json& want = truth["planets"][p];
      CHECK(got["label"] == want["label"]);
      for (const char* k : {"period_d", "K_ms", "ecc", "msini_mjup", "a_au"}) {
        const json& q = got[k];
        for (const char* part : {"median", "minus", "plus"}) REQUIRE(q.contains(part));
        const double m = q["median"], lo = m - 2 * q["minus"].get<double>(), hi = m + 2 * q["plus"].get<double>();
        const double t = want[k];
        CAPTURE(k);
        CAPTURE(p);
        CHECK(t >= lo);
        CHECK(t <= hi);
      }
    }
    for (const auto& inst : s["instruments"])
      for (const char* k : {"name", "offset_ms", "jitter_ms"}) CHECK(inst.contains(k));

    // Figures: present, PNG of the stated size, not trivially small.
    for (const char* f : {"periodogram", "search_steps", "velocities", "phase_folds", "corner_b", "corner_c", "o_minus_c_b"}) {
      const std::string path = fmt::format("{}/figures/{}.png", dir, f);
      CAPTURE(path);
      REQUIRE(fs::exists(path));
      CHECK(fs::file_size(path) > 10000);
      const auto [w, h] = png_size(path);
      CHECK(w >= 200);
      CHECK(h >= 200);
    }
    CHECK(png_size(dir + "/figures/periodogram.png") == std::pair<std::uint32_t, std::uint32_t>{1200, 800});

    // The report: decision, tables, figures linked, cautions.
    const std::string md = read_all(dir + "/report.md");
    for (const char* needle : {"**Decision.**", "| planet | P [d]", "ln B vs previous row", "![periodogram](figures/periodogram.png)",
                               "## Priors", "## Cautions", "minimum", "activity", "alias", "priors"})
      CHECK(md.find(needle) != std::string::npos);

    // --resume reuses the finished comparison and sampling run, and rewrites the same summary.
    const std::string before = read_all(dir + "/summary.json");
    const auto again = apsides::test::run_command(apsides::test::apsides_binary() + " analyze " + project + " --out " + dir + " --resume");
    INFO(again.output);
    CHECK(again.status == 0);
    CHECK(again.output.find("reusing the comparison") != std::string::npos);
    CHECK(again.output.find("reusing the finished run") != std::string::npos);
    CHECK(read_all(dir + "/summary.json") == before);

    // Outside reader: the results file opens in h5py (Debian python3-h5py).
    const auto py = apsides::test::run_python("import h5py\nf = h5py.File('" + dir + "/results.h5', 'r')\n"
                                              "print(sorted(k for k in f.keys()))\n");
    CHECK(py.output == "['chains', 'comparison', 'data', 'derived', 'diagnostics', 'map', 'nested_samples', 'parameters', "
                       "'periodograms', 'project', 'search']\n");
  }
}
