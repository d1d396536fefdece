#include <doctest/doctest.h>

#include <cmath>
#include <numeric>
#include <vector>

#include "apsides/constants.h"
#include "apsides/error.h"
#include "apsides/evidence.h"

using namespace apsides;

namespace {
// Normalised Gaussian N(0, sigma^2 I) likelihood in the uniform prior box [-a, a]^d
// (CHECKS.md section 6).
NestedProblem gaussian_in_box(int d, double a, double sigma) {
  NestedProblem p;
  p.dimension = d;
  p.prior_transform = [a](std::span<const double> u, std::span<double> theta) {
    for (std::size_t i = 0; i < u.size(); ++i) theta[i] = -a + 2.0 * a * u[i];
  };
  p.log_likelihood = [sigma, d](std::span<const double> x) {
    double r2 = 0.0;
    for (double v : x) r2 += v * v;
    return -0.5 * r2 / (sigma * sigma) - d * (std::log(sigma) + 0.5 * std::log(2.0 * constants::kPi));
  };
  return p;
}
}  // namespace

TEST_SUITE("evidence") {
  TEST_CASE("evidence: Gaussian in a box gives the analytic ln Z within 3 sigma (d = 2, 5, 10)") {
    // CHECKS.md section 6 [closed form, Skilling 2006 test]: ln Z = d [ln erf(a / (sigma sqrt 2)) - ln 2a].
    // Live points reduced from the default 400 to keep the suite fast; the test uses
    // the reported error, so fewer points only widen the band it must fall in.
    struct Case {
      int d;
      double a, expected;
    };
    for (const Case c : {Case{2, 10.0, -5.9914645471}, Case{5, 5.0, -11.5129283315}, Case{10, 10.0, -29.9573227355}}) {
      CAPTURE(c.d);
      // The closed form itself, so the table value is not trusted blindly.
      CHECK(c.d * (std::log(std::erf(c.a / std::sqrt(2.0))) - std::log(2.0 * c.a)) ==
            doctest::Approx(c.expected).epsilon(1e-9));
      NestedOptions opt;
      opt.live_points = 150;
      opt.seed = 11;
      const NestedResult r = run_nested_sampling(gaussian_in_box(c.d, c.a, 1.0), opt);
      REQUIRE(r.termination == NestedTermination::kConverged);
      CAPTURE(r.FullReport());
      CHECK(r.ln_evidence_err == doctest::Approx(std::sqrt(r.information_nats / 150.0)));
      CHECK(std::fabs(r.ln_evidence - c.expected) < 3.0 * r.ln_evidence_err);
      // H for this problem: E_post[ln L] - ln Z with the posterior ~ the Gaussian
      // (box edges far away): -d/2 (1 + ln 2 pi) - ln Z.
      const double h_expected = -0.5 * c.d * (1.0 + std::log(2.0 * constants::kPi)) - c.expected;
      CHECK(r.information_nats == doctest::Approx(h_expected).epsilon(0.1));
      // Posterior: unit Gaussian per coordinate, mean 0, 16/84 % at -+1.
      CHECK(std::fabs(r.weighted_quantile(0, 0.5)) < 0.25);
      CHECK(r.weighted_quantile(0, 0.84134) - r.weighted_quantile(0, 0.15866) == doctest::Approx(2.0).epsilon(0.2));
    }
  }

  TEST_CASE("evidence: the reported error matches the scatter of ln Z over 10 seeds") {
    // d = 5 box of CHECKS.md section 6; 100 live points so the 10 runs stay fast.
    std::vector<double> ln_z, err;
    for (std::uint64_t seed = 1; seed <= 10; ++seed) {
      NestedOptions opt;
      opt.live_points = 100;
      opt.seed = seed;
      const NestedResult r = run_nested_sampling(gaussian_in_box(5, 5.0, 1.0), opt);
      REQUIRE(r.termination == NestedTermination::kConverged);
      ln_z.push_back(r.ln_evidence);
      err.push_back(r.ln_evidence_err);
    }
    const double mean = std::accumulate(ln_z.begin(), ln_z.end(), 0.0) / 10.0;
    double var = 0.0;
    for (double z : ln_z) var += (z - mean) * (z - mean);
    const double scatter = std::sqrt(var / 9.0);
    const double mean_err = std::accumulate(err.begin(), err.end(), 0.0) / 10.0;
    CAPTURE(scatter);
    CAPTURE(mean_err);
    // With 10 runs the sample standard deviation is known to about +-25 % (1 sigma);
    // accept a factor of 2 either way.
    CHECK(scatter < 2.0 * mean_err);
    CHECK(scatter > 0.5 * mean_err);
    // The mean of 10 runs is closer: within 3 x err / sqrt(10) of the closed form.
    CHECK(std::fabs(mean - -11.5129283315) < 3.0 * mean_err / std::sqrt(10.0));
  }

  TEST_CASE("evidence: a run is identical for a seed whatever the number of threads") {
    NestedOptions opt;
    opt.live_points = 60;
    opt.seed = 5;
    opt.batch_size = 4;
    opt.threads = 1;
    const NestedResult one = run_nested_sampling(gaussian_in_box(3, 5.0, 1.0), opt);
    opt.threads = 2;
    const NestedResult two = run_nested_sampling(gaussian_in_box(3, 5.0, 1.0), opt);
    opt.threads = 3;
    const NestedResult three = run_nested_sampling(gaussian_in_box(3, 5.0, 1.0), opt);
    CHECK(one.ln_evidence == two.ln_evidence);
    CHECK(one.ln_evidence == three.ln_evidence);
    CHECK(one.likelihood_calls == two.likelihood_calls);
    REQUIRE(one.samples.size() == two.samples.size());
    CHECK(one.samples.back().theta == two.samples.back().theta);
    opt.seed = 6;
    const NestedResult other = run_nested_sampling(gaussian_in_box(3, 5.0, 1.0), opt);
    CHECK(other.ln_evidence != one.ln_evidence);
  }

  TEST_CASE("evidence: invalid options are input errors naming the field") {
    NestedOptions opt;
    opt.live_points = 2;
    CHECK_THROWS_WITH_AS(run_nested_sampling(gaussian_in_box(2, 1.0, 1.0), opt),
                         "nested sampling: live_points = 2: must be >= 2 x batch_size + 1 = 5", InputError);
    opt = NestedOptions{};
    opt.ln_z_tolerance = 0.0;
    CHECK(opt.Validate() == "ln_z_tolerance = 0: must be > 0");
    opt = NestedOptions{};
    opt.live_points = 8;
    CHECK_THROWS_WITH_AS(run_nested_sampling(gaussian_in_box(10, 1.0, 1.0), opt),
                         "live_points = 8: must be >= dimension + 1 = 11", InputError);
  }

  TEST_CASE("evidence: Kass & Raftery wording and the information criteria") {
    // Kass & Raftery 1995, JASA 90, 773 (CHECKS.md section 6), on ln B.
    CHECK(kass_raftery_wording(0.5) == "barely worth mentioning");
    CHECK(kass_raftery_wording(2.0) == "positive");
    CHECK(kass_raftery_wording(4.0) == "strong");
    CHECK(kass_raftery_wording(7.0) == "very strong");
    CHECK(kass_raftery_wording(-1.0) == "favours the simpler model");
    // CHECKS.md section 6 definitions: ln L = -100, k = 5, n = 50.
    CHECK(bic(-100.0, 5, 50) == doctest::Approx(5.0 * std::log(50.0) + 200.0));
    CHECK(aicc(-100.0, 5, 50) == doctest::Approx(10.0 + 200.0 + 60.0 / 44.0));
    CHECK(std::isnan(aicc(-100.0, 5, 6)));
  }
}
