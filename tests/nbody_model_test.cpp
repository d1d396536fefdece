// The N-body model in the composed posterior (include/apsides/nbody_model.h): the block,
// the signal shared by the velocity and transit-time terms, the project keys, the
// Lithwick-Xie-Wu super-period seeds and the MAP fit. The reference for the likelihood is
// the engine itself evaluated directly (checked against scipy's DOP853 in nbody_test.cpp)
// and the Gaussian formula written out here; for the fit, the system the data were made from.
#include <doctest/doctest.h>
#include <fmt/format.h>
#include <nlohmann/json.hpp>

#include <cmath>
#include <filesystem>
#include <sstream>
#include <random>
#include <string>
#include <vector>

#include "apsides/constants.h"
#include "apsides/error.h"
#include "apsides/nbody_model.h"
#include "apsides/orbit.h"
#include "apsides/project.h"
#include "apsides/stability_analysis.h"
#include "test_support.h"

using namespace apsides;

namespace {

constexpr double kMin = 1.0 / 1440.0;

// An invented pair near 3:2 on a Sun: b transits (P = 10 d), c does not (P = 15.2 d).
NbodySystem pair_truth() {
  NbodySystem s;
  s.star_mass_msun = 1.0;
  s.osculating_epoch_days = 0.0;
  s.planets = {NbodyPlanet::from_elements(3e-5, 10.0, 0.02, 0.4, 1.0),
               NbodyPlanet::from_elements(6e-5, 15.2, 0.03, 2.0, 6.0)};
  return s;
}

struct Synthetic {
  VelocityData v;
  TransitData tr;
  std::vector<long long> engine_epochs;  // of b
};

// Transit times of b (data epochs = engine epochs + 100, sigma 1 min) and, when
// `velocities`, 50 velocities (sigma 2 m/s, offset 12 m/s) over the same 800 days.
Synthetic make_synthetic(bool velocities, unsigned seed) {
  const NbodySystem truth = pair_truth();
  Synthetic s;
  std::mt19937_64 rng(seed);
  std::normal_distribution<double> g(0.0, 1.0);
  for (long long e = -2; e < 78; ++e) s.engine_epochs.push_back(e);
  std::vector<double> rv_t;
  if (velocities)
    for (int i = 0; i < 50; ++i) rv_t.push_back(-20.0 + 16.3 * i + 3.0 * std::sin(1.7 * i));
  const NbodyObservables obs = compute_observables(truth, rv_t, {s.engine_epochs, {}});
  REQUIRE(obs.ok());
  s.tr.reference_epoch_bjd = 2460000.0;
  for (std::size_t k = 0; k < s.engine_epochs.size(); ++k) {
    s.tr.epoch.push_back(s.engine_epochs[k] + 100);
    s.tr.time_days.push_back(obs.transit_times_days[0][k] + kMin * g(rng));
    s.tr.uncertainty_days.push_back(kMin);
    s.tr.planet.push_back("b");
    s.tr.origin.push_back(fmt::format("b.csv:{}", k + 2));
  }
  if (velocities) {
    s.v.reference_epoch_bjd = 2460000.0;
    s.v.instrument_names = {"south"};
    for (std::size_t i = 0; i < rv_t.size(); ++i) {
      s.v.time_days.push_back(rv_t[i]);
      s.v.velocity_m_s.push_back(obs.star_velocity_m_s[i] + 12.0 + 2.0 * g(rng));
      s.v.uncertainty_m_s.push_back(2.0);
      s.v.instrument.push_back(0);
      s.v.origin.push_back(fmt::format("rv.csv:{}", i + 2));
    }
  }
  return s;
}

std::vector<double> truth_theta(const NbodyPosterior& post, const NbodySystem& truth) {
  std::vector<double> th = post.start;
  for (std::size_t p = 0; p < truth.planets.size(); ++p) post.signal->planets()[p]->put(th, truth.planets[p]);
  return th;
}

}  // namespace

TEST_SUITE("nbody_model") {
  TEST_CASE("nbody_model: ln L of the composed posterior equals the engine's observables in the Gaussian formula") {
    const Synthetic s = make_synthetic(true, 3);
    NbodySettings st;
    st.n_planets = 2;
    NbodyProblem pb = nbody_problem(s.v, s.tr, 1.0, st);
    REQUIRE(pb.seeds.size() == 2);
    CHECK(pb.seeds[0].transiting);
    CHECK_FALSE(pb.seeds[1].transiting);
    CHECK(pb.seeds[0].period_days == doctest::Approx(10.0).epsilon(2e-3));  // linear ephemeris
    pb.seeds[1].period_days = 15.2;
    const NbodyPosterior post = make_nbody_posterior(pb);
    CHECK(post.model.layout().names().at(0) == "b.mass_ratio");
    CHECK(post.model.terms().size() == 2);  // velocities, transit times of b
    CHECK(post.signal->epoch_shift(0) == 100);
    std::vector<double> th = truth_theta(post, pair_truth());
    th[post.model.layout().find("south.offset_ms")] = 12.0;
    th[post.model.layout().find("south.jitter_ms")] = 0.5;
    // Direct: the engine at the truth, then the Gaussian sums written out.
    const NbodyObservables obs = compute_observables(pair_truth(), s.v.time_days, {s.engine_epochs, {}});
    REQUIRE(obs.ok());
    double lv = 0.0, lt = 0.0;
    for (std::size_t i = 0; i < s.v.size(); ++i) {
      const double var = 4.0 + 0.25, r = s.v.velocity_m_s[i] - obs.star_velocity_m_s[i] - 12.0;
      lv += -0.5 * (r * r / var + std::log(constants::kTwoPi * var));
    }
    for (std::size_t k = 0; k < s.tr.size(); ++k) {
      const double var = kMin * kMin, r = s.tr.time_days[k] - obs.transit_times_days[0][k];
      lt += -0.5 * (r * r / var + std::log(constants::kTwoPi * var));
    }
    CHECK(post.model.terms()[0]->log_likelihood(th) == doctest::Approx(lv).epsilon(1e-12));
    CHECK(post.model.terms()[1]->log_likelihood(th) == doctest::Approx(lt).epsilon(1e-9));
    CHECK(post.model.log_likelihood(th) == doctest::Approx(lv + lt).epsilon(1e-9));
    // The cache: a second evaluation at a different theta is not the first one's.
    std::vector<double> th2 = th;
    th2[post.model.layout().find("c.mass_ratio")] = 1e-5;
    CHECK(post.model.log_likelihood(th2) < post.model.log_likelihood(th) - 10.0);
    CHECK(post.model.log_likelihood(th) == doctest::Approx(lv + lt).epsilon(1e-9));
    // Profiling the offset moves it to the weighted mean residual (~12 m/s).
    std::vector<bool> lin(th.size(), false);
    lin[post.model.layout().find("south.offset_ms")] = true;
    std::vector<double> th3 = th;
    th3[post.model.layout().find("south.offset_ms")] = 0.0;
    const double lp = post.model.terms()[0]->log_likelihood_profiled(th3, lin);
    CHECK(lp >= lv - 1e-9);
    CHECK(th3[post.model.layout().find("south.offset_ms")] == doctest::Approx(12.0).epsilon(0.05));
    // Periods brought together: a far worse likelihood (or -inf), never a throw.
    std::vector<double> bad = th;
    bad[post.model.layout().find("c.period_d")] = 10.05;
    CHECK(post.model.log_likelihood(bad) < lv + lt - 1e3);  // a far worse (or impossible) model, no throw
  }

  TEST_CASE("nbody_model: a transit-timing-only system builds and evaluates without velocities") {
    const Synthetic s = make_synthetic(false, 4);
    NbodySettings st;
    st.n_planets = 2;
    NbodyProblem pb = nbody_problem(VelocityData{}, s.tr, 1.0, st);
    pb.seeds[1].period_days = 15.2;
    const NbodyPosterior post = make_nbody_posterior(pb);
    CHECK(post.model.terms().size() == 1);
    CHECK(post.model.velocities() == nullptr);
    const std::vector<double> th = truth_theta(post, pair_truth());
    const double l = post.model.log_likelihood(th);
    CHECK(std::isfinite(l));
    CHECK(std::isfinite(post.model.log_prior(th)));
    // chi-square at the truth ~ n (80 times, sigma known): within 5 sd of its mean.
    const double chi2 = -2.0 * l - 80.0 * std::log(constants::kTwoPi * kMin * kMin);
    CHECK(std::abs(chi2 - 80.0) < 5.0 * std::sqrt(160.0));
  }

  TEST_CASE("nbody_model: super-period candidates contain the perturber of Lithwick, Xie & Wu's formula") {
    // LXW 2012 (ApJ 761, 122), Eq. for the super-period: P_super = 1 / |j/P' - (j-1)/P|.
    // P = 10, P' = 20.2 near 2:1: P_super = 1/|2/20.2 - 1/10| = 1010 d.
    const double ps = 1.0 / std::abs(2.0 / 20.2 - 1.0 / 10.0);
    CHECK(ps == doctest::Approx(1010.0).epsilon(1e-12));
    const std::vector<double> c = super_period_perturber_periods(10.0, ps, 4);
    bool found = false;
    for (double p : c) found = found || std::abs(p - 20.2) < 1e-9;
    CHECK(found);
    // Inside: the same pair seen from the outer planet (P = 20.2) finds 10 d.
    found = false;
    for (double p : super_period_perturber_periods(20.2, ps, 4)) found = found || std::abs(p - 10.0) < 1e-9;
    CHECK(found);
    // The O-C scan finds the super-period of the engine's TTVs (P = 10, P' = 20.8:
    // 1/|2/20.8 - 1/10| = 260 d; mu = mu' = 3e-6, 45 transits over 450 d): within 10 %.
    NbodySystem sys;
    sys.planets = {NbodyPlanet::from_elements(3e-6, 10.0, 0.0, 0.0, 1.0),
                   NbodyPlanet::from_elements(3e-6, 20.8, 0.0, 0.0, 5.0)};
    std::vector<long long> ep;
    for (long long e = 0; e < 45; ++e) ep.push_back(e);
    const NbodyObservables obs = compute_observables(sys, {}, {ep, {}});
    REQUIRE(obs.ok());
    const std::vector<double> err(ep.size(), 1e-5);
    CHECK(ttv_period_days(ep, obs.transit_times_days[0], err, 10.0) == doctest::Approx(260.0).epsilon(0.1));
  }

  TEST_CASE("nbody_model: bad inputs give one-line input errors") {
    const Synthetic s = make_synthetic(false, 6);
    NbodySettings st;
    st.n_planets = 2;
    auto msg = [&](auto&& f) -> std::string {
      try {
        f();
      } catch (const InputError& e) {
        return e.what();
      }
      return "";
    };
    // Osculating epoch more than 10 years from the data.
    NbodySettings far = st;
    far.osculating_epoch_bjd = 2460000.0 + 800.0 + 3700.0;
    CHECK(msg([&] { nbody_problem(VelocityData{}, s.tr, 1.0, far); }).find("osculating_epoch") != std::string::npos);
    // A step above half the innermost period.
    NbodySettings big = st;
    big.step_days = 6.0;
    CHECK(msg([&] { nbody_problem(VelocityData{}, s.tr, 1.0, big); }).find("nbody.step_days = 6") != std::string::npos);
    // An epoch the orbit cannot reach as numbered (a time half a period off its ephemeris).
    TransitData wrong = s.tr;
    wrong.time_days[10] += 5.0;
    const std::string e1 = msg([&] { nbody_problem(VelocityData{}, wrong, 1.0, st); });
    CHECK(e1.find("b.csv:12: transit epoch 108 of b") == 0);
    // No star mass.
    CHECK(msg([&] { nbody_problem(VelocityData{}, s.tr, 0.0, st); }).find("star.mass_msun") != std::string::npos);
    // A negative mass in the priors.
    PriorSpec neg;
    neg.parameter = "c.mass_ratio";
    neg.prior = Prior::uniform(-1e-4, 1e-3);
    neg.origin = "p.toml:9";
    NbodyProblem pb = nbody_problem(VelocityData{}, s.tr, 1.0, st, {neg});
    pb.seeds[1].period_days = 15.2;
    const std::string e2 = msg([&] { make_nbody_posterior(pb); });
    CHECK(e2.find("p.toml:9: priors.c.mass_ratio") == 0);
    CHECK(e2.find("negative") != std::string::npos);
    for (const std::string& m : {e1, e2}) CHECK(m.find('\n') == std::string::npos);
  }

  TEST_CASE("nbody_model: project keys dynamics, osculating_epoch and [nbody] are read and checked") {
    const std::string dir = test::temp_dir("nbody_model_project");
    // (a project needs a [[velocities]] block: transit-only systems are built from data, nbody_problem)
    auto parse = [&](const std::string& text) { return parse_project("[[velocities]]\nfile = \"v.csv\"\n" + text, "p.toml", dir); };
    const Project p = parse("[model]\ndynamics = \"nbody\"\nosculating_epoch = 2460001.5\n[nbody]\nplanets = 3\n"
                            "step_fraction = 0.025\ncoplanar = false\n");
    CHECK(p.model.dynamics == Dynamics::kNbody);
    CHECK(p.nbody.osculating_epoch_bjd == 2460001.5);
    CHECK(p.nbody.n_planets == 3);
    CHECK(p.nbody.step_fraction == 0.025);
    CHECK_FALSE(p.nbody.coplanar);
    CHECK(parse("[star]\nmass_msun = 1\n").model.dynamics == Dynamics::kKeplerian);
    auto err = [&](const std::string& text) {
      try {
        parse(text);
      } catch (const InputError& e) {
        return std::string(e.what());
      }
      return std::string();
    };
    CHECK(err("[model]\ndynamics = \"orrery\"\n").find("p.toml:4: model.dynamics is 'orrery'") == 0);
    CHECK(err("[model]\ndynamics = \"nbody\"\nosculating_epoch = 9000\n").find("p.toml:5: model.osculating_epoch") == 0);
    CHECK(err("[model]\nosculating_epoch = 2460000.5\n").find("needs dynamics = \"nbody\"") != std::string::npos);
    CHECK(err("[nbody]\nplanets = 2\n").find("needs [model] dynamics") != std::string::npos);
    CHECK(err("[model]\ndynamics = \"nbody\"\n[nbody]\nstep_fraction = 0.9\n") ==
          "p.toml:6: nbody.step_fraction = 0.9: must be in (0, 0.5]");
    CHECK(err("[model]\ndynamics = \"nbody\"\n[nbody]\nstep = 0.1\n").find("step") != std::string::npos);
  }

  TEST_CASE("nbody_model: Keplerian draws become systems with scipy's m sin i; stability fractions, report and figure") {
    // Two planets (P, K, e) -> m sin i from the mass function solved by scipy's brentq
    // (independent of orbit.h), then stability of the systems.
    ModelLayout ml;
    ml.n_planets = 2;
    const ParameterLayout L = ParameterLayout::from(ml, {"north"});
    std::vector<double> th(L.n_params(), 0.0);
    L.planet(0).put(th, Planet::from_elements(12.0, 9.0, 0.1, 0.5, 3.0));
    L.planet(1).put(th, Planet::from_elements(30.0, 6.0, 0.05, 2.0, 7.0));
    std::vector<double> samples = th;
    std::vector<double> th2 = th;  // a second draw: c moved next to b (unstable by Hill)
    L.planet(1).put(th2, Planet::from_elements(12.6, 6.0, 0.05, 2.0, 7.0));
    samples.insert(samples.end(), th2.begin(), th2.end());
    const std::vector<NbodySystem> sys = systems_from_keplerian_draws(L, samples, 2, 0.8);
    REQUIRE(sys.size() == 2);
    const auto py = test::run_python(R"PY(
import numpy as np
from scipy.optimize import brentq
G = 6.67430e-11; Ms = 0.8 * 1.98840987e30  # GM_sun / G would be the project's; m ratio is what is compared
GMs = 0.8 * 1.3271244e20
for P, K, e in [(12.0, 9.0, 0.1), (30.0, 6.0, 0.05)]:
    f = (P * 86400.0) * K**3 * (1 - e*e)**1.5 / (2 * np.pi)   # = G m^3 / (M + m)^2  (m sin i, i = 90)
    q = brentq(lambda q: GMs * q**3 / (1 + q)**2 - f, 1e-12, 1.0, xtol=1e-16)
    print("%.15g" % q)
)PY");
    REQUIRE(py.status == 0);
    std::istringstream in(py.output);
    double q0 = 0, q1 = 0;
    in >> q0 >> q1;
    CHECK(sys[0].planets[0].mass_ratio == doctest::Approx(q0).epsilon(1e-6));
    CHECK(sys[0].planets[1].mass_ratio == doctest::Approx(q1).epsilon(1e-6));
    CHECK(sys[0].planets[0].inclination_rad == doctest::Approx(constants::kPi / 2));
    StabilityRunOptions o;
    o.stability.megno.inner_orbits = 300.0;
    const StabilityRunResult r = stability_of_systems("test", "two draws", sys, {"b", "c"}, o);
    CHECK(r.summary.draws == 2);
    CHECK(r.summary.fraction_hill_two_sqrt3 == doctest::Approx(0.5));  // the second draw fails
    CHECK(r.summary.per_draw[0].hill_two_sqrt3);
    CHECK_FALSE(r.summary.per_draw[1].hill_two_sqrt3);
    const std::string md = stability_markdown(r, "figures/stability.png");
    CHECK(md.find("## Orbital stability") == 0);
    CHECK(md.find("| mutual Hill separation > 2√3 (Gladman 1993) | 50.0 % |") != std::string::npos);
    CHECK(md.find("not proof of stability") != std::string::npos);
    const std::string dir = test::temp_dir("nbody_model_stability");
    const std::string fig = write_stability_figure(r, dir + "/stability.png");
    CHECK(std::filesystem::file_size(fig) > 1000);
  }

}
