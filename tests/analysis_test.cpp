// End to end: `apsides analyze` on the bundled invented demo system, checked against the
// simulation's truth file and the output contract of DESIGN.md.
#include <doctest/doctest.h>
#include <fmt/format.h>

#include <cmath>
#include <cstdint>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <regex>
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
// The cells "median +plus -minus" of report.md print summary.json's quantities: the
// median to the uncertainty's last digit (format_with_uncertainty), plus and minus to theirs.
void same_quantity(const std::string& what, const json& q, const std::string& cell) {
  CAPTURE(what);
  CAPTURE(cell);
  static const std::regex re("(-?[0-9.]+) \\+([0-9.]+) -([0-9.]+)");
  std::smatch m;
  REQUIRE(std::regex_match(cell, m, re));
  const double unit = std::max(std::min(apsides::test::half_last_digit(m[2]), apsides::test::half_last_digit(m[3])),
                               apsides::test::half_last_digit(m[1]));
  CHECK(std::fabs(q["median"].get<double>() - std::stod(m[1])) <= unit * (1 + 1e-9));
  CHECK(apsides::test::agrees_to_printed(q["plus"].get<double>(), m[2]));
  CHECK(apsides::test::agrees_to_printed(q["minus"].get<double>(), m[3]));
}

std::vector<std::string> cells(const std::string& row) {
  std::vector<std::string> out;
  std::size_t a = row.find('|');
  while (a != std::string::npos) {
    const std::size_t b = row.find('|', a + 1);
    if (b == std::string::npos) break;
    std::string c = row.substr(a + 1, b - a - 1);
    c.erase(0, c.find_first_not_of(' '));
    c.erase(c.find_last_not_of(' ') + 1);
    out.push_back(c);
    a = b;
  }
  return out;
}

void report_contract(const std::string& md, const json& s) {
  int planets = 0, instruments = 0, comparison = 0;
  const char* keys[] = {"period_d", "K_ms", "ecc", "omega_deg", "t_conj_bjd", "msini_mjup", "msini_mearth", "a_au"};
  for (const auto& line : apsides::test::lines_of(md)) {
    const auto c = cells(line);
    if (c.size() == 9) {
      for (const auto& p : s["planets"]) {
        if (p["label"] != c[0]) continue;
        for (std::size_t k = 0; k < 8; ++k) same_quantity(c[0] + "." + keys[k], p[keys[k]], c[k + 1]);
        ++planets;
      }
    } else if (c.size() == 3) {
      for (const auto& in : s["instruments"]) {
        if (in["name"] != c[0]) continue;
        same_quantity(c[0] + ".offset_ms", in["offset_ms"], c[1]);
        if (!in["jitter_ms"].is_null()) same_quantity(c[0] + ".jitter_ms", in["jitter_ms"], c[2]);
        ++instruments;
      }
    } else if (c.size() == 8 && !c[0].empty() && std::isdigit(static_cast<unsigned char>(c[0][0]))) {
      for (const auto& row : s["comparison"]) {
        if (row["n_planets"].get<int>() != std::stoi(c[0])) continue;
        INFO("comparison row ", line);
        CHECK(apsides::test::agrees_to_printed(row["ln_evidence"].get<double>(), c[1]));
        CHECK(apsides::test::agrees_to_printed(row["ln_evidence_err"].get<double>(), c[2]));
        CHECK(apsides::test::agrees_to_printed(row["ln_like_max"].get<double>(), c[3]));
        CHECK(apsides::test::agrees_to_printed(row["bic"].get<double>(), c[4]));
        CHECK(apsides::test::agrees_to_printed(row["aicc"].get<double>(), c[5]));
        ++comparison;
      }
    }
  }
  CHECK(planets == static_cast<int>(s["planets"].size()));
  CHECK(instruments == static_cast<int>(s["instruments"].size()));
  CHECK(comparison == static_cast<int>(s["comparison"].size()));
  CHECK(apsides::test::per_parameter_length_mismatches(s.dump()).empty());
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

    // The results file a user keeps (issue 13): at most 60 MB, every dataset readable by
    // h5py, the chain stored every `stride` steps with every kept draw in it: the derived
    // chains hold exactly the stored steps after burn-in, all walkers.
    const auto size_mb = static_cast<double>(fs::file_size(dir + "/results.h5")) / 1e6;
    INFO("results.h5: ", size_mb, " MB");
    CHECK(size_mb <= 60.0);
    const auto all = apsides::test::run_python(
        "import h5py, numpy as np\n"
        "f = h5py.File('" + dir + "/results.h5', 'r')\n"
        "bad = []\n"
        "def read(name, obj):\n"
        "    if isinstance(obj, h5py.Dataset):\n"
        "        try: obj[()]\n"
        "        except Exception as e: bad.append((name, str(e)))\n"
        "f.visititems(read)\n"
        "c = f['chains']; stride = int(c.attrs['stride']); steps = int(c.attrs['steps'])\n"
        "burn = int(c.attrs['burn_in_steps']); w = int(c.attrs['walkers'])\n"
        "kept = [s for s in f['chains/step'][()] if s > burn]\n"
        "assert f['chains/positions'].shape[0] == steps // stride\n"
        "assert f['derived/b.period_d'].shape == (len(kept) * w,), (f['derived/b.period_d'].shape, len(kept), w)\n"
        "assert np.array_equal(f['derived/b.period_d'][()], f['chains/positions'][len(f['chains/step']) - len(kept):, :, 0].ravel())\n"
        "assert f['chains/positions'].compression == 'gzip' and f['chains/positions'].shuffle\n"
        "print(bad, stride, steps)\n");
    INFO(all.output);
    CHECK(all.output.rfind("[] 16 ", 0) == 0);

    // Every image the report links exists (the trace figures are traces_1.png, traces_2.png
    // for 16 parameters).
    int images = 0;
    for (const auto& line : apsides::test::lines_of(md)) {
      for (std::size_t at = line.find("]("); at != std::string::npos; at = line.find("](", at + 2)) {
        if (at == 0 || line.rfind("![", at) == std::string::npos) continue;
        const std::string link = line.substr(at + 2, line.find(')', at) - at - 2);
        CAPTURE(link);
        CHECK(fs::exists(fs::path(dir) / link));
        ++images;
      }
    }
    CHECK(images >= 9);
    CHECK(md.find("figures/traces_1.png") != std::string::npos);
    CHECK(md.find("figures/traces_2.png") != std::string::npos);

    // Each note and line once, in what analyze prints and in the report's prose and lists
    // (tables and the verbatim summary block aside: that block lists b.period_d both as a
    // sampled parameter and as a derived quantity).
    CHECK(apsides::test::repeated_lines(r.output).empty());
    std::string prose;
    bool verbatim = false;
    for (const auto& line : apsides::test::lines_of(md)) {
      if (line.rfind("```", 0) == 0) verbatim = !verbatim;
      else if (!verbatim && line.rfind("|", 0) != 0) prose += line + "\n";
    }
    for (const auto& line : apsides::test::repeated_lines(prose)) FAIL_CHECK("report.md repeats: " << line);

    // Output contract: the report's tables print summary.json's numbers.
    report_contract(md, s);
  }
}
