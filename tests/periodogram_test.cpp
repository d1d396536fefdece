#include <doctest/doctest.h>
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <fstream>
#include <nlohmann/json.hpp>
#include <numbers>
#include <random>
#include <sstream>
#include <vector>

#include "apsides/data.h"
#include "apsides/error.h"
#include "apsides/keplerian_model.h"
#include "apsides/periodogram.h"
#include "test_support.h"

using namespace apsides;

namespace {

struct Series {
  std::vector<double> t, y, dy;
};

// Uneven random sampling with a sinusoid and Gaussian noise (fixed seed).
Series random_series(std::size_t n, unsigned seed, double baseline = 500.0) {
  std::mt19937_64 rng(seed);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  std::normal_distribution<double> g(0.0, 1.0);
  Series s;
  for (std::size_t i = 0; i < n; ++i) {
    const double t = 2459000.0 + baseline * u(rng);
    const double sig = 0.5 + u(rng);
    s.t.push_back(t);
    s.dy.push_back(sig);
    s.y.push_back(3.0 * std::sin(2 * std::numbers::pi * t / 13.7 + 0.4) + 5.0 + sig * g(rng));
  }
  return s;
}

VelocityData to_velocity_data(const Series& s) {
  VelocityData d;
  d.reference_epoch_bjd = 0.0;
  d.time_days = s.t;
  d.velocity_m_s = s.y;
  d.uncertainty_m_s = s.dy;
  d.instrument.assign(s.t.size(), 0);
  d.instrument_names = {"test"};
  d.origin.assign(s.t.size(), "test");
  return d;
}

std::string py_list(const std::vector<double>& v) {
  std::string s = "[";
  for (double x : v) s += fmt::format("{:.17g},", x);
  return s + "]";
}

std::vector<double> parse_numbers(const std::string& text) {
  std::vector<double> out;
  std::istringstream in(text);
  double x;
  while (in >> x) out.push_back(x);
  return out;
}

}  // namespace

TEST_SUITE("periodogram") {

TEST_CASE("periodogram: the fixed example of CHECKS.md section 4 is reproduced to 1e-10") {
  // Reference: astropy 5.2.1 LombScargle(fit_mean=True, center_data=True,
  // normalization='standard', method='slow') as recorded in CHECKS.md section 4 [L].
  std::vector<double> t, y, dy;
  for (int i = 0; i < 30; ++i) {
    const double ti = i + 0.3 * std::sin(i);
    t.push_back(ti);
    y.push_back(3 * std::cos(2 * std::numbers::pi * ti / 7.3) + 0.5 * std::sin(1.7 * i) + 2);
    dy.push_back(1 + 0.1 * (i % 3));
  }
  const double f[] = {1 / 7.3, 0.05, 0.2, 0.31};
  const double expected[] = {0.9732871151198861, 0.014141176905172366, 0.014907915614001769, 0.010124366301203861};
  for (int k = 0; k < 4; ++k) {
    test::for_each_simd_target([&](const std::string& target) {
      CAPTURE(target);
      CHECK(gls_power(t, y, dy, f[k], 1e-3, 1, PeriodogramMethod::kExact)[0] ==
            doctest::Approx(expected[k]).epsilon(1e-10));
    });
    CHECK(gls_power(t, y, dy, f[k], 1e-3, 1, PeriodogramMethod::kFast)[0] == doctest::Approx(expected[k]).epsilon(1e-5));
    CHECK(gls_power_direct(t, y, dy, {f[k]})[0] == doctest::Approx(expected[k]).epsilon(1e-10));
  }
}

TEST_CASE("periodogram: Baluev false-alarm probabilities match CHECKS.md section 4 to 1e-9") {
  // Reference: Baluev 2008 Eq. 6 as implemented inside astropy, f_max = 2, t = 1..100,
  // unit weights (CHECKS.md section 4 [L]).
  std::vector<double> t, dy(100, 1.0);
  for (int i = 1; i <= 100; ++i) t.push_back(i);
  CHECK(baluev_fap(0.19, 100, 2.0, t, dy) == doctest::Approx(2.493593559e-02).epsilon(1e-9));
  CHECK(baluev_fap(0.25, 100, 2.0, t, dy) == doctest::Approx(7.199347282e-04).epsilon(1e-9));
  CHECK(baluev_fap(0.30, 100, 2.0, t, dy) == doctest::Approx(2.875656899e-05).epsilon(1e-9));
  CHECK(baluev_fap(0.0, 100, 2.0, t, dy) == 1.0);
}

TEST_CASE("periodogram: the recurrence engine agrees with the direct sums to 1e-10 over long grids") {
  // Outside reference here is the textbook formula evaluated with std::cos / std::sin at
  // every point and frequency (Zechmeister & Kuerster 2009 Eqs. 5-15).
  const Series s = random_series(200, 7, 3000.0);
  const double f0 = 0.001, df = 1.0 / (10 * 3000.0);
  const std::size_t nf = 20000;  // five re-anchoring chunks (4096 each), a partial last block
  std::vector<double> fs;
  for (std::size_t k = 0; k < nf; k += 37) fs.push_back(f0 + df * static_cast<double>(k));
  const auto ref = gls_power_direct(s.t, s.y, s.dy, fs);
  // Each SIMD target has its own lane count, hence its own number of recurrence steps
  // between anchors (4096 / lanes: 512 with AVX-512, 4096 scalar).
  test::for_each_simd_target([&](const std::string& target) {
    CAPTURE(target);
    const auto p = gls_power(s.t, s.y, s.dy, f0, df, nf, PeriodogramMethod::kExact, 1);
    double worst = 0;
    for (std::size_t j = 0; j < fs.size(); ++j) worst = std::max(worst, std::abs(p[j * 37] - ref[j]));
    CHECK(worst < 1e-10);
  });
}

TEST_CASE("periodogram: results do not depend on the number of threads") {
  const Series s = random_series(300, 11);
  test::for_each_simd_target([&](const std::string& target) {
    CAPTURE(target);
    const auto p1 = gls_power(s.t, s.y, s.dy, 0.002, 2e-4, 9000, PeriodogramMethod::kExact, 1);
    const auto p2 = gls_power(s.t, s.y, s.dy, 0.002, 2e-4, 9000, PeriodogramMethod::kExact, 2);
    const auto p3 = gls_power(s.t, s.y, s.dy, 0.002, 2e-4, 9000, PeriodogramMethod::kExact, 3);
    CHECK(p1 == p2);
    CHECK(p1 == p3);
  });
}

TEST_CASE("periodogram: exact and fast modes agree with astropy at every frequency (N = 30, 300, 3000)") {
  // Reference: astropy LombScargle(t, y, dy, fit_mean=True, center_data=True,
  // normalization='standard'), exact 'cython' method, via /usr/bin/python3.
  for (std::size_t n : {30u, 300u, 3000u}) {
    CAPTURE(n);
    const Series s = random_series(n, static_cast<unsigned>(100 + n));
    const double f0 = 0.0009, df = 1.0 / (10 * 500.0);
    const std::size_t nf = 2500;
    const std::string code = fmt::format(
        "import numpy as np\nfrom astropy.timeseries import LombScargle\n"
        "t=np.array({});y=np.array({});dy=np.array({})\n"
        "f={:.17g}+{:.17g}*np.arange({})\n"
        "p=LombScargle(t,y,dy,fit_mean=True,center_data=True,normalization='standard').power(f,method='cython')\n"
        "print('\\n'.join(repr(float(x)) for x in p))\n",
        py_list(s.t), py_list(s.y), py_list(s.dy), f0, df, nf);
    const auto r = test::run_python(code);
    REQUIRE(r.status == 0);
    const auto ref = parse_numbers(r.output);
    REQUIRE(ref.size() == nf);
    test::for_each_simd_target([&](const std::string& target) {
      CAPTURE(target);
      const auto exact = gls_power(s.t, s.y, s.dy, f0, df, nf, PeriodogramMethod::kExact);
      double worst_exact = 0;
      for (std::size_t k = 0; k < nf; ++k) worst_exact = std::max(worst_exact, std::abs(exact[k] - ref[k]));
      CHECK(worst_exact < 1e-8);
    });
    const auto fast = gls_power(s.t, s.y, s.dy, f0, df, nf, PeriodogramMethod::kFast);
    double worst_fast = 0;
    for (std::size_t k = 0; k < nf; ++k) worst_fast = std::max(worst_fast, std::abs(fast[k] - ref[k]));
    CHECK(worst_fast < 1e-5);
  }
}

TEST_CASE("periodogram: on pure noise the fraction of FAP < 1% is 1% within its binomial error") {
  // Baluev (2008) is an approximation tight at small FAP; 2000 fixed-seed noise series.
  const int trials = 2000;
  int below = 0;
  std::mt19937_64 rng(2024);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  std::normal_distribution<double> g(0.0, 1.0);
  PeriodogramOptions opt;
  opt.n_peaks = 1;
  opt.n_window_peaks = 0;
  opt.min_period_days = 0.5;
  opt.oversample = 5;
  opt.method = PeriodogramMethod::kExact;
  for (int k = 0; k < trials; ++k) {
    Series s;
    for (int i = 0; i < 60; ++i) {
      s.t.push_back(200.0 * u(rng));
      s.dy.push_back(1.0 + u(rng));
      s.y.push_back(s.dy.back() * g(rng));
    }
    const auto r = compute_periodogram(to_velocity_data(s), opt);
    if (r.peaks.front().fap < 0.01) ++below;
  }
  const double frac = static_cast<double>(below) / trials;
  const double sigma = std::sqrt(0.01 * 0.99 / trials);
  MESSAGE("fraction with FAP < 1%: " << frac);
  CHECK(std::abs(frac - 0.01) < 3 * sigma);
}

TEST_CASE("periodogram: a sub-day period under nightly sampling is found and its daily alias flagged") {
  std::mt19937_64 rng(99);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  std::normal_distribution<double> g(0.0, 1.0);
  const double period = 0.73;
  Series s;
  for (int night = 0; night < 120; ++night) {
    if (u(rng) < 0.4) continue;  // weather
    const double t = 2459000.0 + night + 0.30 * (u(rng) - 0.5);  // within ~3.6 h of midnight
    s.t.push_back(t);
    s.dy.push_back(1.5);
    s.y.push_back(8.0 * std::sin(2 * std::numbers::pi * t / period) + 1.5 * g(rng));
  }
  PeriodogramOptions opt;
  const auto r = compute_periodogram(to_velocity_data(s), opt);
  REQUIRE(r.max_frequency_per_day > 1.0 / period);
  REQUIRE(r.peaks.size() >= 2);
  CHECK(r.peaks[0].period_days == doctest::Approx(period).epsilon(1e-3));
  CHECK(r.peaks[0].alias_of == -1);
  bool flagged = false;
  for (const Peak& p : r.peaks) {
    if (std::abs(p.frequency_per_day - (1.0 / period - 1.0)) < 0.01) {
      CHECK(p.alias_of == 0);
      CHECK(p.alias_window_frequency == doctest::Approx(1.0).epsilon(0.01));
      flagged = true;
    }
  }
  CHECK(flagged);
  REQUIRE(!r.window_peaks.empty());
  CHECK(r.window_peaks[0].frequency_per_day == doctest::Approx(1.0).epsilon(0.01));
}

TEST_CASE("periodogram: 51 Peg (six instruments, -33 km/s) peaks at the published 4.2308 d") {
  // Data: Birkby et al. 2017 (CDS J/AJ/153/138); period: 4.2308 d long-baseline value
  // quoted in tests/data/real/README.md (4.231 d, Marcy et al. 1997).
  const auto data = load_velocities({test::real_data("51peg_rv_birkby2017.txt")}, {VelocityFileOptions{}});
  REQUIRE(data.n_instruments() == 6);
  PeriodogramOptions opt;
  const auto r = compute_periodogram(data, opt);
  REQUIRE(!r.peaks.empty());
  CHECK(std::abs(r.peaks[0].period_days - 4.2308) < 1e-3);
  CHECK(r.peaks[0].fap < 1e-10);
  CHECK(r.n_instruments == 6);
}

TEST_CASE("periodogram: the fast mode stays within 1e-5 of the exact sums on six instruments and 7e5 frequencies") {
  // The exact engine is itself checked against astropy above; this exercises the fast
  // engine's per-instrument sums and its largest grids on real sampling (51 Peg), where
  // the offsets make the power most sensitive to errors in the sums.
  const auto data = load_velocities({test::real_data("51peg_rv_birkby2017.txt")}, {VelocityFileOptions{}});
  PeriodogramOptions opt;
  opt.n_window_peaks = 1;
  opt.method = PeriodogramMethod::kExact;
  const auto exact = compute_periodogram(data, opt);
  opt.method = PeriodogramMethod::kFast;
  const auto fast = compute_periodogram(data, opt);
  REQUIRE(fast.method_used == "fast");
  REQUIRE(exact.power.size() == fast.power.size());
  REQUIRE(exact.power.size() > 500'000);
  double worst = 0, worst_window = 0;
  for (std::size_t k = 0; k < exact.power.size(); ++k) {
    worst = std::max(worst, std::abs(exact.power[k] - fast.power[k]));
    worst_window = std::max(worst_window, std::abs(exact.window_power[k] - fast.window_power[k]));
  }
  MESSAGE("max |fast - exact| power " << worst << ", window " << worst_window);
  CHECK(worst < 1e-5);
  CHECK(worst_window < 1e-5);
}

TEST_CASE("periodogram: with two instruments the power is the chi-square reduction of the joint offsets + sinusoid fit") {
  // Two instruments with a 1 km/s offset; one covers a third of a long orbit only. The
  // joint fit must equal the direct least-squares reduction of chi-square (checked with
  // numpy's lstsq at one frequency).
  std::mt19937_64 rng(5);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  std::normal_distribution<double> g(0.0, 1.0);
  VelocityData d;
  d.instrument_names = {"a", "b"};
  for (int i = 0; i < 80; ++i) {
    const bool second = i % 4 == 0;
    const double t = second ? 300.0 * u(rng) : 1000.0 * u(rng);
    d.time_days.push_back(t);
    d.uncertainty_m_s.push_back(2.0);
    d.velocity_m_s.push_back(20 * std::sin(2 * std::numbers::pi * t / 700.0) + (second ? 1000.0 : 0.0) + 2 * g(rng));
    d.instrument.push_back(second ? 1 : 0);
    d.origin.push_back("x");
  }
  PeriodogramOptions opt;
  opt.min_period_days = 600.0;
  opt.max_period_days = 800.0;
  opt.oversample = 50;
  const auto r = compute_periodogram(d, opt);
  const std::size_t k = r.frequency_per_day.size() / 2;
  const double f = r.frequency_per_day[k];
  const std::string code = fmt::format(
      "import numpy as np\nt=np.array({});y=np.array({});s=np.array({});g=np.array({})\nf={:.17g}\n"
      "w=1/s\nA0=np.stack([(g==0)*1.0,(g==1)*1.0],1)\nA1=np.column_stack([A0,np.cos(2*np.pi*f*t),np.sin(2*np.pi*f*t)])\n"
      "c0=np.sum((np.linalg.lstsq(A0*w[:,None],y*w,rcond=None)[0]@A0.T-y)**2*w**2)\n"
      "c1=np.sum((np.linalg.lstsq(A1*w[:,None],y*w,rcond=None)[0]@A1.T-y)**2*w**2)\nprint(repr((c0-c1)/c0))\n",
      py_list(d.time_days), py_list(d.velocity_m_s), py_list(d.uncertainty_m_s),
      py_list(std::vector<double>(d.instrument.begin(), d.instrument.end())), f);
  const auto py = test::run_python(code);
  REQUIRE(py.status == 0);
  CHECK(r.power[k] == doctest::Approx(std::stod(py.output)).epsilon(1e-9));
}

TEST_CASE("periodogram: the demo system shows both planets, the second after removing the first") {
  const std::string dir = test::source_dir() + "/datasets_synthetic/demo/";
  VelocityFileOptions kestrel{"Kestrel", VelocityUnit::kMetersPerSecond};
  VelocityFileOptions tern{"Tern", VelocityUnit::kMetersPerSecond};
  VelocityFileOptions petrel{"Petrel", VelocityUnit::kKilometersPerSecond};
  const auto data = load_velocities(
      {dir + "velocities_Kestrel.csv", dir + "velocities_Tern.csv", dir + "velocities_Petrel.csv"},
      {kestrel, tern, petrel});
  std::ifstream in(dir + "truth.json");
  const auto truth = nlohmann::json::parse(in);
  std::vector<Planet> truth_planets;
  for (const auto& p : truth["planets"])
    truth_planets.push_back(Planet::from_elements(
        p["period_d"].get<double>(), p["K_ms"].get<double>(), p["ecc"].get<double>(),
        p["omega_deg"].get<double>() * std::numbers::pi / 180.0,
        p["t_conj_bjd"].get<double>() - data.reference_epoch_bjd));
  PeriodogramOptions opt;
  const auto r = compute_periodogram(data, opt);
  auto find = [](const PeriodogramResult& res, double period) -> const Peak* {
    for (const Peak& p : res.peaks)
      if (std::abs(p.period_days - period) / period < 0.01) return &p;
    return nullptr;
  };
  const Peak* first = nullptr;
  std::size_t found = 0;
  for (std::size_t j = 0; j < truth_planets.size(); ++j) {
    const Peak* p = find(r, truth_planets[j].period_days);
    if (p && p->fap < 1e-3 && !first) {
      first = p;
      found = j;
    }
  }
  REQUIRE(first != nullptr);
  const std::size_t other = found == 0 ? 1 : 0;
  const auto res = compute_residual_periodogram(data, {truth_planets[found]}, opt);
  const Peak* second = find(res, truth_planets[other].period_days);
  REQUIRE(second != nullptr);
  CHECK(second->fap < 1e-3);
  CHECK(res.peaks[0].period_days == doctest::Approx(truth_planets[other].period_days).epsilon(0.01));
}

TEST_CASE("periodogram: the bootstrap FAP is reproducible for a seed and independent of threads") {
  const Series s = random_series(40, 3);
  PeriodogramOptions opt;
  opt.bootstrap = 40;
  opt.seed = 17;
  opt.threads = 1;
  const auto a = compute_periodogram(to_velocity_data(s), opt);
  opt.threads = 2;
  const auto b = compute_periodogram(to_velocity_data(s), opt);
  REQUIRE(a.peaks.size() == b.peaks.size());
  for (std::size_t i = 0; i < a.peaks.size(); ++i) CHECK(a.peaks[i].fap_bootstrap == b.peaks[i].fap_bootstrap);
  // The injected 13.7 d signal is far stronger than any resampled series' maximum.
  CHECK(a.peaks[0].period_days == doctest::Approx(13.7).epsilon(0.01));
  CHECK(a.peaks[0].fap_bootstrap == 0.0);
  CHECK(a.peaks.back().fap_bootstrap > 0.0);
}

TEST_CASE("periodogram: normalisations follow their definitions and bad options are refused") {
  const Series s = random_series(50, 21);
  PeriodogramOptions opt;
  const auto st = compute_periodogram(to_velocity_data(s), opt);
  opt.normalization = Normalization::kLog;
  const auto lg = compute_periodogram(to_velocity_data(s), opt);
  for (std::size_t k = 0; k < st.power.size(); k += 101) CHECK(lg.power[k] == doctest::Approx(-std::log1p(-st.power[k])));
  opt.normalization = Normalization::kModel;
  const auto md = compute_periodogram(to_velocity_data(s), opt);
  for (std::size_t k = 0; k < st.power.size(); k += 101) CHECK(md.power[k] == doctest::Approx(st.power[k] / (1 - st.power[k])));
  CHECK_THROWS_WITH_AS(parse_normalization("loud", "--normalization"),
                       "--normalization: normalization is 'loud'; it must be standard, model, log or psd", InputError);
  PeriodogramOptions bad;
  bad.oversample = 0.5;
  CHECK(bad.Validate() == "oversample = 0.5: must be in [1, 1000]");
  CHECK_THROWS_AS(compute_periodogram(to_velocity_data(s), bad), InputError);
}

}  // TEST_SUITE
