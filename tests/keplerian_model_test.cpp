#include <doctest/doctest.h>

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <random>
#include <string>

#include "apsides/constants.h"
#include "apsides/kepler.h"
#include "apsides/keplerian_model.h"
#include "test_support.h"

using namespace apsides;
using constants::kPi;

namespace {
VelocityData make_random_data(int n, int n_inst, unsigned seed) {
  std::mt19937_64 rng(seed);
  std::uniform_real_distribution<double> ut(-600.0, 600.0), us(1.0, 3.0);
  std::normal_distribution<double> g(0.0, 5.0);
  VelocityData d;
  d.reference_epoch_bjd = 2459000.0;
  for (int i = 0; i < n_inst; ++i) d.instrument_names.push_back("inst" + std::to_string(i));
  for (int i = 0; i < n; ++i) {
    d.time_days.push_back(ut(rng));
    d.velocity_m_s.push_back(g(rng));
    d.uncertainty_m_s.push_back(us(rng));
    d.instrument.push_back(i % n_inst);
    d.origin.push_back("test");
  }
  return d;
}
}  // namespace

TEST_SUITE("keplerian_model") {
  TEST_CASE("keplerian_model: conjunction and the sign of omega (CHECKS.md section 8)") {
    // [L] P = 10 d, e = 0.3, omega = 40 deg, T_p = 0 -> E = 0.6593759520,
    // M = 0.4755888301, T_c = 0.7569231320 d; occultation at 7.2341994963 d.
    const double P = 10.0, e = 0.3, w = 40.0 * kPi / 180.0;
    const double M = mean_anomaly_at_conjunction(e, w);
    CHECK(M == doctest::Approx(0.4755888301).epsilon(1e-9));
    CHECK(eccentric_from_true_anomaly(kPi / 2 - w, e) == doctest::Approx(0.6593759520).epsilon(1e-9));
    const double tc = time_of_conjunction(P, e, w, 0.0);
    CHECK(std::fabs(tc - 0.7569231320) < 1e-9);
    CHECK(std::fabs(time_of_occultation(P, e, w, 0.0) - 7.2341994963) < 1e-9);
    CHECK(std::fabs(time_of_periastron(P, e, w, tc)) < 1e-12);
    // At T_c the velocity is K e cos(omega) = 0.2298133329 K and decreasing.
    const Planet p = Planet::from_elements(P, 1.0, e, w, tc);
    CHECK(planet_velocity(p, tc) == doctest::Approx(0.2298133329).epsilon(1e-9));
    CHECK(planet_velocity(p, tc + 1e-4) < planet_velocity(p, tc - 1e-4));
    // Circular orbit: crosses zero from + to - at transit (receding before, approaching after).
    const Planet c = Planet::from_elements(5.0, 10.0, 0.0, 0.0, 1.0);
    CHECK(std::fabs(planet_velocity(c, 1.0)) < 1e-12);
    CHECK(planet_velocity(c, 0.9) > 0.0);
    CHECK(planet_velocity(c, 1.1) < 0.0);
  }

  TEST_CASE("keplerian_model: conversions t_conj <-> t_peri <-> mean anomaly round trip") {
    std::mt19937_64 rng(3);
    std::uniform_real_distribution<double> ue(0.0, 0.95), uw(-kPi, kPi), ut(-50, 50);
    for (int i = 0; i < 200; ++i) {
      const double e = ue(rng), w = uw(rng), tp = ut(rng), P = 3.7;
      const double tc = time_of_conjunction(P, e, w, tp);
      CHECK(time_of_periastron(P, e, w, tc) == doctest::Approx(tp).epsilon(1e-12));
      const Planet p = Planet::from_elements(P, 1.0, e, w, tc);
      // Mean anomaly is 0 at periastron.
      const double m = mean_anomaly_at(p, tp);
      CHECK(std::min(m, 2 * kPi - m) < 1e-9);
    }
  }

  TEST_CASE("keplerian_model: fast likelihood equals the scalar reference to 1e-9 relative on every SIMD target") {
    test::for_each_simd_target([&](const std::string& target) {
      CAPTURE(target);
      for (int n : {1, 7, 200, 1000}) {
        VelocityData d = make_random_data(n, 2, 17u + static_cast<unsigned>(n));
        ModelLayout L{2, 2, Trend::kQuadratic, true};
        KeplerianModel model(d, L);
        std::mt19937_64 rng(n);
        std::uniform_real_distribution<double> u(0.0, 1.0);
        double worst = 0.0;
        for (int rep = 0; rep < 50; ++rep) {
          std::vector<double> th(L.n_params());
          for (int j = 0; j < 2; ++j) {
            const double e = 0.999 * u(rng), w = 2 * kPi * u(rng);
            put_planet(th, L, j, Planet::from_elements(1.0 + 300 * u(rng), 50 * u(rng), e, w, 100 * u(rng)));
          }
          th[L.offset_index(0)] = 3.0;
          th[L.jitter_index(0)] = 2.0 * u(rng);
          th[L.offset_index(1)] = -2.0;
          th[L.jitter_index(1)] = 0.0;
          th[L.trend_index(1)] = 0.01;
          th[L.trend_index(2)] = -1e-5;
          const double a = model.log_likelihood(th), b = model.log_likelihood_reference(th);
          worst = std::max(worst, std::fabs(a - b) / std::fabs(b));
        }
        CAPTURE(n);
        CHECK(worst <= 1e-9);
      }
    });
  }

  TEST_CASE("keplerian_model: the velocity kernel equals the scalar Kepler solve to 1e-9 m/s on every SIMD target") {
    // planets_velocity goes through kernels::add_keplerians; the reference is the scalar
    // planet_velocity (true anomaly from the bracketed scalar Kepler solver), point by point.
    std::mt19937_64 rng(41);
    std::uniform_real_distribution<double> u(0.0, 1.0);
    std::vector<double> t(777);
    for (double& x : t) x = -3000.0 + 6000.0 * u(rng);
    const ModelLayout L{2, 1, Trend::kNone, false};
    const KeplerianModel model(make_random_data(5, 1, 3u), L);
    std::vector<double> th(L.n_params());
    const Planet b = Planet::from_elements(2.7, 40.0, 0.97, 0.4, 1.0), c = Planet::from_elements(410.0, 12.0, 0.3, -2.5, 50.0);
    put_planet(th, L, 0, b);
    put_planet(th, L, 1, c);
    std::vector<double> ref(t.size());
    for (std::size_t i = 0; i < t.size(); ++i) ref[i] = planet_velocity(b, t[i]) + planet_velocity(c, t[i]);
    test::for_each_simd_target([&](const std::string& target) {
      CAPTURE(target);
      std::vector<double> v(t.size());
      model.planets_velocity(th, t, v);
      double worst = 0.0;
      for (std::size_t i = 0; i < t.size(); ++i) worst = std::max(worst, std::fabs(v[i] - ref[i]));
      CHECK(worst <= 1e-9);
    });
  }

  TEST_CASE("keplerian_model: unphysical parameters give -inf") {
    VelocityData d = make_random_data(20, 1, 1);
    ModelLayout L{1, 1, Trend::kNone, true};
    KeplerianModel model(d, L);
    std::vector<double> th{10.0, 5.0, 0.0, 0.0, 0.0, 0.0, 1.0};
    CHECK(std::isfinite(model.log_likelihood(th)));
    th[2] = 1.0;  // e = 1
    CHECK(model.log_likelihood(th) == -std::numeric_limits<double>::infinity());
    th[2] = 0.0;
    th[0] = -1.0;
    CHECK(model.log_likelihood(th) == -std::numeric_limits<double>::infinity());
    th[0] = 10.0;
    th[6] = -1.0;
    CHECK(model.log_likelihood(th) == -std::numeric_limits<double>::infinity());
  }

  TEST_CASE("keplerian_model: layout names parameters in theta order") {
    ModelLayout L{2, 2, Trend::kLinear, true};
    auto names = L.names({"north", "south"});
    REQUIRE(names.size() == L.n_params());
    CHECK(names[0] == "b.period_d");
    CHECK(names[9] == "c.t_conj_d");
    CHECK(names[L.offset_index(1)] == "south.offset_ms");
    CHECK(names[L.jitter_index(1)] == "south.jitter_ms");
    CHECK(names[L.trend_index(1)] == "trend.c1_ms_per_d");
  }

  TEST_CASE("keplerian_model: offsets integrated analytically equal scipy's quadrature over their uniform priors") {
    // Instrument 0's offset integrated out (uniform prior), instrument 1's kept; scipy
    // integrates exp(ln L(g)) / (b - a) over g numerically. Once with the prior far wider
    // than the likelihood, once truncated close to the best offset (the erf terms).
    VelocityData d = make_random_data(14, 2, 5u);
    ModelLayout L{1, 2, Trend::kNone, true};
    KeplerianModel model(d, L);
    std::vector<double> th(L.n_params());
    put_planet(th, L, 0, Planet::from_elements(17.3, 6.0, 0.3, 1.1, 4.0));
    th[L.offset_index(0)] = 123.0;  // ignored when integrated
    th[L.jitter_index(0)] = 1.5;
    th[L.offset_index(1)] = -1.2;
    th[L.jitter_index(1)] = 0.7;
    std::vector<double> planet(d.size());
    model.planets_velocity(th, d.time_days, planet);
    std::string r0, v0, r1, v1;
    for (std::size_t i = 0; i < d.size(); ++i) {
      const double res = d.velocity_m_s[i] - planet[i];
      const double jit = d.instrument[i] == 0 ? 1.5 : 0.7;
      const double var = d.uncertainty_m_s[i] * d.uncertainty_m_s[i] + jit * jit;
      (d.instrument[i] == 0 ? r0 : r1) += fmt::format("{:.17g},", d.instrument[i] == 0 ? res : res + 1.2);
      (d.instrument[i] == 0 ? v0 : v1) += fmt::format("{:.17g},", var);
    }
    std::vector<KeplerianModel::OffsetConditional> cond;
    const KeplerianModel::IntegratedOffset wide{0, -300.0, 250.0};
    const double ln_wide = model.log_likelihood_offsets_integrated(th, std::span(&wide, 1), &cond);
    REQUIRE(cond.size() == 1);
    const KeplerianModel::IntegratedOffset tight{0, cond[0].mean_m_s - 0.5 * cond[0].sd_m_s,
                                                 cond[0].mean_m_s + 3.0 * cond[0].sd_m_s};
    const double ln_tight = model.log_likelihood_offsets_integrated(th, std::span(&tight, 1));
    auto by_scipy = [&](const KeplerianModel::IntegratedOffset& io) {
      const auto r = test::run_python(fmt::format(
          "import numpy as np\n"
          "from scipy import integrate\n"
          "r0 = np.array([{}]); v0 = np.array([{}]); r1 = np.array([{}]); v1 = np.array([{}])\n"
          "def ln_l(r, v, g): return -0.5 * np.sum((r - g)**2 / v + np.log(2 * np.pi * v))\n"
          "ghat = np.sum(r0 / v0) / np.sum(1 / v0); peak = ln_l(r0, v0, ghat)\n"
          "a, b = {:.17g}, {:.17g}\n"
          "val, err = integrate.quad(lambda g: np.exp(ln_l(r0, v0, g) - peak), a, b, points=[min(max(ghat, a), b)], "
          "epsabs=0, epsrel=1e-12, limit=200)\n"
          "print(repr(peak + np.log(val / (b - a)) + ln_l(r1, v1, 0.0)))\n",
          r0, v0, r1, v1, io.lower_m_s, io.upper_m_s));
      REQUIRE(r.status == 0);
      return std::stod(r.output);
    };
    const double ref_wide = by_scipy(wide), ref_tight = by_scipy(tight);
    CHECK(ln_wide == doctest::Approx(ref_wide).epsilon(1e-10));
    CHECK(ln_tight == doctest::Approx(ref_tight).epsilon(1e-10));
    // The offset-free block kernel (kernels::block_offset_fit) under every SIMD target.
    test::for_each_simd_target([&](const std::string& target) {
      CAPTURE(target);
      CHECK(model.log_likelihood_offsets_integrated(th, std::span(&wide, 1)) == doctest::Approx(ref_wide).epsilon(1e-10));
      CHECK(model.log_likelihood_offsets_integrated(th, std::span(&tight, 1)) == doctest::Approx(ref_tight).epsilon(1e-10));
      // Nothing integrated: the ordinary likelihood.
      CHECK(model.log_likelihood_offsets_integrated(th, {}) == doctest::Approx(model.log_likelihood(th)).epsilon(1e-14));
    });
  }
}
