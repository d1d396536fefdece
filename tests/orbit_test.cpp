#include <doctest/doctest.h>

#include <cmath>

#include "apsides/constants.h"
#include "apsides/orbit.h"

using namespace apsides;
using namespace apsides::constants;

TEST_SUITE("orbit") {
  TEST_CASE("orbit: IAU nominal constants are the resolutions' values") {
    // [P] IAU 2015 Resolution B3 nominal values; IAU 2012 Resolution B2 (au).
    CHECK(kGMSun == 1.3271244e20);
    CHECK(kRSun == 6.957e8);
    CHECK(kGMJupiter == 1.2668653e17);
    CHECK(kRJupiter == 7.1492e7);
    CHECK(kGMEarth == 3.986004e14);
    CHECK(kREarth == 6.3781e6);
    CHECK(kAu == 149597870700.0);
    CHECK(kDay == 86400.0);
    CHECK(kJulianYearDays == 365.25);
    // [L] ratios computed from the nominal values (CHECKS.md section 3).
    CHECK(kGMSun / kGMJupiter == doctest::Approx(1047.5655).epsilon(1e-7));
    CHECK(kGMSun / kGMEarth == doctest::Approx(332946.078).epsilon(1e-8));
  }

  TEST_CASE("orbit: K of 1 M_J around 1 M_sun in a Julian year is 28.43247 m/s") {
    // [L] IAU 2015 nominal GM values (astropy constants), CHECKS.md section 2.
    // That reference value is K = (2 pi G / P)^(1/3) m M^(-2/3), i.e. with the companion's
    // mass left out of the total (checked with /usr/bin/python3 from the nominal GM values);
    // our exact K uses (M + m)^(-2/3), so the two differ by (1 + m/M)^(2/3).
    const double mj = kGMJupiter / kGMSun;
    const double k_exact = semi_amplitude_m_s(kJulianYearDays, mj, 1.0, 0.0);
    const double k_light = k_exact * std::pow(1.0 + mj, 2.0 / 3.0);
    CHECK(k_light == doctest::Approx(28.43247).epsilon(2e-7));
    // The often-quoted 28.4329 m/s (older constants) within 2e-5 relative.
    CHECK(k_light == doctest::Approx(28.4329).epsilon(2e-5));
    CHECK(k_exact == doctest::Approx(28.41439).epsilon(2e-7));
  }

  TEST_CASE("orbit: Jupiter and Earth on the Sun") {
    const double mj = kGMJupiter / kGMSun, me = kGMEarth / kGMSun;
    // [L] CHECKS.md section 2: 12.4591 m/s circular, 12.4740 m/s with e = 0.0489.
    CHECK(semi_amplitude_m_s(4332.59, mj, 1.0, 0.0) == doctest::Approx(12.4591).epsilon(1e-5));
    CHECK(semi_amplitude_m_s(4332.59, mj, 1.0, 0.0489) == doctest::Approx(12.4740).epsilon(1e-5));
    // [L] Earth: 0.089458 m/s; "about 9 cm/s" [common practice].
    CHECK(semi_amplitude_m_s(365.256363, me, 1.0, 0.0) == doctest::Approx(0.089458).epsilon(1e-5));
    // P^2 ~ a^3 for Jupiter: a = 5.2 au at P = 11.86 yr [common practice].
    CHECK(semi_major_axis_au(11.86 * kJulianYearDays, 1.0, mj) == doctest::Approx(5.2).epsilon(0.01));
    CHECK(semi_major_axis_au(365.256363, 1.0, me) == doctest::Approx(1.0).epsilon(1e-4));
  }

  TEST_CASE("orbit: published minimum masses of 51 Peg b are recomputed") {
    // Tolerance: half a unit of the last published digit (CHECKS.md section 2).
    // [P] Marcy & Butler 1995, BAAS 27, #70.04: P = 4.21 d, K = 51.0 m/s, e = 0.02 -> 0.41 M_J.
    CHECK(std::fabs(msun_to_mjup(minimum_mass_msun(4.21, 51.0, 0.02, 1.0)) - 0.41) <= 0.005);
    // [P] Mayor & Queloz, IAU Circ. 6251: P = 4.2293 d, K = 59 m/s -> 0.47 M_J.
    CHECK(std::fabs(msun_to_mjup(minimum_mass_msun(4.2293, 59.0, 0.0, 1.0)) - 0.47) <= 0.005);
    // [P] Marcy et al. 1997, ApJ 481, 926: P = 4.231 d, K = 56 m/s -> 0.45 M_J.
    CHECK(std::fabs(msun_to_mjup(minimum_mass_msun(4.231, 56.0, 0.0, 1.0)) - 0.45) <= 0.005);
  }

  TEST_CASE("orbit: m sin i is exact for any mass ratio (brown dwarf on an M dwarf, equal masses)") {
    for (double ratio : {1e-6, 1e-3, 0.1, 0.5, 1.0, 3.0}) {
      const double M = 0.3, m = ratio * M;
      for (double e : {0.0, 0.5, 0.9}) {
        const double K = semi_amplitude_m_s(37.0, m, M, e);
        CAPTURE(ratio);
        CAPTURE(e);
        CHECK(minimum_mass_msun(37.0, K, e, M) == doctest::Approx(m).epsilon(1e-12));
      }
    }
  }

  TEST_CASE("orbit: transit probability and distances") {
    // R_sun / 1 au = 0.00465047 (nominal values); circular orbit.
    CHECK(transit_probability(1.0, 1.0, 0.0, 0.0) == doctest::Approx(kRSun / kAu).epsilon(1e-14));
    // Eccentric: (R/a)(1 + e sin w)/(1 - e^2) with w = 90 deg: transit near periastron.
    CHECK(transit_probability(1.0, 1.0, 0.5, kPi / 2) == doctest::Approx(kRSun / kAu * 1.5 / 0.75).epsilon(1e-14));
    CHECK(periastron_distance(2.0, 0.25) == 1.5);
    CHECK(apastron_distance(2.0, 0.25) == 2.5);
  }

  TEST_CASE("orbit: host mass from several companions' (P, a) by Kepler's third law") {
    const double M = 0.8;
    std::vector<double> P{10.0, 40.0, 300.0}, a, da;
    for (double p : P) {
      a.push_back(semi_major_axis_au(p, M, 0.0));
      da.push_back(0.01 * a.back());
    }
    HostMassEstimate est = host_mass_from_orbits(P, a, da);
    CHECK(est.mass_msun == doctest::Approx(M).epsilon(1e-12));
    // Three 1 % errors in a: sigma(ln M) = 3 x 1 % / sqrt(3).
    CHECK(est.mass_err_msun == doctest::Approx(M * 0.03 / std::sqrt(3.0)).epsilon(1e-9));
    CHECK(est.dof == 2);
  }
}
