// The TRAPPIST-1 transit-timing-only N-body MAP fit of all seven planets (real data,
// tests/data/real/trappist1_transits_agol2021.csv). Its own `_long` suite (ctest label
// long): minutes on two cores. Run time is printed (MESSAGE) and recorded in README.md.
#include <doctest/doctest.h>

#include <chrono>
#include <cmath>
#include <map>
#include <string>

#include "apsides/data.h"
#include "apsides/nbody_model.h"
#include "test_support.h"

using namespace apsides;

TEST_SUITE("nbody_fit_long") {
  TEST_CASE("nbody_fit: TRAPPIST-1 transit times alone give masses within 2 sigma of Agol et al. 2021") {
    TransitFileOptions fo;
    const TransitData tr = read_transit_file(test::real_data("trappist1_transits_agol2021.csv"), fo);
    REQUIRE(tr.size() == 447);
    NbodySettings st;
    st.n_planets = 7;
    // M_star = 0.0898 M_sun (Agol et al. 2021, tests/data/real/README.md [M]).
    const NbodyProblem pb = nbody_problem(VelocityData{}, tr, 0.0898, st);
    NbodyFitOptions opt;
    opt.mass_starts = 1;
    opt.max_evaluations = 8000;
    const auto t0 = std::chrono::steady_clock::now();
    const NbodyFitResult r = fit_nbody_map(pb, opt);
    const double secs = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    MESSAGE(r.FullReport());
    MESSAGE("TRAPPIST-1 MAP run time: " << secs << " s");
    REQUIRE(std::isfinite(r.log_posterior));
    // Published N-body transit-timing masses (Earth masses) and 1-sigma errors, Agol et
    // al. 2021 Table (tests/data/real/README.md).
    const std::map<std::string, std::pair<double, double>> pub{
        {"b", {1.374, 0.069}}, {"c", {1.308, 0.056}}, {"d", {0.388, 0.012}}, {"e", {0.692, 0.022}},
        {"f", {1.039, 0.031}}, {"g", {1.321, 0.038}}, {"h", {0.325, 0.020}}};
    for (std::size_t p = 0; p < r.planet_labels.size(); ++p) {
      const auto& [m, s] = pub.at(r.planet_labels[p]);
      MESSAGE(r.planet_labels[p] << ": " << r.mass_mearth[p] << " M_earth vs " << m << " +- " << s << " ("
                                 << (r.mass_mearth[p] - m) / s << " sigma)");
      CHECK(std::abs(r.mass_mearth[p] - m) <= 2.0 * s);
    }
  }
}
