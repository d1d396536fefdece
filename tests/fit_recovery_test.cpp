// Recovery of injected orbits from simulated data (issue 4, item 6): an e = 0.7 orbit,
// three instruments with very different offsets and jitters, a sub-day period sampled
// nightly (the one-day alias trap) and a brown-dwarf mass ratio. Every case runs the
// library's planet search (or MAP fit) on velocities written by `simulate` and read back
// through the same file reader users have.
//
// Tolerances. A MAP fit gives no posterior widths, so each tolerance is a multiple of a
// textbook 1-sigma estimate for a sinusoid of semi-amplitude K sampled N times over a
// baseline T with white noise of rms s (least-squares frequency/amplitude errors,
// Montgomery & O'Donoghue 1999, Delta Scuti Star Newsletter 13, 28, Eqs. 1-3):
//   sigma_f = sqrt(6/N) s / (pi T K),  so  sigma_P = P^2 sigma_f,
//   sigma_K = sqrt(2/N) s,
// and for an instrument offset the error of a mean, sigma_offset = s / sqrt(n).
#include <doctest/doctest.h>

#include <algorithm>
#include <chrono>
#include <numbers>
#include <cmath>
#include <string>
#include <vector>

#include <fmt/format.h>

#include "apsides/data.h"
#include "apsides/fit.h"
#include "apsides/orbit.h"
#include "apsides/periodogram.h"
#include "apsides/simulate.h"
#include "test_support.h"

using namespace apsides;

namespace {

struct Simulated {
  Scenario scenario;
  VelocityData data;
};

// Simulates a scenario and reads its velocities back through load_velocities (one file
// per instrument), exactly as a user's files would be.
Simulated simulated(const std::string& scenario_text, const std::string& name) {
  Simulated s;
  s.scenario = parse_scenario(scenario_text, name + ".toml");
  const SimulatedData sim = simulate(s.scenario);
  const std::string dir = test::temp_dir("fit_recovery_" + name);
  std::vector<std::string> paths;
  std::vector<VelocityFileOptions> opts;
  for (const auto& in : s.scenario.instruments) {
    paths.push_back(test::write_text(dir, in.name + ".csv", sim.velocity_csv(in.name)));
    VelocityFileOptions o;
    o.instrument = in.name;
    o.unit = in.unit;
    opts.push_back(o);
  }
  s.data = load_velocities(paths, opts);
  return s;
}

SearchProblem problem_of(const VelocityData& d) {
  SearchProblem sp;
  sp.data = d;
  return sp;
}

double planet_value(const FitResult& f, int j, int slot) { return f.theta[f.layout.planet_index(j) + slot]; }
double planet_ecc(const FitResult& f, int j) {
  return planet_value(f, j, 2) * planet_value(f, j, 2) + planet_value(f, j, 3) * planet_value(f, j, 3);
}

int instrument_index(const FitResult& f, const std::string& name) {
  for (std::size_t i = 0; i < f.instrument_names.size(); ++i)
    if (f.instrument_names[i] == name) return static_cast<int>(i);
  FAIL("instrument " << name << " not in the fit");
  return -1;
}

// sigma_P of the sinusoid formula above.
double sigma_period(double P, double K, double rms, std::size_t n, double T) {
  return P * P * std::sqrt(6.0 / static_cast<double>(n)) * rms / (std::numbers::pi * T * K);
}

double seconds_since(std::chrono::steady_clock::time_point t0) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
}

}  // namespace

TEST_SUITE("fit_recovery") {
  TEST_CASE("fit_recovery: an e = 0.7 orbit is found by the search with its period and eccentricity") {
    const double P = 111.3, K = 25.0, e = 0.7, sigma = 2.0;
    const std::string sc = fmt::format(R"(seed = 4207
[star]
name = "Invented star Orvanne"
[[instruments]]
name = "Quill"
n_points = 60
sigma_ms = {}
[[planets]]
period_d = {}
K_ms = {}
ecc = {}
omega_deg = 40.0
)",
                                       sigma, P, K, e);
    const Simulated s = simulated(sc, "eccentric");
    const auto t0 = std::chrono::steady_clock::now();
    const SearchResult sr = search_planets(problem_of(s.data), SearchOptions{});
    MESSAGE(sr.FullReport());
    MESSAGE(fmt::format("eccentric search took {:.2f} s", seconds_since(t0)));
    REQUIRE(sr.selected_n_planets == 1);
    const FitResult& f = sr.best();
    // sigma_P from the sinusoid formula (s = stated error, no jitter injected); an
    // eccentric orbit's sharp periastron passage only narrows the period, so 3 sigma of
    // the circular estimate is a fair bound.
    const double sP = sigma_period(P, K, sigma, s.data.size(), s.data.baseline_days());
    MESSAGE(fmt::format("P = {:.4f} (truth {}), 3 sigma_P = {:.4f}; e = {:.3f} (truth {})", planet_value(f, 0, 0), P,
                        3.0 * sP, planet_ecc(f, 0), e));
    CHECK(std::fabs(planet_value(f, 0, 0) - P) < 3.0 * sP);
    // e: sigma_e ~ sqrt(2/N) s / K ~ 0.015 here (same order as sigma_K / K, common
    // practice for well-sampled orbits); 0.1 is the issue's bound, several sigma even if
    // the periastron passage is thinly sampled.
    CHECK(std::fabs(planet_ecc(f, 0) - e) < 0.1);
  }

  TEST_CASE("fit_recovery: three instruments' offsets and jitters are recovered") {
    struct Inst {
      const char* name;
      int n;
      double sigma, jitter, offset;
    };
    const std::vector<Inst> inst = {
        {"Heron", 50, 1.5, 0.5, -20.0}, {"Lark", 40, 2.0, 3.0, 35.0}, {"Wren", 40, 2.5, 1.5, 4000.0}};
    std::string sc = "seed = 9131\n[star]\nname = \"Invented star Tessaly\"\n";
    for (const Inst& in : inst) {
      sc += fmt::format("[[instruments]]\nname = \"{}\"\nn_points = {}\nsigma_ms = {}\njitter_ms = {}\noffset_ms = {}\n",
                        in.name, in.n, in.sigma, in.jitter, in.offset);
    }
    sc += "[[planets]]\nperiod_d = 23.7\nK_ms = 12.0\n";
    const Simulated s = simulated(sc, "three_instruments");
    const auto t0 = std::chrono::steady_clock::now();
    const SearchResult sr = search_planets(problem_of(s.data), SearchOptions{});
    MESSAGE(sr.FullReport());
    MESSAGE(fmt::format("three-instrument search took {:.2f} s", seconds_since(t0)));
    REQUIRE(sr.selected_n_planets == 1);
    const FitResult& f = sr.best();
    // sigma_P with s = the pooled scatter (stated errors and jitters in quadrature).
    double ss = 0.0;
    for (const Inst& in : inst) ss += in.n * (in.sigma * in.sigma + in.jitter * in.jitter);
    const double pooled = std::sqrt(ss / static_cast<double>(s.data.size()));
    CHECK(std::fabs(planet_value(f, 0, 0) - 23.7) <
          3.0 * sigma_period(23.7, 12.0, pooled, s.data.size(), s.data.baseline_days()));
    REQUIRE(f.layout.fit_jitter);
    for (const Inst& in : inst) {
      const int i = instrument_index(f, in.name);
      const double off = f.theta[f.layout.offset_index(i)];
      const double jit = f.theta[f.layout.jitter_index(i)];
      // Total scatter of this instrument: stated error and jitter in quadrature.
      const double v = in.sigma * in.sigma + in.jitter * in.jitter;
      const double rms = std::sqrt(v);
      // Offset: error of a mean, rms / sqrt(n).
      const double s_off = rms / std::sqrt(static_cast<double>(in.n));
      // Jitter: the sample variance has sd v sqrt(2/n) (normal data), and by the delta
      // method sigma_jitter = v sqrt(2/n) / (2 jitter) -- large when the jitter is small
      // against the stated errors, where a factor 2 is the meaningful bound instead.
      const double s_jit = v * std::sqrt(2.0 / in.n) / (2.0 * in.jitter);
      MESSAGE(fmt::format("{}: offset {:.3f} (truth {}, 3 sigma {:.3f}); jitter {:.3f} (truth {}, 3 sigma {:.3f})",
                          in.name, off, in.offset, 3.0 * s_off, jit, in.jitter, 3.0 * s_jit));
      CHECK(std::fabs(off - in.offset) < 3.0 * s_off);
      const bool within_factor_2 = jit > 0.5 * in.jitter && jit < 2.0 * in.jitter;
      CHECK((within_factor_2 || std::fabs(jit - in.jitter) < 3.0 * s_jit));
    }
  }

  TEST_CASE("fit_recovery: a 0.83 d planet sampled nightly is found at its period, not the one-day alias") {
    const double P = 0.83, K = 6.0, sigma = 2.0;
    const double alias = 1.0 / std::fabs(1.0 / P - 1.0);   // 4.88 d
    const std::string sc = fmt::format(R"(seed = 5519
[star]
name = "Invented star Caldrith"
[observing]
span_days = 400
[[instruments]]
name = "Dunmore"
n_points = 70
sigma_ms = {}
[[planets]]
period_d = {}
K_ms = {}
)",
                                       sigma, P, K);
    const Simulated s = simulated(sc, "daily_alias");
    const auto t0 = std::chrono::steady_clock::now();
    const SearchResult sr = search_planets(problem_of(s.data), SearchOptions{});
    MESSAGE(sr.FullReport());
    MESSAGE(fmt::format("daily-alias search took {:.2f} s", seconds_since(t0)));
    REQUIRE(sr.selected_n_planets == 1);
    const FitResult& f = sr.best();
    const double Pf = planet_value(f, 0, 0);
    const double sP = sigma_period(P, K, sigma, s.data.size(), s.data.baseline_days());
    MESSAGE(fmt::format("P = {:.6f} (truth {}, alias {:.4f}), 3 sigma_P = {:.6f}", Pf, P, alias, 3.0 * sP));
    // The trap is real: the data's own periodogram has a strong peak at the alias (window
    // power at 1/d from nightly sampling), so the fit had a wrong answer to fall into.
    const PeriodogramResult pg = compute_periodogram(s.data, PeriodogramOptions{});
    auto max_power_near = [&](double f0) {
      double best = 0.0;
      for (std::size_t k = 0; k < pg.frequency_per_day.size(); ++k)
        if (std::fabs(pg.frequency_per_day[k] - f0) < 0.003) best = std::max(best, pg.power[k]);
      return best;
    };
    const double p_true = max_power_near(1.0 / P), p_alias = max_power_near(1.0 / alias);
    MESSAGE(fmt::format("periodogram power at P: {:.3f}, at the alias: {:.3f}", p_true, p_alias));
    CHECK(p_alias > 0.5 * p_true);
    CHECK(std::fabs(Pf - alias) > 1.0);   // not the alias
    CHECK(std::fabs(Pf - P) < 3.0 * sP);
  }

  TEST_CASE("fit_recovery: a 60 Jupiter-mass companion of a 0.3 solar-mass star gets m sin i to 1 %") {
    const double M = 0.3, m_mjup = 60.0, P = 40.0, e = 0.25, sigma = 3.0;
    const double m = m_mjup / msun_to_mjup(1.0);
    const double K = semi_amplitude_m_s(P, m, M, e);   // ~7.3 km/s
    const std::string sc = fmt::format(R"(seed = 777
[star]
name = "Invented star Mirelle"
mass_msun = {}
[[instruments]]
name = "Brake"
n_points = 50
sigma_ms = {}
[[planets]]
period_d = {}
K_ms = {:.17g}
ecc = {}
omega_deg = 130.0
)",
                                       M, sigma, P, K, e);
    const Simulated s = simulated(sc, "brown_dwarf");
    const auto t0 = std::chrono::steady_clock::now();
    const SearchResult sr = search_planets(problem_of(s.data), SearchOptions{});
    MESSAGE(sr.FullReport());
    MESSAGE(fmt::format("brown-dwarf search took {:.2f} s", seconds_since(t0)));
    REQUIRE(sr.selected_n_planets == 1);
    const FitResult& f = sr.best();
    const std::vector<PlanetSummary> ps = derive_planets(f, M);
    REQUIRE(ps.size() == 1);
    // sigma_K / K = sqrt(2/N) s / K ~ 1e-4 and m sin i scales at most linearly with K
    // (and with sqrt(1 - e^2), sigma_e of the same order), so 1 % is tens of sigma: what it
    // tests is the mass function solved exactly, m^3 = f (M + m)^2.
    MESSAGE(fmt::format("K = {:.2f} (truth {:.2f}); m sin i = {:.3f} M_J (truth {})", ps[0].K_ms, K, ps[0].msini_mjup,
                        m_mjup));
    CHECK(std::fabs(ps[0].msini_mjup - m_mjup) < 0.01 * m_mjup);
    // The test can tell: the m << M shortcut, m = (f M^2)^(1/3), on the same fitted orbit
    // is ~11 % low at this mass ratio (q ~ 0.19, factor (1 + q)^(-2/3)).
    const double f_msun = mass_function_msun(ps[0].period_d, ps[0].K_ms, ps[0].ecc);
    const double shortcut_mjup = msun_to_mjup(std::cbrt(f_msun * M * M));
    MESSAGE(fmt::format("m << M shortcut would give {:.3f} M_J", shortcut_mjup));
    CHECK(std::fabs(shortcut_mjup - m_mjup) > 0.05 * m_mjup);
  }
}
