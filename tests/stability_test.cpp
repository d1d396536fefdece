// Stability criteria (include/apsides/stability.h): Hill separation and Gladman's
// criterion, AMD stability with its MMR-overlap refinement, MEGNO, and the posterior-draw
// summary — against the papers' formulas evaluated independently (scipy via
// /usr/bin/python3), their known limits, and the expected behaviour of MEGNO.
#include <doctest/doctest.h>
#include <fmt/format.h>

#include <cmath>
#include <sstream>
#include <string>
#include <vector>

#include "apsides/constants.h"
#include "apsides/nbody.h"
#include "apsides/stability.h"
#include "test_support.h"

using namespace apsides;

namespace {

std::vector<double> numbers(const std::string& text) {
  std::vector<double> v;
  std::istringstream in(text);
  double x;
  while (in >> x) v.push_back(x);
  return v;
}

NbodySystem pair(double mu1, double mu2, double p1, double p2, double e1 = 0.0, double e2 = 0.0) {
  NbodySystem s;
  s.star_mass_msun = 1.0;
  s.planets = {NbodyPlanet::from_elements(mu1, p1, e1, 0.3, 1.0), NbodyPlanet::from_elements(mu2, p2, e2, 2.0, 3.0)};
  return s;
}

}  // namespace

TEST_SUITE("stability") {
  TEST_CASE("stability: mutual Hill separation and Gladman's criterion, evaluated independently") {
    // Gladman 1993: R_H = ((m1 + m2) / 3 M)^(1/3) (a1 + a2) / 2, Delta = (a2 - a1) / R_H, and
    // his Eq. 21 for eccentric coplanar orbits; evaluated here in numpy from the periods with
    // the Jacobi interior masses of nbody.h (a^3 = G M eta P^2 / 4 pi^2, IAU nominal GM_sun).
    const NbodySystem s = pair(1e-5, 2e-5, 100.0, 150.0, 0.1, 0.05);
    const HillReport h = mutual_hill_separations(s);
    REQUIRE(h.pairs.size() == 1);
    const auto py = test::run_python(fmt::format(R"PY(
import numpy as np
G = 1.3271244e20 * 86400.0**2 / 149597870700.0**3
mu1, mu2, P1, P2, e1, e2 = 1e-5, 2e-5, 100.0, 150.0, 0.1, 0.05
a1 = (G * (1 + mu1) * P1**2 / (4 * np.pi**2)) ** (1/3)
a2 = (G * (1 + mu1 + mu2) * P2**2 / (4 * np.pi**2)) ** (1/3)
rh = ((mu1 + mu2) / 3) ** (1/3) * (a1 + a2) / 2
al = mu1 + mu2; d = np.sqrt(a2 / a1); g1 = np.sqrt(1 - e1**2); g2 = np.sqrt(1 - e2**2)
lhs = al**-3 * (mu1 + mu2 / d**2) * (mu1 * g1 + mu2 * g2 * d)**2
rhs = 1 + 3**(4/3) * mu1 * mu2 / al**(4/3)
print("%.17g %.17g %.17g" % (rh, (a2 - a1) / rh, lhs / rhs))
)PY"));
    REQUIRE(py.status == 0);
    const auto v = numbers(py.output);
    REQUIRE(v.size() == 3);
    CHECK(h.pairs[0].mutual_hill_radius_au == doctest::Approx(v[0]).epsilon(1e-12));
    CHECK(h.pairs[0].separation_hill == doctest::Approx(v[1]).epsilon(1e-12));
    CHECK(h.pairs[0].gladman_ratio == doctest::Approx(v[2]).epsilon(1e-12));
    const bool beyond = v[1] > 2.0 * std::sqrt(3.0);
    CHECK(h.pairs[0].beyond_two_sqrt3 == beyond);

    // Gladman's criterion at e = 0 reduces to Delta > 2 sqrt 3 as the masses go to 0 (his
    // circular result): find the critical period ratio by bisection.
    const double mu = 1e-9;
    double lo = 1.0001, hi = 1.1;
    for (int it = 0; it < 100; ++it) {
      const double mid = 0.5 * (lo + hi);
      if (mutual_hill_separations(pair(mu, mu, 10.0, 10.0 * mid)).pairs[0].hill_stable) hi = mid;
      else lo = mid;
    }
    const double crit = mutual_hill_separations(pair(mu, mu, 10.0, 10.0 * hi)).pairs[0].separation_hill;
    CHECK(crit == doctest::Approx(2.0 * std::sqrt(3.0)).epsilon(0.005));
    // Eccentricity makes a pair less stable (a lower ratio).
    const double r0 = mutual_hill_separations(pair(1e-4, 1e-4, 10.0, 13.0)).pairs[0].gladman_ratio;
    const double r1 = mutual_hill_separations(pair(1e-4, 1e-4, 10.0, 13.0, 0.1, 0.1)).pairs[0].gladman_ratio;
    CHECK(r1 < r0);
    // Three planets: two adjacent pairs, in period order whatever the input order.
    NbodySystem three = pair(1e-5, 1e-5, 40.0, 10.0);
    three.planets.push_back(NbodyPlanet::from_elements(1e-5, 20.0, 0.0, 0.0, 2.0));
    const HillReport h3 = mutual_hill_separations(three);
    REQUIRE(h3.pairs.size() == 2);
    CHECK(h3.pairs[0].inner == 1);
    CHECK(h3.pairs[0].outer == 2);
    CHECK(h3.pairs[1].inner == 2);
    CHECK(h3.pairs[1].outer == 0);
  }

  TEST_CASE("stability: the critical AMD is the least AMD of crossing orbits (scipy minimisation)") {
    // Laskar & Petit 2017: C_c(alpha, gamma) is the minimum of
    // gamma sqrt(alpha) (1 - sqrt(1 - e^2)) + 1 - sqrt(1 - e'^2) over orbits that touch,
    // alpha (1 + e) = 1 - e'. Brute-force bounded minimisation in scipy, independent of the
    // root equation used in stability.cpp.
    const std::vector<std::pair<double, double>> cases{{0.5, 1.0}, {0.8, 0.1}, {0.9, 10.0}, {0.3, 3.0}, {0.95, 1.0}};
    std::string list;
    for (const auto& [a, g] : cases) list += fmt::format("({}, {}),", a, g);
    const auto py = test::run_python(fmt::format(R"PY(
import numpy as np
from scipy.optimize import minimize_scalar
for al, ga in [{}]:
    f = lambda e: ga * np.sqrt(al) * (1 - np.sqrt(1 - e*e)) + 1 - np.sqrt(1 - (1 - al - al*e)**2)
    r = minimize_scalar(f, bounds=(0.0, (1 - al) / al if (1 - al) / al < 1 else 1.0), method="bounded", options={{"xatol": 1e-13}})
    print("%.15g" % r.fun)
)PY", list));
    REQUIRE(py.status == 0);
    const auto v = numbers(py.output);
    REQUIRE(v.size() == cases.size());
    for (std::size_t i = 0; i < cases.size(); ++i)
      CHECK(critical_amd(cases[i].first, cases[i].second) == doctest::Approx(v[i]).epsilon(1e-8));
  }

  TEST_CASE("stability: AMD of a system, its beta, and the MMR-overlap limit") {
    // AMD = sum Lambda_k - |sum G_k| (Laskar & Petit 2017), evaluated in numpy with the
    // Jacobi semi-major axes; two inclined eccentric planets.
    NbodySystem s;
    s.planets = {NbodyPlanet::from_elements(3e-5, 20.0, 0.1, 0.3, 1.0, 1.50, 0.2),
                 NbodyPlanet::from_elements(1e-5, 50.0, 0.2, 2.0, 3.0, 1.40, 0.5)};
    const AmdReport a = amd_stability(s);
    const auto py = test::run_python(R"PY(
import numpy as np
G = 1.3271244e20 * 86400.0**2 / 149597870700.0**3
mu = [3e-5, 1e-5]; P = [20.0, 50.0]; e = [0.1, 0.2]; inc = [1.50, 1.40]; node = [0.2, 0.5]
eta = 1.0; lam = []; Gv = np.zeros(3); a = []
for k in range(2):
    eta += mu[k]
    ak = (G * eta * P[k]**2 / (4 * np.pi**2)) ** (1/3); a.append(ak)
    lam.append(mu[k] * np.sqrt(ak))
    n = np.array([np.sin(node[k]) * np.sin(inc[k]), -np.cos(node[k]) * np.sin(inc[k]), np.cos(inc[k])])
    Gv += lam[k] * np.sqrt(1 - e[k]**2) * n
amd = sum(lam) - np.linalg.norm(Gv)
print("%.17g %.17g %.17g" % (amd, amd / lam[1], amd / lam[0]))
)PY");
    REQUIRE(py.status == 0);
    const auto v = numbers(py.output);
    REQUIRE(v.size() == 3);
    CHECK(a.amd == doctest::Approx(v[0]).epsilon(1e-9));
    REQUIRE(a.pairs.size() == 1);
    CHECK(a.pairs[0].relative_amd == doctest::Approx(v[1]).epsilon(1e-9));
    CHECK(a.beta_star == doctest::Approx(v[2]).epsilon(1e-9));
    CHECK(a.pairs[0].beta == doctest::Approx(a.pairs[0].relative_amd / a.pairs[0].critical_amd).epsilon(1e-12));
    const bool expected_stable = a.pairs[0].beta < 1.0 && a.beta_star < 1.0;
    CHECK(a.amd_stable == expected_stable);

    // Circular coplanar orbits have no AMD: AMD-stable at any separation, but MMR-unstable
    // once first-order resonances overlap. The overlap edge g = 0 is the circular-orbit
    // criterion 1 - alpha = 1.46 eps^(2/7) (Deck, Payne & Holman 2013 [M]), the limit the
    // formulas of Petit, Laskar & Boue 2017 were built to reproduce.
    for (double eps : {1e-6, 1e-5, 1e-4, 1e-3}) {
      double lo = 0.5, hi = 0.99999;
      for (int it = 0; it < 200; ++it) {
        const double mid = 0.5 * (lo + hi);
        if (mmr_overlap_eccentricity(mid, eps) > 0.0) lo = mid;
        else hi = mid;
      }
      CHECK((1.0 - lo) == doctest::Approx(1.46 * std::pow(eps, 2.0 / 7.0)).epsilon(0.01));
    }
    const AmdReport close = amd_stability(pair(1e-4, 1e-4, 10.0, 11.5));
    CHECK(close.amd_stable);
    CHECK_FALSE(close.amd_stable_mmr);
    const AmdReport wide = amd_stability(pair(1e-4, 1e-4, 10.0, 25.0, 0.05, 0.05));
    CHECK(wide.amd_stable);
    CHECK(wide.amd_stable_mmr);
    // Strongly eccentric crossing-prone pair: AMD-unstable.
    const AmdReport hot = amd_stability(pair(1e-4, 1e-4, 10.0, 25.0, 0.6, 0.5));
    CHECK_FALSE(hot.amd_stable);
    // C_MMR: below C_c when the pair is close, and the least AMD with |e' - e| = g at small e.
    const double alpha = 0.8, gamma = 1.0, eps = 2e-4;
    const double g = mmr_overlap_eccentricity(alpha, eps);
    const double gs = gamma * std::sqrt(alpha);
    CHECK(critical_amd_mmr(alpha, gamma, eps) == doctest::Approx(g * g * gs / (2.0 * (1.0 + gs))));
  }

  TEST_CASE("stability: MEGNO is 2 for a regular pair and grows for a chaotic one") {
    // Cincotta & Simo 2000: <Y> -> 2 for quasi-periodic motion, ~ lambda t / 2 for chaos.
    // A widely separated pair (Delta ~ 70 mutual Hill radii) is regular; two planets of
    // 1e-4 stellar masses 1.6 mutual Hill radii apart (inside Gladman's 2 sqrt 3) are
    // chaotic. The encounter check is off for the chaotic case so MEGNO can grow until the
    // pair breaks up (an ejection after ~100 orbits).
    MegnoOptions o;
    o.inner_orbits = 2000.0;
    NbodySystem wide = pair(3e-6, 3e-6, 10.0, 40.0, 0.02, 0.02);
    const MegnoResult r = megno(wide, o);
    REQUIRE(r.status == NbodyStatus::kOk);
    CHECK(r.survived);
    CHECK(r.regular);
    CHECK(r.mean_megno == doctest::Approx(2.0).epsilon(0.05));
    CHECK(r.inner_orbits_done == doctest::Approx(2000.0).epsilon(1e-3));
    MESSAGE(r.BriefReport());
    // Two Jupiters at 100 d and 250 d: regular too (<Y> converges more slowly with
    // stronger coupling: 2.3 after 2000 orbits, 1.9 after 5000).
    NbodySystem jup = pair(1e-3, 1e-3, 100.0, 250.0, 0.05, 0.05);
    const MegnoResult rj = megno(jup, o);
    CHECK(rj.regular);
    MESSAGE(rj.BriefReport());

    NbodySystem chaos = pair(1e-4, 1e-4, 10.0, 11.0);
    MegnoOptions oc = o;
    oc.inner_orbits = 500.0;
    oc.encounter_hill_radii = 0.0;
    const MegnoResult c = megno(chaos, oc);
    MESSAGE(c.BriefReport());
    CHECK(c.mean_megno > 5.0);
    CHECK_FALSE(c.regular);
    // With the default encounter check the same pair fails survival.
    const MegnoResult ce = megno(chaos, o);
    CHECK_FALSE(ce.survived);
    CHECK(ce.status == NbodyStatus::kCloseEncounter);
    // Same seed, same number.
    CHECK(megno(wide, o).mean_megno == r.mean_megno);
    // Bad options are reported, not thrown.
    MegnoOptions bad;
    bad.inner_orbits = -1.0;
    const MegnoResult rb = megno(wide, bad);
    CHECK(rb.status == NbodyStatus::kInvalidSystem);
    CHECK(rb.message == "inner_orbits = -1: must be in (0, 1e9]");
  }

  TEST_CASE("stability: fractions over posterior draws, independent of the thread count") {
    std::vector<NbodySystem> draws;
    for (int i = 0; i < 8; ++i) {
      const double ratio = 1.08 + 0.12 * i;  // from chaotic (close) to wide
      draws.push_back(pair(1e-4, 1e-4, 10.0, 10.0 * ratio, 0.01 * (i % 3), 0.02));
    }
    NbodySystem invalid = pair(1e-4, 1e-4, 10.0, 20.0);
    invalid.planets[0].mass_ratio = -1.0;
    draws.push_back(invalid);
    StabilityOptions opt;
    opt.megno.inner_orbits = 300.0;
    opt.threads = 1;
    const StabilitySummary one = assess_stability(draws, opt);
    opt.threads = 3;
    const StabilitySummary three = assess_stability(draws, opt);
    REQUIRE(one.per_draw.size() == draws.size());
    CHECK(one.invalid_draws == 1);
    CHECK_FALSE(one.per_draw.back().valid);
    std::size_t survived = 0, hill = 0;
    for (std::size_t i = 0; i < draws.size(); ++i) {
      CHECK(one.per_draw[i].survived == three.per_draw[i].survived);
      const bool same_megno = one.per_draw[i].mean_megno == three.per_draw[i].mean_megno ||
                              (std::isnan(one.per_draw[i].mean_megno) && std::isnan(three.per_draw[i].mean_megno));
      CHECK(same_megno);
      CHECK(one.per_draw[i].amd_mmr == three.per_draw[i].amd_mmr);
      survived += one.per_draw[i].survived;
      hill += one.per_draw[i].hill_two_sqrt3;
      // Each criterion agrees with its own function.
      if (one.per_draw[i].valid)
        CHECK(one.per_draw[i].hill_two_sqrt3 == mutual_hill_separations(draws[i]).all_beyond_two_sqrt3);
    }
    CHECK(one.fraction_survived == doctest::Approx(static_cast<double>(survived) / 9.0));
    CHECK(one.fraction_hill_two_sqrt3 == doctest::Approx(static_cast<double>(hill) / 9.0));
    CHECK(one.fraction_survived == three.fraction_survived);
    // The closest draw is Hill-unstable and does not survive; the widest is fine.
    CHECK_FALSE(one.per_draw[0].hill_two_sqrt3);
    CHECK_FALSE(one.per_draw[0].survived);
    CHECK(one.per_draw[7].survived);
    CHECK(one.per_draw[7].megno_regular);
    MESSAGE(one.BriefReport());
    // Criteria can be switched off: their fractions are NaN.
    StabilityOptions cheap;
    cheap.nbody = false;
    const StabilitySummary c = assess_stability(draws, cheap);
    CHECK(std::isnan(c.fraction_survived));
    CHECK(c.fraction_amd == doctest::Approx(one.fraction_amd));
  }
}
