#include <doctest/doctest.h>

#include <cmath>
#include <string>
#include <vector>

#include "apsides/constants.h"
#include "apsides/error.h"
#include "apsides/model_priors.h"
#include "apsides/parameter_blocks.h"
#include "apsides/project.h"
#include "test_support.h"

using namespace apsides;

namespace {
// Two instruments, 12 points, hand-made so every statistic is easy to state.
VelocityData small_data() {
  VelocityData d;
  d.reference_epoch_bjd = 2459000.0;
  d.instrument_names = {"north", "south"};
  for (int i = 0; i < 12; ++i) {
    d.time_days.push_back(-300.0 + 50.0 * i);  // baseline 550 d
    d.velocity_m_s.push_back((i % 2 == 0 ? 10.0 : -1000.0) + 3.0 * std::sin(0.7 * i));
    d.uncertainty_m_s.push_back(1.0 + 0.25 * (i % 3));
    d.instrument.push_back(i % 2);
    d.origin.push_back("test");
  }
  return d;
}

PriorSpec spec(const std::string& name, const Prior& p) {
  PriorSpec s;
  s.parameter = name;
  s.prior = p;
  return s;
}
}  // namespace

TEST_SUITE("model_priors") {
  TEST_CASE("model_priors: defaults follow the documented rules on a small data set") {
    const VelocityData d = small_data();
    ModelLayout L{2, 2, Trend::kLinear, true};
    const ModelPriors mp = build_priors(d, L, SearchSettings{}, ModelSettings{}, {});
    REQUIRE(mp.parameter.size() == L.n_params());
    REQUIRE(mp.eccentricity.size() == 2u);
    // Period: log-uniform(0.5, 3 x baseline = 1650).
    CHECK(mp.parameter[0].kind == PriorKind::kLogUniform);
    CHECK(mp.parameter[0].lower() == 0.5);
    CHECK(mp.parameter[0].upper() == doctest::Approx(1650.0));
    // K: modified Jeffreys with knee = median error (values 1, 1.25, 1.5 repeated -> 1.25).
    CHECK(mp.parameter[1].kind == PriorKind::kModifiedJeffreys);
    CHECK(mp.parameter[1].a == doctest::Approx(1.25));
    // t_conj window of width P_max centred on the middle of the data (t = -25).
    CHECK(mp.parameter[4].lower() == doctest::Approx(-25.0 - 825.0));
    CHECK(mp.parameter[4].upper() == doctest::Approx(-25.0 + 825.0));
    // Offsets centred on each instrument's weighted mean; jitter half-normal.
    CHECK(mp.parameter[L.offset_index(1)].kind == PriorKind::kUniform);
    const double mid1 = 0.5 * (mp.parameter[L.offset_index(1)].lower() + mp.parameter[L.offset_index(1)].upper());
    CHECK(mid1 == doctest::Approx(-1000.0).epsilon(0.01));
    CHECK(mp.parameter[L.jitter_index(0)].kind == PriorKind::kHalfNormal);
    CHECK(mp.parameter[L.trend_index(1)].kind == PriorKind::kUniform);
    // The default eccentricity prior: uniform in the sqrt(e) disc, e < 0.99.
    CHECK(mp.eccentricity[0].kind == EccentricityPriorKind::kUniform);
    CHECK(mp.eccentricity[0].max_ecc == 0.99);
  }

  TEST_CASE("model_priors: the uniform disc density is 1 / (pi e_max) in (h, k) (CHECKS.md section 7)") {
    // Uniform (sqrt e cos w, sqrt e sin w) in the unit disc <=> e, w uniform; area element
    // 1/2 de dw, so p(h, k) = 1/(pi e_max) [CHECKS.md section 7].
    const VelocityData d = small_data();
    const ModelPriors mp = build_priors(d, ModelLayout{1, 2, Trend::kNone, true}, {}, {}, {});
    CHECK(mp.eccentricity[0].log_density_hk(0.3, -0.2) == doctest::Approx(-std::log(constants::kPi * 0.99)));
    CHECK(std::isinf(mp.eccentricity[0].log_density_hk(0.8, 0.7)));
  }

  TEST_CASE("model_priors: the Kipping beta override gives scipy's density (CHECKS.md section 7)") {
    // [L, scipy] Beta(0.867, 3.03): pdf(0.1) = 2.567413. p(h, k) = pdf(e) / (cdf(0.99) pi).
    const VelocityData d = small_data();
    ModelSettings ms;
    ms.eccentricity = EccentricityPriorKind::kBeta;
    const ModelPriors mp = build_priors(d, ModelLayout{1, 2, Trend::kNone, true}, {}, ms, {});
    const double h = std::sqrt(0.1);
    const test::CommandResult r = test::run_python(
        "from scipy.stats import beta\nprint(repr(beta(0.867, 3.03).cdf(0.99)))\n");
    REQUIRE(r.status == 0);
    const double cdf99 = std::stod(r.output);
    CHECK(mp.eccentricity[0].log_density_hk(h, 0.0) ==
          doctest::Approx(std::log(2.567413 / (cdf99 * constants::kPi))).epsilon(1e-6));
  }

  TEST_CASE("model_priors: [search] period limits and [priors] overrides take effect") {
    const VelocityData d = small_data();
    SearchSettings ss;
    ss.min_period_d = 2.0;
    ss.max_period_d = 100.0;
    ModelLayout L{2, 2, Trend::kNone, true};
    std::vector<PriorSpec> ov = {spec("b.period_d", Prior::truncated_normal(3.5, 0.01, 3.0, 4.0)),
                                 spec("south.jitter_ms", Prior::log_uniform(0.1, 10.0)),
                                 spec("north.offset_ms", Prior::uniform(-50.0, 50.0))};
    PriorSpec ecc;
    ecc.parameter = "c.eccentricity";
    ecc.eccentricity = EccentricityPrior{EccentricityPriorKind::kCircular, 0.867, 3.03, 0.99};
    ov.push_back(ecc);
    const ModelPriors mp = build_priors(d, L, ss, ModelSettings{}, ov);
    CHECK(mp.parameter[0].kind == PriorKind::kTruncatedNormal);
    // t_conj of b follows its (overridden) period prior: window width 4 d.
    CHECK(mp.parameter[4].upper() - mp.parameter[4].lower() == doctest::Approx(4.0));
    CHECK(mp.parameter[5].upper() == doctest::Approx(100.0));
    CHECK(mp.parameter[L.jitter_index(1)].kind == PriorKind::kLogUniform);
    CHECK(mp.parameter[L.offset_index(0)].upper() == 50.0);
    CHECK(mp.eccentricity[1].kind == EccentricityPriorKind::kCircular);
    CHECK(mp.parameter[7].kind == PriorKind::kFixed);
  }

  TEST_CASE("model_priors: an override for a planet of a larger model of the same run is skipped") {
    const VelocityData d = small_data();
    const std::vector<PriorSpec> ov = {spec("c.period_d", Prior::log_uniform(10.0, 20.0))};
    CHECK_NOTHROW(build_priors(d, ModelLayout{1, 2, Trend::kNone, true}, {}, {}, ov, 3));
    CHECK_THROWS_WITH_AS(build_priors(d, ModelLayout{1, 2, Trend::kNone, true}, {}, {}, ov),
                         doctest::Contains("priors.c.period_d: this model has no parameter"), InputError);
  }

  TEST_CASE("model_priors: an override's error names the project file and line of its entry") {
    const VelocityData d = small_data();
    PriorSpec bad = spec("b.K_ms", Prior::uniform(-5.0, 5.0));
    bad.origin = "system.toml:17";
    CHECK_THROWS_WITH_AS(build_priors(d, ModelLayout{1, 2, Trend::kNone, true}, {}, {}, {bad}),
                         doctest::Contains("system.toml:17: priors.b.K_ms: uniform(-5, 5) allows negative values"),
                         InputError);
  }

  TEST_CASE("model_priors: impossible or misplaced overrides are input errors naming the key") {
    const VelocityData d = small_data();
    const ModelLayout L{1, 2, Trend::kNone, true};
    auto build = [&](const PriorSpec& s) { return build_priors(d, L, {}, {}, {s}); };
    CHECK_THROWS_WITH_AS(build(spec("east.offset_ms", Prior::uniform(0, 1))),
                         doctest::Contains("priors.east.offset_ms: this model has no parameter"), InputError);
    CHECK_THROWS_WITH_AS(build(spec("b.period_d", Prior::normal(3.0, 1.0))),
                         doctest::Contains("priors.b.period_d: normal(3, 1) allows zero or negative values"),
                         InputError);
    CHECK_THROWS_WITH_AS(build(spec("b.K_ms", Prior::uniform(-5.0, 5.0))),
                         doctest::Contains("priors.b.K_ms: uniform(-5, 5) allows negative values"), InputError);
    CHECK_THROWS_WITH_AS(build(spec("b.period_d", Prior::uniform(5.0, 3.0))),
                         doctest::Contains("priors.b.period_d: impossible prior: min = 5 is not below max = 3"),
                         InputError);
    CHECK_THROWS_WITH_AS(build(spec("b.secosw", Prior::uniform(-0.5, 0.5))),
                         doctest::Contains("with \"b.eccentricity\" instead"), InputError);
    PriorSpec e;
    e.parameter = "d.eccentricity";
    e.eccentricity = EccentricityPrior{};
    CHECK_THROWS_WITH_AS(build(e), doctest::Contains("priors.d.eccentricity: this model has no planet 'd'"),
                         InputError);
    SearchSettings bad;
    bad.min_period_d = 10.0;
    bad.max_period_d = 5.0;
    CHECK_THROWS_WITH_AS(build_priors(d, L, bad, {}, {}), doctest::Contains("search.max_period_d = 5"),
                         InputError);
  }

  TEST_CASE("model_priors: a point outside the support is reported by name") {
    const VelocityData d = small_data();
    const ModelLayout L{2, 2, Trend::kNone, true};
    const ModelPriors mp = build_priors(d, L, {}, {}, {});
    std::vector<double> theta = {10.0, 5.0, 0.1, 0.1, 0.0, 50.0, 5.0, 0.0, 0.3, 0.0, 10.0, 1.0, -1000.0, 1.0};
    CHECK(first_outside_support(mp, L, d.instrument_names, theta).empty());
    CHECK(std::isfinite(ParameterLayout::from(L, d.instrument_names).log_prior(theta, mp)));
    theta[7] = 0.9;
    theta[8] = 0.9;  // e = 1.62
    CHECK(first_outside_support(mp, L, d.instrument_names, theta) == "c.eccentricity");
    CHECK_THROWS_WITH_AS(require_in_support(mp, L, d.instrument_names, theta, "start"),
                         doctest::Contains("start: c.eccentricity = 1.62"), InputError);
    theta[7] = 0.0;
    theta[8] = 0.0;
    theta[5] = 5.0;  // below b's period
    CHECK(first_outside_support(mp, L, d.instrument_names, theta) == "c.period_d");
    theta[5] = 50.0;
    theta[L.jitter_index(1)] = -1.0;
    CHECK_THROWS_WITH_AS(require_in_support(mp, L, d.instrument_names, theta, "start"),
                         doctest::Contains("start: south.jitter_ms = -1 is outside its prior half-normal"),
                         InputError);
    // One line per parameter, in theta order (the results file zips them with the names);
    // rules across parameters are notes of their own.
    const auto lines = describe_priors(mp, L, d.instrument_names);
    REQUIRE(lines.size() == L.n_params());
    const auto names = L.names(d.instrument_names);
    for (std::size_t i = 0; i < lines.size(); ++i) CHECK(lines[i].rfind(names[i], 0) == 0);
    CHECK(prior_notes(mp, L, d.instrument_names).size() == 1u);  // the period ordering
  }
}
