// Detection limits by injection and recovery (limits.h).
#include <doctest/doctest.h>
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <random>
#include <sstream>

#include "apsides/error.h"
#include "apsides/limits.h"
#include "apsides/periodogram.h"
#include "apsides/project.h"
#include "test_support.h"

using namespace apsides;

namespace {

// A simulated quiet star: n points of white noise (sd sigma) at random times over `span`
// days, one instrument, written as a velocity file beside a project file with `extra`
// appended. Returns the project path.
std::string quiet_star(const std::string& dir, int n, double span, double sigma, unsigned seed,
                       const std::string& extra) {
  std::mt19937_64 rng(seed);
  std::uniform_real_distribution<double> u(0.0, span);
  std::normal_distribution<double> g(0.0, sigma);
  std::vector<double> t(static_cast<std::size_t>(n));
  for (double& x : t) x = 2459000.5 + u(rng);
  std::sort(t.begin(), t.end());
  std::string csv = "time_bjd,velocity,uncertainty,instrument\n";
  for (double x : t) csv += fmt::format("{:.6f},{:.6f},{:.6f},Wren\n", x, g(rng), sigma);
  test::write_text(dir, "Wren.csv", csv);
  return test::write_text(dir, "project.toml",
                          "[star]\nname = \"Quail-3\"\nmass_msun = 1.0\n\n[[velocities]]\nfile = \"Wren.csv\"\n\n" + extra);
}

// The standard-normalised power whose Baluev FAP equals `level` (bisection on the
// library's FAP, which falls as z grows).
double power_at_fap(double level, std::size_t n, double fmax, const std::vector<double>& t, const std::vector<double>& dy) {
  double lo = 1e-6, hi = 1.0 - 1e-9;
  for (int it = 0; it < 200; ++it) {
    const double mid = 0.5 * (lo + hi);
    (baluev_fap(mid, n, fmax, t, dy) > level ? lo : hi) = mid;
  }
  return 0.5 * (lo + hi);
}

std::string join(const std::vector<double>& v) {
  std::string s;
  for (double x : v) s += fmt::format("{}{:.17g}", s.empty() ? "" : ",", x);
  return s;
}

}  // namespace

TEST_SUITE("limits") {

TEST_CASE("periodogram recovery of circular orbits in white noise follows the noncentral chi^2 law of the power") {
  // Known sigma (no jitter fitted), circular orbits at fixed P and m sin i (cell centres),
  // recovery = Baluev FAP of the GLS power at the injected frequency below 1e-3.
  // Outside reference: scipy.stats. The standard-normalised GLS power is z = X / (X + Y)
  // with X = chi^2 reduction by the sinusoid ~ ncx2(2, lambda), lambda = sum (s_i - mean_w s)^2
  // / sigma^2 for the injected signal s, and Y = residual chi^2 ~ chi2(N - 3) independent
  // of X (Cochran); so P(z > z*) = P(X / Y > z*/(1-z*)) = ncf.sf(., 2, N - 3, lambda), the
  // ratio form of the noncentral chi^2 law (ncx2 is its N -> infinity limit, also printed).
  const std::string dir = test::temp_dir("limits_ncx2");
  const std::string path = quiet_star(dir, 60, 300.0, 2.0, 7,
                                      "[model]\nfit_jitter = false\n[search]\nmax_planets = 1\nfap_threshold = 1e-3\n");
  const Project project = load_project(path);
  LimitsOptions o;
  o.period_cells = 1;
  o.mass_cells = 3;
  o.min_period_d = 9.0;
  o.max_period_d = 11.0;
  o.min_msini_mearth = 4.5;
  o.max_msini_mearth = 11.0;
  o.draw_within_cell = false;
  o.injections = 1000;
  o.seed = 11;
  o.eccentricity.kind = EccentricityPriorKind::kCircular;
  o.noise = InjectionNoise::kWhite;
  o.recovery = RecoveryTest::kPeriodogram;
  o.match_width = 0.0;  // the injected frequency alone
  const LimitsProblem pb = make_limits_problem(project, o);
  const LimitsGrid grid = make_limits_grid(pb, o);
  REQUIRE(grid.n_cells() == 3);
  const VelocityData& d = pb.search.data;
  for (double s : pb.noise_sd_m_s) REQUIRE(s == doctest::Approx(2.0).epsilon(1e-9));  // no jitter
  const double z_star = power_at_fap(1e-3, d.size(), pb.search_max_frequency, d.time_days, pb.noise_sd_m_s);

  for (long cell = 0; cell < 3; ++cell) {
    const CellResult c = run_cell(pb, grid, o, cell);
    std::vector<double> k, tc;
    for (const Injection& i : c.injections) {
      k.push_back(i.K_ms);
      tc.push_back(i.t_conj_d);
      CHECK(i.ecc == 0.0);
      CHECK((i.outcome == RecoveryOutcome::kRecovered) == (i.fap < 1e-3));
    }
    const double p_period = c.injections.front().period_d;
    const std::string code = fmt::format(R"(
import numpy as np
from scipy.stats import ncf, ncx2
t = np.array([{}]); K = np.array([{}]); tc = np.array([{}])
P = {:.17g}; z = {:.17g}; sigma = 2.0; N = len(t)
c = z / (1 - z)
lam = []
for k, t0 in zip(K, tc):
    # circular orbit: v = -K sin(2 pi (t - t_conj) / P) (velocity zero-crossing at conjunction)
    s = -k * np.sin(2 * np.pi * (t - t0) / P)
    lam.append(np.sum((s - s.mean())**2) / sigma**2)
lam = np.array(lam)
print(np.mean(ncf.sf(c * (N - 3) / 2, 2, N - 3, lam)), np.mean(ncx2.sf(c * (N - 3), 2, lam)))
)",
                                         join(d.time_days), join(k), join(tc), p_period, z_star);
    const auto py = test::run_python(code);
    REQUIRE(py.status == 0);
    std::istringstream in(py.output);
    double expected = 0, expected_ncx2 = 0;
    in >> expected >> expected_ncx2;
    const double n = static_cast<double>(c.injections.size());
    const double got = c.recovered() / n;
    const double sd = std::sqrt(std::max(expected * (1 - expected), 1e-4) / n);
    MESSAGE(fmt::format("cell {}: m sin i {:.3g} M_E, K {:.3g} m/s: apsides {:.3f}, noncentral F {:.3f} (ncx2 limit {:.3f}), "
                        "binomial sd {:.3f}",
                        cell, grid.msini_mearth[static_cast<std::size_t>(cell)], k.front(), got, expected, expected_ncx2, sd));
    CHECK(expected > 0.03);  // the cells test the law where it is informative
    CHECK(expected < 0.97);
    CHECK(std::fabs(got - expected) < 3 * sd);
  }
}

TEST_CASE("first-step recovery: none far below the noise, all far above, monotone in mass") {
  // Simulated star (white noise, sigma 2 m/s, jitter fitted); the search's own first step.
  const std::string dir = test::temp_dir("limits_monotone");
  const std::string path = quiet_star(dir, 50, 400.0, 2.0, 3, "[search]\nmax_planets = 1\n");
  const Project project = load_project(path);
  LimitsOptions o;
  o.period_cells = 1;
  o.mass_cells = 5;
  o.min_period_d = 15.0;
  o.max_period_d = 25.0;
  o.injections = 10;
  o.seed = 5;
  o.threads = 2;
  const LimitsProblem pb = make_limits_problem(project, o);
  // Defaults span 0.1 x to 100 x the mass of K = rms: far below to far above the noise.
  const LimitsGrid grid = make_limits_grid(pb, o);
  LimitsRunOptions run;
  run.out_dir = dir + "/out";
  const LimitsResult r = run_limits(project, o, run);
  REQUIRE(r.complete);
  const std::vector<double>& c = r.completeness[0];
  MESSAGE(fmt::format("completeness by mass {}: {}", fmt::join(grid.msini_mearth, " "), fmt::join(c, " ")));
  CHECK(c.front() == 0.0);
  CHECK(c.back() == 1.0);
  for (std::size_t j = 0; j + 1 < c.size(); ++j) {
    const double sd = std::sqrt(std::max(c[j] * (1 - c[j]), 0.1 * 0.9) / 10.0 + std::max(c[j + 1] * (1 - c[j + 1]), 0.1 * 0.9) / 10.0);
    CHECK(c[j + 1] >= c[j] - 3 * sd);
  }
  // The limit lines: 50 % below 90 % below 99 %, all inside the grid.
  REQUIRE(r.limits.size() == 3);
  const double m50 = r.limits[0].msini_mearth[0], m90 = r.limits[1].msini_mearth[0], m99 = r.limits[2].msini_mearth[0];
  CHECK(m50 <= m90);
  CHECK(m90 <= m99);
  CHECK(m50 > grid.msini_edges_mearth.front());
  CHECK(m99 <= grid.msini_mearth.back());
  // Every recovered injection was found within 1/baseline of its frequency.
  for (const CellResult& cr : r.cells)
    for (const Injection& i : cr.injections)
      if (i.outcome == RecoveryOutcome::kRecovered)
        CHECK(std::fabs(1 / i.found_period_d - 1 / i.period_d) < 1.0 / pb.baseline_days);
  CHECK(std::filesystem::exists(run.out_dir + "/limits.json"));
  CHECK(std::filesystem::exists(run.out_dir + "/figures/completeness.png"));
}

TEST_CASE("cells are bitwise the same for any number of threads, and a resumed run equals a whole one") {
  const std::string dir = test::temp_dir("limits_threads");
  const std::string path = quiet_star(dir, 40, 300.0, 3.0, 9, "[search]\nmax_planets = 1\n");
  const Project project = load_project(path);
  LimitsOptions o;
  o.period_cells = 3;
  o.mass_cells = 2;
  o.injections = 3;
  o.seed = 17;
  o.threads = 1;
  LimitsRunOptions run;
  run.out_dir = dir + "/one";
  const LimitsResult one = run_limits(project, o, run);
  o.threads = 3;
  run.out_dir = dir + "/three";
  const LimitsResult three = run_limits(project, o, run);
  REQUIRE(one.cells.size() == three.cells.size());
  for (std::size_t c = 0; c < one.cells.size(); ++c) CHECK(encode_cell(one.cells[c]) == encode_cell(three.cells[c]));
  CHECK(test::read_file(dir + "/one/limits.json") == test::read_file(dir + "/three/limits.json"));

  // A run stopped after half the cells (its checkpoint holds those), then resumed.
  LimitsResult half = one;
  for (std::size_t c = 0; c < half.cells.size(); c += 2) half.cells[c] = CellResult{};
  summarise_cells(half);
  run.out_dir = dir + "/resumed";
  std::filesystem::create_directories(run.out_dir);
  write_limits_h5(half, run.out_dir + "/limits.h5");
  const LimitsResult resumed = run_limits(project, o, run);
  CHECK(resumed.cells_reused == 3);
  CHECK(test::read_file(dir + "/resumed/limits.json") == test::read_file(dir + "/one/limits.json"));
  // A different seed is a different job: nothing reused.
  o.seed = 18;
  const LimitsResult other = run_limits(project, o, run);
  CHECK(other.cells_reused == 0);
}

TEST_CASE("limits.json has the documented keys") {
  const std::string dir = test::temp_dir("limits_json");
  const std::string path = quiet_star(dir, 30, 200.0, 2.0, 4, "[search]\nmax_planets = 1\n");
  LimitsOptions o;
  o.period_cells = 2;
  o.mass_cells = 2;
  o.injections = 2;
  LimitsRunOptions run;
  run.out_dir = dir + "/out";
  run_limits(load_project(path), o, run);
  const auto py = test::run_python(fmt::format(R"(
import json
j = json.load(open("{}"))
assert len(j["grid"]["period_d"]) == 2 and len(j["grid"]["msini_mearth"]) == 2
assert len(j["completeness"]) == 2 and len(j["completeness"][0]) == 2
assert j["n_injected"] == 2
assert [l["level"] for l in j["limit"]] == [0.5, 0.9, 0.99]
for l in j["limit"]:
    assert len(l["period_d"]) == 2 and len(l["msini_mearth"]) == 2
print("ok")
)",
                                               run.out_dir + "/limits.json"));
  CHECK(py.status == 0);
  CHECK(py.output.find("ok") != std::string::npos);
}

TEST_CASE("bad limits settings are one-line input errors") {
  const std::string dir = test::temp_dir("limits_bad");
  const std::string path = quiet_star(dir, 30, 200.0, 2.0, 4, "");
  const Project project = load_project(path);
  LimitsOptions o;
  o.period_cells = 0;
  CHECK_THROWS_AS(make_limits_problem(project, o), InputError);
  o = LimitsOptions{};
  o.injections = 0;
  CHECK_THROWS_AS(make_limits_problem(project, o), InputError);
  o = LimitsOptions{};
  o.min_period_d = 50;
  o.max_period_d = 10;
  CHECK_THROWS_AS(make_limits_problem(project, o), InputError);
  // No star mass: m sin i cannot become K.
  const std::string nomass = test::write_text(dir, "nomass.toml", "[[velocities]]\nfile = \"Wren.csv\"\n");
  CHECK_THROWS_AS(make_limits_problem(load_project(nomass), LimitsOptions{}), InputError);
  // The [limits] table.
  for (const char* bad : {"[limits]\nperiod_cells = 0\n", "[limits]\ninjections = 0\n", "[limits]\nnoise = \"pink\"\n",
                          "[limits]\nrecovery = \"guess\"\n", "[limits]\nmin_period_d = 5\nmax_period_d = 2\n",
                          "[limits]\ncells = 4\n"}) {
    const std::string text = "[star]\nmass_msun = 1\n[[velocities]]\nfile = \"Wren.csv\"\n" + std::string(bad);
    CAPTURE(bad);
    try {
      parse_project(text, "p.toml", dir);
      FAIL("accepted");
    } catch (const InputError& e) {
      const std::string m = e.what();
      CHECK(m.find('\n') == std::string::npos);
      CHECK(m.find("limits.") != std::string::npos);
    }
  }
}

}  // TEST_SUITE
