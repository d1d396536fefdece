#include "apsides/diagnostics.h"

#include <doctest/doctest.h>

#include <cmath>
#include <random>

using apsides::ChainSet;

namespace {
// CHECKS.md section 5: x[i, c] = sin(0.37 i + 1.1 c) + 0.5 sin(2.3 i (c + 1)) + 0.02 c,
// i = 1..200, c = 0..3.
ChainSet reference_chains(double scale_last) {
  ChainSet chains(4, std::vector<double>(200));
  for (int c = 0; c < 4; ++c)
    for (int i = 1; i <= 200; ++i) {
      double x = std::sin(0.37 * i + 1.1 * c) + 0.5 * std::sin(2.3 * i * (c + 1)) + 0.02 * c;
      if (c == 3) x *= scale_last;
      chains[static_cast<std::size_t>(c)][static_cast<std::size_t>(i - 1)] = x;
    }
  return chains;
}
}  // namespace

TEST_SUITE("diagnostics") {
  TEST_CASE("diagnostics: split R-hat and bulk/tail ESS match the R package posterior to 1e-6") {
    const ChainSet chains = reference_chains(1.0);
    // CHECKS.md section 5 [L]: R package posterior 1.4.0 (Debian r-cran-posterior).
    CHECK(apsides::split_rhat(chains) == doctest::Approx(0.99551347).epsilon(1e-6));
    CHECK(apsides::ess_bulk(chains) == doctest::Approx(199.636315).epsilon(1e-6));
    CHECK(apsides::ess_tail(chains) == doctest::Approx(677.513892).epsilon(1e-6));
  }

  TEST_CASE("diagnostics: only the folded R-hat catches a chain with three times the spread") {
    const ChainSet chains = reference_chains(3.0);
    // CHECKS.md section 5 [L]: posterior 1.4.0 gives 1.19116715 for this case.
    CHECK(apsides::split_rhat(chains) == doctest::Approx(1.19116715).epsilon(1e-6));
    CHECK(apsides::tail_rhat(chains) > 1.1);
    CHECK(apsides::bulk_rhat(chains) < 1.01);
  }

  TEST_CASE("diagnostics: Sokal's window gives tau = 10.3734594944 with M = 56 on the worked series") {
    std::vector<double> x(5000);
    for (int i = 0; i < 5000; ++i) x[static_cast<std::size_t>(i)] = std::sin(0.05 * i) + 0.5 * std::sin(1.7 * i);
    const apsides::AutocorrTime t = apsides::integrated_autocorr_time(x, 5.0);
    // CHECKS.md section 5 [L]: numpy from the definition (FFT ACF, c = 5).
    CHECK(t.window == 56);
    CHECK(t.reliable);
    CHECK(t.tau == doctest::Approx(10.3734594944).epsilon(1e-9));
  }

  TEST_CASE("diagnostics: an AR(1) series with phi = 0.8 has tau near (1 + phi)/(1 - phi) = 9") {
    // Textbook result for AR(1): rho(t) = phi^t, tau = (1 + phi)/(1 - phi).
    std::mt19937_64 rng(20240501);
    std::normal_distribution<double> noise(0.0, 1.0);
    const double phi = 0.8;
    ChainSet chains(8, std::vector<double>(25000));
    for (auto& c : chains) {
      double x = noise(rng) / std::sqrt(1 - phi * phi);
      for (double& v : c) {
        x = phi * x + noise(rng);
        v = x;
      }
    }
    const apsides::AutocorrTime single = apsides::integrated_autocorr_time(chains[0], 5.0);
    const apsides::AutocorrTime ensemble = apsides::integrated_autocorr_time(chains, 5.0);
    // Monte Carlo error of tau ~ tau sqrt(2 (2M + 1) / n) (Sokal 1997): about 4 % for one
    // chain of 25 000, 1.5 % for eight.
    CHECK(single.tau == doctest::Approx(9.0).epsilon(0.12));
    CHECK(ensemble.tau == doctest::Approx(9.0).epsilon(0.05));
    // ESS of the eight chains: total / tau within the same errors.
    CHECK(apsides::ess_bulk(chains) == doctest::Approx(8 * 25000 / 9.0).epsilon(0.1));
  }

  TEST_CASE("diagnostics: independent draws give R-hat near 1 and ESS near the draw count") {
    std::mt19937_64 rng(7);
    std::normal_distribution<double> noise(0.0, 1.0);
    ChainSet chains(4, std::vector<double>(2000));
    for (auto& c : chains)
      for (double& v : c) v = noise(rng);
    CHECK(apsides::split_rhat(chains) < 1.01);
    CHECK(apsides::ess_bulk(chains) == doctest::Approx(8000).epsilon(0.1));
    CHECK(apsides::ess_tail(chains) == doctest::Approx(8000).epsilon(0.2));
    CHECK(apsides::integrated_autocorr_time(chains, 5.0).tau == doctest::Approx(1.0).epsilon(0.1));
  }

  TEST_CASE("diagnostics: constant or too short chains give NaN, not a crash") {
    CHECK(std::isnan(apsides::split_rhat(ChainSet(4, std::vector<double>(100, 2.0)))));
    CHECK(std::isnan(apsides::ess_bulk(ChainSet(4, std::vector<double>(2, 1.0)))));
    CHECK(std::isnan(apsides::ess_tail(ChainSet{})));
  }
}
