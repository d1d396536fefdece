// Activity indicators: correlations against scipy.stats, indicator periodograms against
// astropy's LombScargle on the velocities' grid, shared-peak flags and the rotation hint on
// a constructed star.
#include <doctest/doctest.h>

#include <cmath>
#include <random>
#include <sstream>

#include <fmt/format.h>
#include <nlohmann/json.hpp>

#include "apsides/activity.h"
#include "apsides/error.h"
#include "test_support.h"

namespace t = apsides::test;
using namespace apsides;

namespace {

std::string list(const std::vector<double>& v) {
  std::string s = "[";
  for (std::size_t i = 0; i < v.size(); ++i) s += fmt::format("{}{:.17g}", i ? "," : "", v[i]);
  return s + "]";
}

nlohmann::json python_json(const std::string& code) {
  const t::CommandResult r = t::run_python(code);
  REQUIRE_MESSAGE(r.status == 0, r.output);
  return nlohmann::json::parse(r.output.substr(r.output.find('{')));
}

// A star rotating in `prot` days: velocities = activity (sinusoid at prot and a weaker
// prot/2) + a planet at 9.3 d; an S-index following the activity at prot. Two instruments
// with their own velocity offsets and S-index zero points.
VelocityData active_star(double prot, unsigned seed) {
  std::mt19937_64 rng(seed);
  std::normal_distribution<double> g(0.0, 1.0);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  VelocityData d;
  d.instrument_names = {"north", "south"};
  IndicatorSeries s;
  s.name = "sindex";
  for (int i = 0; i < 160; ++i) {
    const double t = 300.0 * u(rng) + 0.3 * g(rng);
    const int k = i % 2;
    const double act = 6.0 * std::sin(2 * M_PI * t / prot) + 2.0 * std::sin(4 * M_PI * t / prot + 1.0);
    d.time_days.push_back(t);
    d.velocity_m_s.push_back(act + 3.0 * std::sin(2 * M_PI * t / 9.3) + (k ? 20.0 : -5.0) + 1.0 * g(rng));
    d.uncertainty_m_s.push_back(1.0);
    d.instrument.push_back(k);
    d.origin.push_back(fmt::format("synthetic:{}", i + 1));
    s.value.push_back((k ? 0.52 : 0.48) + 0.01 * std::sin(2 * M_PI * t / prot) + 0.002 * g(rng));
  }
  d.indicators.push_back(s);
  return d;
}

}  // namespace

TEST_SUITE("activity") {
  TEST_CASE("Pearson and Spearman with p-values agree with scipy.stats (ties included)") {
    std::mt19937_64 rng(7);
    std::normal_distribution<double> g(0.0, 1.0);
    std::vector<double> x, y;
    for (int i = 0; i < 40; ++i) {
      x.push_back(std::round(3.0 * g(rng)));  // rounded: many ties, Spearman's average ranks
      y.push_back(0.4 * x.back() + g(rng));
    }
    const IndicatorCorrelation c = correlate(x, y);
    // Outside reference: scipy.stats.pearsonr / spearmanr (two-sided).
    const auto ref = python_json("import json, scipy.stats as s\nx=" + list(x) + "\ny=" + list(y) +
                                 "\np=s.pearsonr(x,y); q=s.spearmanr(x,y)\n"
                                 "print(json.dumps({'r':p[0],'pr':p[1],'rho':q[0],'prho':q[1]}))\n");
    CHECK(c.n == 40);
    CHECK(c.pearson_r == doctest::Approx(ref["r"].get<double>()).epsilon(1e-12));
    CHECK(c.pearson_p == doctest::Approx(ref["pr"].get<double>()).epsilon(1e-8));
    CHECK(c.spearman_rho == doctest::Approx(ref["rho"].get<double>()).epsilon(1e-12));
    CHECK(c.spearman_p == doctest::Approx(ref["prho"].get<double>()).epsilon(1e-8));
    // NaN pairs are skipped; fewer than 3 pairs give NaN, not a number.
    CHECK(correlate({1, 2, NAN, 4}, {2, 1, 5, 3}).n == 3);
    CHECK(std::isnan(correlate({1, 2}, {2, 1}).pearson_r));
  }

  TEST_CASE("an indicator's periodogram is GLS on the velocities' grid (astropy LombScargle, one instrument)") {
    VelocityData d = active_star(27.0, 3);
    // One instrument, so one floating mean: astropy's LombScargle(fit_mean=True) is the
    // same statistic (standard normalisation, weights 1/dy^2).
    for (int& k : d.instrument) k = 0;
    d.instrument_names = {"north"};
    IndicatorSeries& s = d.indicators[0];
    for (std::size_t i = 0; i < s.value.size(); ++i) s.uncertainty.push_back(0.002 + 0.001 * (i % 3));
    PeriodogramOptions po;
    po.min_period_days = 1.5;
    const PeriodogramResult v = compute_periodogram(d, po);
    FrequencyGrid grid{v.min_frequency_per_day, v.frequency_step_per_day, v.frequency_per_day.size()};
    const IndicatorPeriodogram ip = indicator_periodogram(d, "sindex", grid, po);
    REQUIRE(ip.periodogram.frequency_per_day.size() == v.frequency_per_day.size());
    CHECK(ip.periodogram.frequency_per_day.front() == v.frequency_per_day.front());
    CHECK(ip.periodogram.frequency_per_day.back() == v.frequency_per_day.back());
    CHECK(ip.weighted);
    std::vector<double> f, p;
    for (std::size_t k = 0; k < grid.nf; k += 97) {
      f.push_back(ip.periodogram.frequency_per_day[k]);
      p.push_back(ip.periodogram.power[k]);
    }
    const auto ref = python_json(
        "import json, numpy as np\nfrom astropy.timeseries import LombScargle\n"
        "t=np.array(" + list(d.time_days) + ")\ny=np.array(" + list(s.value) + ")\ndy=np.array(" +
        list(s.uncertainty) + ")\nf=np.array(" + list(f) + ")\n"
        "print(json.dumps({'p': LombScargle(t,y,dy).power(f, method='cython').tolist()}))\n");
    double worst = 0;
    for (std::size_t k = 0; k < p.size(); ++k) worst = std::max(worst, std::abs(p[k] - ref["p"][k].get<double>()));
    CHECK(worst < 1e-8);
  }

  TEST_CASE("the rotation peak is flagged in the velocities, the planet is not; the hint finds the rotation") {
    const VelocityData d = active_star(27.0, 11);
    PeriodogramOptions po;
    po.min_period_days = 1.5;
    po.n_peaks = 8;
    const PeriodogramResult v = compute_periodogram(d, po);
    const ActivityResult a = analyze_activity(d, v, po, ActivityOptions{});
    REQUIRE(a.periodograms.size() == 1);
    CHECK(a.rotation_hint_days == doctest::Approx(27.0).epsilon(0.03));
    bool rotation_flagged = false, harmonic_flagged = false, planet_flagged = false;
    for (const SharedSignal& s : a.shared) {
      if (std::abs(s.velocity_period_days - 27.0) < 1.0) rotation_flagged = !s.harmonic;
      if (std::abs(s.velocity_period_days - 13.5) < 0.3) harmonic_flagged = s.harmonic;
      if (std::abs(s.velocity_period_days - 9.3) < 0.2) planet_flagged = true;
    }
    CHECK(rotation_flagged);
    CHECK(harmonic_flagged);
    CHECK_FALSE(planet_flagged);
    // Per-instrument correlations of the velocities with the S-index: strong and positive.
    REQUIRE(a.correlations.size() == 2);
    for (const IndicatorCorrelation& c : a.correlations) {
      CHECK(c.pearson_r > 0.5);
      CHECK(c.pearson_p < 1e-6);
    }
    CHECK(rotation_caution(27.2, a.rotation_hint_days).find("rotation period") != std::string::npos);
    CHECK(rotation_caution(13.6, a.rotation_hint_days).find("P_rot/2") != std::string::npos);
    CHECK(rotation_caution(9.3, a.rotation_hint_days).empty());
  }

  TEST_CASE("an indicator the data do not have is an input error naming the ones present") {
    const VelocityData d = active_star(27.0, 5);
    PeriodogramOptions po;
    po.min_period_days = 1.5;
    const PeriodogramResult v = compute_periodogram(d, po);
    FrequencyGrid grid{v.min_frequency_per_day, v.frequency_step_per_day, v.frequency_per_day.size()};
    CHECK_THROWS_AS(indicator_periodogram(d, "fwhm", grid, po), InputError);
    ActivityOptions bad;
    bad.fap_level = 2;
    CHECK_THROWS_AS(analyze_activity(d, v, po, bad), InputError);
  }
}
