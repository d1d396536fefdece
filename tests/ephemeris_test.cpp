// Transit ephemerides, O-C, timing-variation search, predictions, UTC dates and the
// transit-time likelihood term, each against a reference outside the project.
#include <doctest/doctest.h>
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <fstream>
#include <nlohmann/json.hpp>
#include <random>
#include <sstream>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/ephemeris.h"
#include "apsides/error.h"
#include "apsides/keplerian_model.h"
#include "apsides/simulate.h"
#include "test_support.h"

using namespace apsides;

namespace {

TransitData make_transits(double reference_bjd, const std::vector<long long>& epochs, const std::vector<double>& t,
                          const std::vector<double>& sigma) {
  TransitData d;
  d.reference_epoch_bjd = reference_bjd;
  d.epoch = epochs;
  d.time_days = t;
  d.uncertainty_days = sigma;
  for (std::size_t i = 0; i < epochs.size(); ++i) {
    d.planet.push_back("");
    d.origin.push_back(fmt::format("test:{}", i + 1));
  }
  return d;
}

// Parses "x y z ..." floats printed by a Python snippet.
std::vector<double> parse_numbers(const std::string& text) {
  std::istringstream in(text);
  std::vector<double> v;
  double x;
  while (in >> x) v.push_back(x);
  return v;
}

std::string py_list(const std::vector<double>& v) {
  std::string s = "[";
  for (double x : v) s += fmt::format("{:.17g},", x);
  return s + "]";
}

// The demo system's files and truth.
std::string demo(const std::string& name) { return test::source_dir() + "/datasets_synthetic/demo/" + name; }

nlohmann::json demo_truth() {
  std::ifstream in(demo("truth.json"));
  return nlohmann::json::parse(in);
}

// The transits of one planet in epoch order, the first `keep` of them.
TransitData first_transits(const TransitData& all, std::size_t keep) {
  std::vector<std::size_t> idx(all.size());
  for (std::size_t i = 0; i < idx.size(); ++i) idx[i] = i;
  std::sort(idx.begin(), idx.end(), [&](std::size_t a, std::size_t b) { return all.epoch[a] < all.epoch[b]; });
  TransitData d;
  d.reference_epoch_bjd = all.reference_epoch_bjd;
  for (std::size_t k = 0; k < std::min(keep, idx.size()); ++k) {
    const std::size_t i = idx[k];
    d.epoch.push_back(all.epoch[i]);
    d.time_days.push_back(all.time_days[i]);
    d.uncertainty_days.push_back(all.uncertainty_days[i]);
    d.planet.push_back(all.planet[i]);
    d.origin.push_back(all.origin[i]);
  }
  return d;
}

}  // namespace

TEST_SUITE("ephemeris") {

TEST_CASE("ephemeris: reproduces the worked linear example of CHECKS.md section 9") {
  // CHECKS.md section 9 [numpy.polyfit]: n = 0,1,2,3,5,8,13, T = 2455000 + 3.5 n + dev,
  // sigma = 5e-4 d -> T0 = 2455000.00006182, P = 3.49999273, sigma_T0 = 2.780e-4,
  // sigma_P = 4.459e-5, cov = -9.091e-9.
  const std::vector<long long> n{0, 1, 2, 3, 5, 8, 13};
  const std::vector<double> dev{4, -3, 1, 0, -2, 3, -1};
  std::vector<double> t, s;
  for (std::size_t i = 0; i < n.size(); ++i) {
    t.push_back(3.5 * static_cast<double>(n[i]) + dev[i] * 1e-4);
    s.push_back(5e-4);
  }
  const auto r = fit_ephemeris(make_transits(2455000.0, n, t, s));
  REQUIRE(r.termination == "converged");
  // Values quoted to their printed digits.
  CHECK(r.t0_days.value == doctest::Approx(6.182e-5).epsilon(1e-3));
  CHECK(std::fabs(r.period_days.value - 3.49999273) < 5e-9);
  CHECK(r.t0_days.err == doctest::Approx(2.780e-4).epsilon(2e-4));
  CHECK(r.period_days.err == doctest::Approx(4.459e-5).epsilon(2e-4));
  CHECK(r.t0_period_covariance == doctest::Approx(-9.091e-9).epsilon(2e-4));
  // Full BJD to 1e-9 relative.
  CHECK(std::fabs((r.reference_epoch_bjd + r.t0_days.value) - 2455000.00006182) / 2455000.0 < 1e-9);
  // The reference epoch (weighted mean epoch 32/7 -> 5) has a small T-P correlation.
  CHECK(r.n_ref == 5);
  CHECK(std::fabs(r.t_ref_period_correlation) < 0.15);
  // To full precision against numpy.polyfit itself (weighted, unscaled covariance).
  const auto py = test::run_python(fmt::format(
      "import numpy as np\n"
      "n = np.array([0,1,2,3,5,8,13.]); t = 3.5*n + np.array([4,-3,1,0,-2,3,-1])*1e-4\n"
      "c, cov = np.polyfit(n, t, 1, w=np.full(7, 1/5e-4), cov='unscaled')\n"
      "print('%.17g %.17g %.17g %.17g %.17g' % (c[1], c[0], cov[1,1], cov[0,0], cov[0,1]))\n"));
  const auto v = parse_numbers(py.output);
  REQUIRE(v.size() == 5);
  CHECK(r.t0_days.value == doctest::Approx(v[0]).epsilon(1e-9));
  CHECK(r.period_days.value == doctest::Approx(v[1]).epsilon(1e-9));
  CHECK(r.t0_days.err * r.t0_days.err == doctest::Approx(v[2]).epsilon(1e-9));
  CHECK(r.period_days.err * r.period_days.err == doctest::Approx(v[3]).epsilon(1e-9));
  CHECK(r.t0_period_covariance == doctest::Approx(v[4]).epsilon(1e-9));
  // chi2 by hand from the residuals.
  double chi2 = 0;
  for (std::size_t i = 0; i < n.size(); ++i) {
    const double res = t[i] - (r.t0_days.value + r.period_days.value * static_cast<double>(n[i]));
    chi2 += res * res / (s[i] * s[i]);
  }
  CHECK(r.linear.chi2 == doctest::Approx(chi2).epsilon(1e-9));
  CHECK(r.linear.dof == 5);
}

TEST_CASE("ephemeris: linear and quadratic fits agree with weighted numpy.polyfit on random data") {
  std::mt19937_64 rng(20261201);
  std::normal_distribution<double> gauss(0.0, 1.0);
  std::uniform_real_distribution<double> unif(2e-4, 2e-3);
  std::vector<long long> n;
  std::vector<double> t, s;
  for (long long e = -150; e <= 400; e += 1 + static_cast<long long>(rng() % 17)) {
    const double sig = unif(rng);
    n.push_back(e);
    s.push_back(sig);
    const double ed = static_cast<double>(e);
    t.push_back(0.3 + 2.7182818 * ed + 0.5 * 3e-8 * ed * ed + sig * gauss(rng));
  }
  const auto r = fit_ephemeris(make_transits(2459000.0, n, t, s), EphemerisOptions{.search_ttv = false});
  REQUIRE(r.termination == "converged");
  std::vector<double> m;
  for (long long e : n) m.push_back(static_cast<double>(e - r.n_ref));
  const auto py = test::run_python(fmt::format(
      "import numpy as np\n"
      "m = np.array({}); t = np.array({}); s = np.array({})\n"
      "c1, v1 = np.polyfit(m, t, 1, w=1/s, cov='unscaled')\n"
      "c2, v2 = np.polyfit(m, t, 2, w=1/s, cov='unscaled')\n"
      "print('%.17g %.17g %.17g %.17g %.17g' % (c1[1], c1[0], v1[1,1], v1[0,0], v1[0,1]))\n"
      "print('%.17g %.17g %.17g %.17g %.17g' % (c2[2], c2[1], 2*c2[0], 4*v2[0,0], v2[1,1]))\n",
      py_list(m), py_list(t), py_list(s)));
  const auto v = parse_numbers(py.output);
  REQUIRE(v.size() == 10);
  CHECK(r.t_ref_days.value == doctest::Approx(v[0]).epsilon(1e-9));
  CHECK(r.period_days.value == doctest::Approx(v[1]).epsilon(1e-9));
  CHECK(r.t_ref_days.err * r.t_ref_days.err == doctest::Approx(v[2]).epsilon(1e-9));
  CHECK(r.period_days.err * r.period_days.err == doctest::Approx(v[3]).epsilon(1e-9));
  CHECK(r.linear.covariance[0][1] == doctest::Approx(v[4]).epsilon(1e-7));
  CHECK(r.quadratic.coefficients[0] == doctest::Approx(v[5]).epsilon(1e-9));
  CHECK(r.quadratic.coefficients[1] == doctest::Approx(v[6]).epsilon(1e-9));
  CHECK(r.dp_dn_days.value == doctest::Approx(v[7]).epsilon(1e-7));
  CHECK(r.dp_dn_days.err * r.dp_dn_days.err == doctest::Approx(v[8]).epsilon(1e-9));
  CHECK(r.quadratic.covariance[1][1] == doctest::Approx(v[9]).epsilon(1e-9));
  // The injected dP/dn = 3e-8 d/orbit is recovered within 3 sigma.
  CHECK(std::fabs(r.dp_dn_days.value - 3e-8) < 3 * r.dp_dn_days.err);
  CHECK(r.delta_bic < 0);
}

TEST_CASE("ephemeris: scaling by sqrt(chi2/dof) multiplies the covariance only when chi2/dof > 1") {
  std::vector<long long> n{0, 1, 2, 3, 5, 8, 13};
  std::vector<double> t, s(7, 1e-4);
  const std::vector<double> dev{4, -3, 1, 0, -2, 3, -1};
  for (std::size_t i = 0; i < n.size(); ++i) t.push_back(3.5 * static_cast<double>(n[i]) + dev[i] * 1e-4);
  const auto plain = fit_ephemeris(make_transits(0.0, n, t, s), {.search_ttv = false});
  const auto scaled = fit_ephemeris(make_transits(0.0, n, t, s), {.scale_errors = true, .search_ttv = false});
  REQUIRE(plain.reduced_chi2 > 1.0);
  CHECK(scaled.errors_scaled);
  CHECK(scaled.period_days.err == doctest::Approx(plain.period_days.err * std::sqrt(plain.reduced_chi2)));
  CHECK(scaled.period_days.value == doctest::Approx(plain.period_days.value));
  // numpy.polyfit's scaled covariance differs (it divides by N - deg - 3); ours follows
  // the usual chi2/dof (common practice), so compare with the scaled-by-hand value only.
  std::vector<double> big(7, 1e-2);
  const auto small_chi2 = fit_ephemeris(make_transits(0.0, n, t, big), {.scale_errors = true, .search_ttv = false});
  CHECK_FALSE(small_chi2.errors_scaled);
}

TEST_CASE("ephemeris: super-period matches P'/(j |Delta|) of Lithwick, Xie & Wu 2012") {
  // CHECKS.md section 9: P = 10 d, j = 2, Delta = 0.01 -> P' = 10 * 1.01 * 2 = 20.2 d.
  // LXW 2012 eq. (5): P_super = P' / (j |Delta|) = 20.2 / 0.02 = 1010 d.
  CHECK(super_period_days(10.0, 20.2, 2) == doctest::Approx(1010.0).epsilon(1e-12));
  const auto rs = near_resonance_super_periods(10.0, 20.2);
  REQUIRE(rs.size() == 2);
  CHECK(rs[0].j == 2);
  CHECK(rs[0].delta == doctest::Approx(0.01).epsilon(1e-12));
  CHECK(rs[0].super_period_days == doctest::Approx(1010.0).epsilon(1e-12));
  CHECK(rs[0].super_period_epochs == doctest::Approx(101.0).epsilon(1e-12));
  // Inner companion (the transiting planet is the outer one), ratio 1.52, near 3:2.
  const double p_in = 7.5, p_out = 11.4;
  const auto rs2 = near_resonance_super_periods(p_out, p_in);
  REQUIRE(!rs2.empty());
  bool found3 = false;
  for (const auto& r : rs2) {
    if (r.j != 3) continue;
    found3 = true;
    const double delta = (p_out / p_in) * 2.0 / 3.0 - 1.0;
    CHECK(r.delta == doctest::Approx(delta));
    CHECK(r.super_period_days == doctest::Approx(p_out / (3.0 * std::fabs(delta))).epsilon(1e-10));
    CHECK(r.super_period_epochs == doctest::Approx(r.super_period_days / p_out));
  }
  CHECK(found3);
}

TEST_CASE("ephemeris: recovers an injected sinusoidal timing variation made by simulate()") {
  Scenario sc;
  sc.seed = 99;
  sc.start_bjd = 2459000.5;
  sc.span_days = 1500.0;
  sc.instruments.push_back(SimInstrument{.name = "north", .n_points = 10});
  sc.planets.push_back(SimPlanet{.period_d = 5.3, .K_ms = 20.0, .t_conj_bjd = 2459001.1, .transiting = true});
  sc.transits = SimTransits{.planet = "b", .n_transits = 70, .sigma_d = 0.0004, .ttv_amplitude_d = 0.0025,
                            .ttv_period_epochs = 37.0, .ttv_phase_deg = 40.0, .enabled = true};
  const SimulatedData sim = simulate(sc);
  const std::string dir = test::temp_dir("ephemeris-ttv");
  const TransitData data = read_transit_file(test::write_text(dir, "times.csv", sim.transit_csv()));
  EphemerisOptions opt;
  opt.companion_period_days = 5.3 * 2.0 * (1.0 + 1.0 / 37.0 / 2.0);  // a 2:1 companion with that super-period
  const auto r = fit_ephemeris(data, opt);
  REQUIRE(r.ttv.fitted);
  CHECK(r.ttv.fap < 1e-6);
  CHECK(std::fabs(r.ttv.period_epochs.value - 37.0) < 2.0 * r.ttv.period_epochs.err);
  CHECK(std::fabs(r.ttv.period_days.value - 37.0 * 5.3) < 2.0 * r.ttv.period_days.err);
  CHECK(std::fabs(r.ttv.amplitude_days.value - 0.0025) < 3.0 * r.ttv.amplitude_days.err);
  CHECK(r.ttv.delta_bic < -10.0);
  // The expected super-period for that companion: P'/(2 Delta) with Delta = 1/74.
  REQUIRE(!r.ttv.resonances.empty());
  CHECK(r.ttv.resonances[0].j == 2);
  CHECK(r.ttv.resonances[0].super_period_days ==
        doctest::Approx(super_period_days(r.period_days.value, opt.companion_period_days, 2)));
  // No timing variation injected: nothing significant.
  sc.transits.ttv_amplitude_d = 0.0;
  const SimulatedData quiet = simulate(sc);
  const auto r0 = fit_ephemeris(read_transit_file(test::write_text(dir, "quiet.csv", quiet.transit_csv())));
  REQUIRE(r0.ttv.searched);
  CHECK(r0.ttv.fap > 0.01);
}

TEST_CASE("ephemeris: prediction uncertainties match a Monte Carlo of refits") {
  // Perturb the times with their stated errors, refit, and compare the scatter of the
  // predicted times with the covariance-propagated sigma.
  std::mt19937_64 rng(7);
  std::normal_distribution<double> gauss(0.0, 1.0);
  std::vector<long long> n;
  std::vector<double> t0, s;
  for (long long e = 0; e < 120; e += 1 + static_cast<long long>(rng() % 9)) {
    n.push_back(e);
    s.push_back(3e-4 + 1e-4 * static_cast<double>(e % 4));
    t0.push_back(1.2 + 4.05 * static_cast<double>(e));
  }
  EphemerisOptions opt;
  opt.search_ttv = false;
  opt.n_next = 3;
  opt.from_bjd = 2459000.0 + 1.2 + 4.05 * 400.5;  // epochs 401, 402, 403
  opt.prediction_model = EphemerisModel::kLinear;
  const auto base = fit_ephemeris(make_transits(2459000.0, n, t0, s), opt);
  REQUIRE(base.predictions.size() == 3);
  CHECK(base.predictions[0].epoch == 401);
  EphemerisOptions quad = opt;
  quad.prediction_model = EphemerisModel::kQuadratic;
  const auto base_q = fit_ephemeris(make_transits(2459000.0, n, t0, s), quad);
  const int trials = 2000;
  double sum = 0, sum2 = 0, sumq = 0, sumq2 = 0;
  for (int k = 0; k < trials; ++k) {
    std::vector<double> t = t0;
    for (std::size_t i = 0; i < t.size(); ++i) t[i] += s[i] * gauss(rng);
    const auto data = make_transits(2459000.0, n, t, s);
    const auto r = fit_ephemeris(data, opt);
    const double d = r.predictions[2].t_days - base.predictions[2].t_days;
    sum += d;
    sum2 += d * d;
    const auto rq = fit_ephemeris(data, quad);
    const double dq = rq.predictions[2].t_days - base_q.predictions[2].t_days;
    sumq += dq;
    sumq2 += dq * dq;
  }
  const double sd = std::sqrt(sum2 / trials - (sum / trials) * (sum / trials));
  const double sdq = std::sqrt(sumq2 / trials - (sumq / trials) * (sumq / trials));
  // 2000 trials: the sample sd has a relative error of ~1.6 %; allow 5 %.
  CHECK(sd == doctest::Approx(base.predictions[2].err_days).epsilon(0.05));
  CHECK(sdq == doctest::Approx(base_q.predictions[2].err_days).epsilon(0.05));
  CHECK(base_q.predictions[2].err_days > 2.0 * base.predictions[2].err_days);
}

TEST_CASE("ephemeris: the WASP-12b times of Wong et al. 2022 show the published orbital decay") {
  // Wong et al. 2022, AJ 163, 175, eq. (8c): dP/dE = (-1.031 +/- 0.033) x 1e-9 d/orbit.
  // The file is read as published: CRLF line ends, comment block, header, O-C column.
  const TransitData data = read_transit_file(test::real_data("wasp12b_transits_wong2022.txt"));
  REQUIRE(data.size() > 100);
  CHECK(data.ignored_columns.size() == 1);
  const auto r = fit_ephemeris(data);
  REQUIRE(r.termination == "converged");
  CHECK(std::fabs(r.dp_dn_days.value - (-1.031e-9)) < 0.033e-9);
  CHECK(r.dp_dn_days.err == doctest::Approx(0.033e-9).epsilon(0.25));
  CHECK(r.delta_bic < 0.0);
  CHECK(r.delta_chi2 > 100.0);
  // The period is WASP-12b's ~1.0914 d.
  CHECK(r.period_days.value == doctest::Approx(1.09142).epsilon(1e-5));
}

TEST_CASE("ephemeris: TRAPPIST-1 f, last 5 of 33 times held out, lies within 3 sigma of every prediction") {
  // Agol et al. 2021, PSJ 2, 1: 33 mid-transit times of TRAPPIST-1 f, O-C up to ~45 min
  // from the interactions with e and g. Fit the first 28, predict the other 5 (epochs 96,
  // 103, 156, 157, 159: up to 64 orbits ahead).
  const TransitData all = read_transit_file(test::real_data("trappist1_transits_agol2021.csv")).for_planet("f");
  REQUIRE(all.size() == 33);
  const TransitData train = first_transits(all, 28);
  REQUIRE(train.epoch.back() == 95);
  EphemerisOptions opt;
  opt.n_next = 64;  // epochs 96 ... 159
  const auto r = fit_ephemeris(train, opt);
  REQUIRE(r.termination == "converged");
  // The data choose the timing-variation model (the rule of ephemeris.h).
  CHECK(r.prediction_model == EphemerisModel::kSinusoid);
  CHECK(r.prediction.chosen_automatically);
  CHECK(r.prediction.excess_scatter_days > 0.0);
  REQUIRE(r.predictions.size() == 64);
  const TransitData held = first_transits(all, 33);
  int checked = 0;
  for (std::size_t i = 28; i < 33; ++i) {
    const long long n = held.epoch[i];
    const auto it = std::find_if(r.predictions.begin(), r.predictions.end(), [&](const auto& p) { return p.epoch == n; });
    REQUIRE(it != r.predictions.end());
    const double observed = held.time_days[i];
    const double z = (observed - it->t_days) / it->err_days;
    // The linear ephemeris' own covariance (what the table printed before): far too narrow.
    const double lin_t = r.linear.time_at(static_cast<double>(n), r.n_ref);
    const double lin_sigma = r.linear.sigma_at(static_cast<double>(n), r.n_ref);
    const double z_lin = (observed - lin_t) / lin_sigma;
    CAPTURE(n);
    CAPTURE(z);
    CAPTURE(z_lin);
    CHECK(std::fabs(z) < 3.0);
    CHECK(std::fabs(z_lin) > 3.0);
    ++checked;
  }
  CHECK(checked == 5);
  // No period change is claimed: the quadratic's curvature is part of the variation.
  CHECK(r.delta_bic < 0.0);
  CHECK(r.delta_bic_vs_sinusoid > 0.0);
  CHECK_FALSE(r.period_change_favoured);
  CHECK(r.FullReport().find("period change favoured") == std::string::npos);
}

TEST_CASE("ephemeris: the predictive refit of the TRAPPIST-1 f sinusoid agrees with scipy") {
  // Outside reference: scipy.optimize.least_squares on the sinusoid model with every
  // variance sigma_i^2 + s^2, s from brentq on chi2(s) = dof, sigma_pred from the Jacobian.
  const TransitData all = read_transit_file(test::real_data("trappist1_transits_agol2021.csv")).for_planet("f");
  const TransitData train = first_transits(all, 28);
  EphemerisOptions opt;
  opt.n_next = 64;
  const auto r = fit_ephemeris(train, opt);
  REQUIRE(r.prediction_model == EphemerisModel::kSinusoid);
  std::vector<double> m, t, s;
  for (std::size_t i = 0; i < train.size(); ++i) {
    m.push_back(static_cast<double>(train.epoch[i] - r.n_ref));
    t.push_back(train.time_days[i]);
    s.push_back(train.uncertainty_days[i]);
  }
  const double nu0 = r.ttv.nu_per_epoch;
  const auto py = test::run_python(fmt::format(
      "import numpy as np\n"
      "from scipy.optimize import least_squares, brentq\n"
      "m = np.array({}); t = np.array({}); s = np.array({})\n"
      "def model(p, x): return p[0] + p[1]*x + p[3]*np.sin(2*np.pi*p[2]*x) + p[4]*np.cos(2*np.pi*p[2]*x)\n"
      "p0 = np.array([{:.17g}, {:.17g}, {:.17g}, {:.17g}, {:.17g}])\n"
      "def fit(j):\n"
      "    se = np.sqrt(s**2 + j**2)\n"
      "    return least_squares(lambda p: (t - model(p, m)) / se, p0, x_scale='jac', xtol=1e-15, ftol=1e-15, gtol=1e-15)\n"
      "dof = len(m) - 5\n"
      "j = brentq(lambda j: np.sum(fit(j).fun**2) - dof, 1e-7, 0.05, xtol=1e-12)\n"
      "f = fit(j); cov = np.linalg.inv(f.jac.T @ f.jac)\n"
      "x = 159 - {}\n"
      "g = np.array([1, x, 2*np.pi*x*(f.x[3]*np.cos(2*np.pi*f.x[2]*x) - f.x[4]*np.sin(2*np.pi*f.x[2]*x)),\n"
      "              np.sin(2*np.pi*f.x[2]*x), np.cos(2*np.pi*f.x[2]*x)])\n"
      "print('%.12g %.12g %.12g' % (j, model(f.x, x), np.sqrt(g @ cov @ g + j**2)))\n",
      py_list(m), py_list(t), py_list(s), r.ttv.t_ref_days, r.ttv.period_fit_days, nu0, r.ttv.a_days, r.ttv.b_days,
      r.n_ref));
  const auto v = parse_numbers(py.output);
  REQUIRE_MESSAGE(v.size() == 3, py.output);
  const auto it = std::find_if(r.predictions.begin(), r.predictions.end(), [](const auto& p) { return p.epoch == 159; });
  REQUIRE(it != r.predictions.end());
  CHECK(r.prediction.excess_scatter_days == doctest::Approx(v[0]).epsilon(1e-4));
  CHECK(std::fabs(it->t_days - v[1]) < 1e-3 * it->err_days);
  CHECK(it->err_days == doctest::Approx(v[2]).epsilon(1e-3));
  CHECK(r.prediction.refit_chi2 == doctest::Approx(r.prediction.refit_dof).epsilon(1e-6));
}

TEST_CASE("ephemeris: the excess scatter of a linear ephemeris matches numpy, and enters every sigma") {
  // Linear data with 4x more scatter than stated: s from chi2(s) = dof (numpy weighted
  // polyfit inside scipy brentq), sigma_pred = sqrt(x^T C x + s^2).
  std::mt19937_64 rng(11);
  std::normal_distribution<double> gauss(0.0, 1.0);
  std::vector<long long> n;
  std::vector<double> t, s;
  for (long long e = 0; e < 60; e += 1 + static_cast<long long>(rng() % 4)) {
    n.push_back(e);
    s.push_back(2e-4 + 1e-4 * static_cast<double>(e % 3));
    t.push_back(0.7 + 3.3 * static_cast<double>(e) + 1e-3 * gauss(rng));
  }
  EphemerisOptions opt;
  opt.search_ttv = false;
  opt.n_next = 1;
  const auto r = fit_ephemeris(make_transits(2459000.0, n, t, s), opt);
  REQUIRE(r.prediction_model == EphemerisModel::kLinear);
  REQUIRE(r.predictions.size() == 1);
  const double x = static_cast<double>(r.predictions[0].epoch - r.n_ref);
  std::vector<double> m;
  for (long long e : n) m.push_back(static_cast<double>(e - r.n_ref));
  const auto py = test::run_python(fmt::format(
      "import numpy as np\n"
      "from scipy.optimize import brentq\n"
      "m = np.array({}); t = np.array({}); s = np.array({})\n"
      "def fit(j):\n"
      "    w = 1/np.sqrt(s**2 + j**2)\n"
      "    c, cov = np.polyfit(m, t, 1, w=w, cov='unscaled')\n"
      "    return c, cov, np.sum(((t - np.polyval(c, m))*w)**2)\n"
      "j = brentq(lambda j: fit(j)[2] - (len(m) - 2), 1e-9, 0.1, xtol=1e-14)\n"
      "c, cov, _ = fit(j); g = np.array([{}, 1.0])\n"
      "print('%.12g %.12g %.12g' % (j, np.polyval(c, {}), np.sqrt(g @ cov @ g + j**2)))\n",
      py_list(m), py_list(t), py_list(s), x, x));
  const auto v = parse_numbers(py.output);
  REQUIRE_MESSAGE(v.size() == 3, py.output);
  CHECK(r.prediction.excess_scatter_days == doctest::Approx(v[0]).epsilon(1e-6));
  CHECK(r.predictions[0].t_days == doctest::Approx(v[1]).epsilon(1e-12));
  CHECK(r.predictions[0].err_days == doctest::Approx(v[2]).epsilon(1e-6));
  // The scatter dominates: the covariance-only sigma of the mean ephemeris is far smaller.
  CHECK(r.predictions[0].err_days > 3.0 * r.linear.sigma_at(static_cast<double>(r.predictions[0].epoch), r.n_ref));
}

TEST_CASE("ephemeris: the BIC rule picks linear, quadratic or sinusoid as the data require") {
  std::mt19937_64 rng(5);
  std::normal_distribution<double> gauss(0.0, 1.0);
  auto make = [&](double curvature, double ttv_amp) {
    std::vector<long long> n;
    std::vector<double> t, s;
    for (long long e = 0; e < 300; e += 1 + static_cast<long long>(rng() % 5)) {
      const double x = static_cast<double>(e);
      n.push_back(e);
      s.push_back(5e-4);
      t.push_back(2.0 + 4.4 * x + 0.5 * curvature * x * x + ttv_amp * std::sin(2 * M_PI * x / 41.0 + 0.3) +
                  5e-4 * gauss(rng));
    }
    return fit_ephemeris(make_transits(2459000.0, n, t, s));
  };
  const auto lin = make(0.0, 0.0);
  CHECK(lin.prediction_model == EphemerisModel::kLinear);
  CHECK(lin.prediction.excess_scatter_days < 2e-4);
  const auto quad = make(2e-7, 0.0);
  CHECK(quad.prediction_model == EphemerisModel::kQuadratic);
  CHECK(quad.period_change_favoured);
  const auto sine = make(0.0, 4e-3);
  CHECK(sine.prediction_model == EphemerisModel::kSinusoid);
  CHECK_FALSE(sine.period_change_favoured);
  // Asking for a model overrides the rule, and the report says which one the rule prefers.
  EphemerisOptions forced;
  forced.prediction_model = EphemerisModel::kLinear;
  std::vector<long long> n;
  std::vector<double> t, s;
  for (long long e = 0; e < 300; e += 3) {
    n.push_back(e);
    s.push_back(5e-4);
    t.push_back(2.0 + 4.4 * static_cast<double>(e) + 4e-3 * std::sin(2 * M_PI * static_cast<double>(e) / 41.0));
  }
  const auto asked = fit_ephemeris(make_transits(2459000.0, n, t, s), forced);
  CHECK(asked.prediction_model == EphemerisModel::kLinear);
  CHECK_FALSE(asked.prediction.chosen_automatically);
  // With the variation unmodelled, the linear predictions carry it as excess scatter
  // (a sinusoid of amplitude A has rms A / sqrt 2).
  CHECK(asked.prediction.excess_scatter_days == doctest::Approx(4e-3 / std::sqrt(2.0)).epsilon(0.1));
  CHECK(asked.FullReport().find("the sinusoid ephemeris is better supported") != std::string::npos);
}

TEST_CASE("ephemeris: WASP-12b reports its decay with the timing-variation search on, and every note once") {
  // Wong et al. 2022, AJ 163, 175: dP/dE = (-1.031 +/- 0.033) x 1e-9 d/orbit. A long-period
  // sinusoid can mimic the curvature; the quadratic must still beat it.
  const TransitData data = read_transit_file(test::real_data("wasp12b_transits_wong2022.txt"));
  const auto r = fit_ephemeris(data);
  REQUIRE(r.ttv.fitted);
  CHECK(r.delta_bic < -10.0);
  CHECK(r.delta_bic_vs_sinusoid < 0.0);
  CHECK(r.delta_bic_vs_best_other < 0.0);
  CHECK(r.period_change_favoured);
  CHECK(r.prediction_model == EphemerisModel::kQuadratic);
  CHECK(r.FullReport().find("(period change favoured)") != std::string::npos);
  for (std::size_t i = 0; i < r.notes.size(); ++i)
    for (std::size_t j = i + 1; j < r.notes.size(); ++j) CHECK(r.notes[i] != r.notes[j]);
}

TEST_CASE("ephemeris: recovers the demo planet's period and T0 within 2 sigma and predicts 10 transits") {
  const auto truth = demo_truth();
  const double p_true = truth["planets"][0]["period_d"];
  const double t_true = truth["planets"][0]["t_conj_bjd"];
  const TransitData data = read_transit_file(demo("transits.csv"));
  const auto r = fit_ephemeris(data);
  REQUIRE(r.termination == "converged");
  CHECK(std::fabs(r.period_days.value - p_true) < 2 * r.period_days.err);
  CHECK(std::fabs(r.reference_epoch_bjd + r.t0_days.value - t_true) < 2 * r.t0_days.err);
  REQUIRE(r.predictions.size() == 10);
  CHECK(r.predictions[0].epoch == data.epoch.back() + 1);
  for (std::size_t i = 0; i < r.predictions.size(); ++i) {
    const auto& p = r.predictions[i];
    CHECK(std::fabs(p.t_mid_bjd - (t_true + static_cast<double>(p.epoch) * p_true)) < 3 * p.err_days);
    if (i > 0) CHECK(p.err_days > r.predictions[i - 1].err_days);
  }
  CHECK(r.n_outliers == 0);
  CHECK(r.ttv.fap > 0.01);  // no timing variation in the demo
}

TEST_CASE("ephemeris: flags outliers but keeps them unless asked to drop them") {
  std::vector<long long> n;
  std::vector<double> t, s;
  std::mt19937_64 rng(3);
  std::normal_distribution<double> gauss(0.0, 1.0);
  for (long long e = 0; e < 30; ++e) {
    n.push_back(e);
    s.push_back(5e-4);
    t.push_back(2.0 * static_cast<double>(e) + 5e-4 * gauss(rng) + (e == 17 ? 0.01 : 0.0));
  }
  const auto kept = fit_ephemeris(make_transits(0.0, n, t, s), {.search_ttv = false});
  CHECK(kept.n_outliers == 1);
  CHECK(kept.n_transits == 30);
  CHECK(kept.o_minus_c[17].outlier);
  CHECK(kept.o_minus_c[17].used);
  const auto dropped = fit_ephemeris(make_transits(0.0, n, t, s), {.drop_outliers = true, .search_ttv = false});
  CHECK(dropped.n_transits == 29);
  CHECK_FALSE(dropped.o_minus_c[17].used);
  CHECK(dropped.o_minus_c[17].o_minus_c_days == doctest::Approx(0.01).epsilon(0.2));
  CHECK(dropped.linear.chi2 < kept.linear.chi2);
}

TEST_CASE("ephemeris: UTC dates agree with astropy's TDB -> UTC conversion") {
  const std::vector<double> bjd{2454515.52496, 2457023.5, 2457754.4995, 2459414.1420008, 2461000.123456};
  std::string list = "[";
  for (double b : bjd) list += fmt::format("'{:.7f}',", b);
  list += "]";
  const auto py = test::run_python(
      "from astropy.time import Time\n"
      "import numpy as np\n"
      "for s in " + list + ":\n"
      "    print(Time(float(s), format='jd', scale='tdb').utc.iso)\n");
  std::istringstream in(py.output);
  for (double b : bjd) {
    std::string date, hms;
    in >> date >> hms;
    const std::string ours = bjd_tdb_to_utc_string(static_cast<long double>(b));
    INFO("BJD ", b, " astropy ", date, " ", hms, " ours ", ours);
    CHECK(ours.substr(0, 10) == date);
    const auto secs = [](const std::string& h) {
      return std::stod(h.substr(0, 2)) * 3600 + std::stod(h.substr(3, 2)) * 60 + std::stod(h.substr(6));
    };
    CHECK(std::fabs(secs(ours.substr(11)) - secs(hms)) <= 0.51);
  }
  CHECK(tai_minus_utc_seconds(2457754.5) == 37.0);  // 2017-01-01, IERS Bulletin C
  CHECK(tai_minus_utc_seconds(2457754.4) == 36.0);
  CHECK(format_bjd(2459414.0, 0.1420008, 7) == "2459414.1420008");
}

TEST_CASE("ephemeris: the transit-time likelihood is the Gaussian of T_conj + n P, any conjunction") {
  // Transit frame reference 2459000, RV frame reference 2458990: shift of 10 d.
  const std::vector<long long> n{3, 4, 10};
  const std::vector<double> t{1.0 + 3 * 2.5 + 1e-3, 1.0 + 4 * 2.5 - 2e-3, 1.0 + 10 * 2.5};
  const std::vector<double> s{1e-3, 2e-3, 5e-4};
  const TransitTimingLikelihood like(make_transits(2459000.0, n, t, s), 2458990.0);
  CHECK(like.size() == 3);
  // In the RV frame epoch 0 is at 11.0 d; residuals are the injected 1e-3, -2e-3, 0.
  const double jit = 1e-3;
  double expected = 0;
  const std::vector<double> res{1e-3, -2e-3, 0.0};
  for (std::size_t i = 0; i < 3; ++i) {
    const double v = s[i] * s[i] + jit * jit;
    expected += -0.5 * (res[i] * res[i] / v + std::log(2 * M_PI * v));
  }
  CHECK(like.log_likelihood(2.5, 11.0, jit) == doctest::Approx(expected).epsilon(1e-12));
  // t_conj may be any conjunction.
  CHECK(like.log_likelihood(2.5, 11.0 + 7 * 2.5, jit) == doctest::Approx(expected).epsilon(1e-10));
  CHECK(like.log_likelihood(2.5, 11.0 - 40 * 2.5, jit) == doctest::Approx(expected).epsilon(1e-10));
  CHECK(like.chi_square(2.5, 11.0, 0.0) == doctest::Approx(1.0 + 1.0 + 0.0));
  CHECK(std::isinf(like.log_likelihood(-1.0, 11.0)));
  CHECK(std::isinf(like.log_likelihood(2.5, 11.0, -1e-3)));
}

TEST_CASE("ephemeris: adding the transit times to the demo RV likelihood narrows the period") {
  // Demo system: RVs of three instruments (two planets) and planet b's transit times.
  // On a grid in (P_b, T_conj_b), all other parameters at truth, compare the marginal
  // posterior of P_b (flat priors) from the RVs alone and from RVs + transits.
  const auto truth = demo_truth();
  std::vector<VelocityFileOptions> vopts;
  std::vector<std::string> files;
  for (const auto& inst : truth["instruments"]) {
    const std::string name = inst["name"];
    files.push_back(demo("velocities_" + name + ".csv"));
    vopts.push_back({.instrument = name, .unit = parse_velocity_unit(inst["velocity_unit"], "test")});
  }
  const VelocityData rv = load_velocities(files, vopts);
  ModelLayout layout{.n_planets = 2, .n_instruments = static_cast<int>(rv.n_instruments())};
  const KeplerianModel model(rv, layout);
  std::vector<double> theta(layout.n_params(), 0.0);
  for (int j = 0; j < 2; ++j) {
    const auto& p = truth["planets"][static_cast<std::size_t>(j)];
    put_planet(theta, layout, j,
               Planet::from_elements(p["period_d"], p["K_ms"], p["ecc"], double(p["omega_deg"]) * M_PI / 180.0,
                                     double(p["t_conj_bjd"]) - rv.reference_epoch_bjd));
  }
  for (std::size_t i = 0; i < rv.n_instruments(); ++i) {
    for (const auto& inst : truth["instruments"]) {
      if (inst["name"] != rv.instrument_names[i]) continue;
      theta[layout.offset_index(static_cast<int>(i))] = inst["offset_ms"];
      theta[layout.jitter_index(static_cast<int>(i))] = inst["jitter_ms"];
    }
  }
  const TransitData tr = read_transit_file(demo("transits.csv"));
  const TransitTimingLikelihood transit_like(tr, rv.reference_epoch_bjd);
  const auto eph = fit_ephemeris(tr, {.search_ttv = false});
  const double p0 = truth["planets"][0]["period_d"];
  const double tc0 = double(truth["planets"][0]["t_conj_bjd"]) - rv.reference_epoch_bjd;

  // The conjunction nearest the middle of the transits (epoch n_ref) decorrelates P and
  // T_conj; both likelihoods accept any conjunction as t_conj.
  const double tref0 = tc0 + static_cast<double>(eph.n_ref) * p0;

  // Marginal mean and sd of P on a 2-D grid centred at (pc, tc) with half-widths (wp, wt).
  struct Marginal { double mean, sd, t_sd; };
  auto marginal = [&](int which, double pc, double wp, double tc, double wt) {
    const int np = 81, nt = 61;
    std::vector<double> lp(np * nt);
    double best = -INFINITY;
    for (int a = 0; a < np; ++a) {
      for (int b = 0; b < nt; ++b) {
        std::vector<double> th = theta;
        const double p = pc - wp + 2 * wp * a / (np - 1);
        const double t = tc - wt + 2 * wt * b / (nt - 1);
        th[layout.planet_index(0)] = p;
        th[layout.planet_index(0) + 4] = t;
        // which: 0 RVs, 1 transits, 2 both.
        double l = which == 1 ? 0.0 : model.log_likelihood(th);
        if (which > 0) l += transit_like.log_likelihood(p, t);
        lp[static_cast<std::size_t>(a * nt + b)] = l;
        best = std::max(best, l);
      }
    }
    double w = 0, m1 = 0, m2 = 0, t1 = 0, t2 = 0;
    for (int a = 0; a < np; ++a) {
      const double p = pc - wp + 2 * wp * a / (np - 1);
      for (int b = 0; b < nt; ++b) {
        const double t = tc - wt + 2 * wt * b / (nt - 1);
        const double e = std::exp(lp[static_cast<std::size_t>(a * nt + b)] - best);
        // Moments about the grid centre: about zero they would cancel catastrophically.
        w += e;
        m1 += e * (p - pc);
        m2 += e * (p - pc) * (p - pc);
        t1 += e * (t - tc);
        t2 += e * (t - tc) * (t - tc);
      }
    }
    m1 /= w;
    t1 /= w;
    return Marginal{pc + m1, std::sqrt(std::max(m2 / w - m1 * m1, 0.0)), std::sqrt(std::max(t2 / w - t1 * t1, 0.0))};
  };
  // Two passes each: a wide grid, then one of +/- 7 sd around the first result.
  const Marginal rv1 = marginal(0, p0, 4e-3, tref0, 0.25);
  const Marginal rv2 = marginal(0, rv1.mean, 7 * rv1.sd, tref0, 7 * rv1.t_sd);
  const double tref_eph = eph.t_ref_days.value + (tr.reference_epoch_bjd - rv.reference_epoch_bjd);
  const Marginal tt = marginal(1, eph.period_days.value, 7 * eph.period_days.err, tref_eph, 7 * eph.t_ref_days.err);
  const Marginal j1 = marginal(2, eph.period_days.value, 7 * eph.period_days.err, tref_eph, 7 * eph.t_ref_days.err);
  const double p_rv = rv2.mean, s_rv = rv2.sd, p_joint = j1.mean, s_joint = j1.sd;
  INFO("RV only: P = ", p_rv, " +/- ", s_rv, "; joint: ", p_joint, " +/- ", s_joint, "; ephemeris ",
       eph.period_days.value, " +/- ", eph.period_days.err, "; transits on the grid ", tt.mean, " +/- ", tt.sd);
  CHECK(s_joint < 0.1 * s_rv);
  CHECK(std::fabs(p_joint - eph.period_days.value) < 2 * eph.period_days.err);
  // Transits alone on the grid reproduce the ephemeris covariance; the RVs add little.
  CHECK(tt.sd == doctest::Approx(eph.period_days.err).epsilon(0.03));
  CHECK(s_joint <= 1.01 * tt.sd);
  CHECK(std::fabs(p_rv - p0) < 3 * s_rv);
}

TEST_CASE("ephemeris: rejects bad input with one clear message") {
  const std::string dir = test::temp_dir("ephemeris-bad");
  CHECK_THROWS_WITH_AS(read_transit_file(test::write_text(dir, "frac.csv", "0,2459000.1,0.001\n1.5,2459003.6,0.001\n")),
                       doctest::Contains("epoch is 1.5; it must be an integer"), InputError);
  CHECK_THROWS_WITH_AS(read_transit_file(test::write_text(dir, "rep.csv", "0,2459000.1,0.001\n0,2459003.6,0.001\n")),
                       doctest::Contains("epoch 0 repeats"), InputError);
  const auto one = make_transits(0.0, {3}, {1.0}, {1e-3});
  CHECK_THROWS_WITH_AS(fit_ephemeris(one), "test:1: 1 transit time; an ephemeris needs at least 2", InputError);
  const auto two = make_transits(0.0, {0, 1}, {1.0, 3.0}, {1e-3, 1e-3});
  CHECK_THROWS_WITH_AS(fit_ephemeris(two, {.outlier_sigma = -1}), "outlier_sigma = -1: must be > 0", InputError);
  CHECK_THROWS_WITH_AS(fit_ephemeris(two, {.prediction_model = EphemerisModel::kQuadratic}),
                       "prediction_model = quadratic: needs at least 3 transits", InputError);
  CHECK_THROWS_AS(parse_ephemeris_model("cubic", "--model"), InputError);
  EphemerisOptions bad_range;
  bad_range.from_bjd = 2459010.0;
  bad_range.to_bjd = 2459000.0;
  CHECK(bad_range.Validate().find("must be after") != std::string::npos);
  // Two transits: linear only, quadratic skipped with a note; still a result.
  const auto r = fit_ephemeris(two);
  CHECK(r.period_days.value == doctest::Approx(2.0));
  CHECK(r.quadratic.coefficients.empty());
}

TEST_CASE("ephemeris: the command writes the JSON keys of DESIGN.md and exits 2 on bad input") {
  const std::string dir = test::temp_dir("ephemeris-cli");
  const std::string json_path = dir + "/eph.json";
  const auto ok = test::run_command(fmt::format("{} ephemeris {} --quiet --json {}", test::apsides_binary(),
                                                demo("transits.csv"), json_path));
  REQUIRE(ok.status == 0);
  std::ifstream in(json_path);
  const auto j = nlohmann::json::parse(in);
  for (const char* key : {"t0_bjd", "period_d"}) {
    CHECK(j[key].contains("value"));
    CHECK(j[key].contains("err"));
  }
  CHECK(j.contains("chi2"));
  CHECK(j.contains("dof"));
  CHECK(j["o_minus_c"].size() == 24);
  CHECK(j["ttv"].contains("period_d"));
  CHECK(j["ttv"].contains("amplitude_d"));
  CHECK(j["ttv"].contains("fap"));
  CHECK(j["quadratic"]["dp_dn"].contains("value"));
  CHECK(j["quadratic"]["dp_dn"].contains("err"));
  CHECK(j["quadratic"].contains("delta_bic"));
  REQUIRE(j["predictions"].size() == 10);
  for (const char* key : {"epoch", "t_mid_bjd", "err_d"}) CHECK(j["predictions"][0].contains(key));
  // The JSON period agrees with the library's result.
  const auto r = fit_ephemeris(read_transit_file(demo("transits.csv")));
  CHECK(double(j["period_d"]["value"]) == r.period_days.value);

  const std::string bad = test::write_text(dir, "bad.csv", "0,2459000.1,0.001\n1,2459003.6,-0.001\n");
  const auto b = test::run_command(fmt::format("{} ephemeris {} --json {}/bad.json", test::apsides_binary(), bad, dir));
  CHECK(b.status == 2);
  CHECK(b.output.find("bad.csv:2: uncertainty is -0.001; it must be > 0") != std::string::npos);
  CHECK_FALSE(std::ifstream(dir + "/bad.json").good());
}

}  // TEST_SUITE
