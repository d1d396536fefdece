// The composed posterior: blocks, priors and likelihood terms assembled by hand give the
// same ln posterior as the configuration's model (make_posterior) and as the formulas
// written out independently here (Gaussian likelihood with jitter, each prior's density,
// the eccentricity prior on (sqrt(e) cos w, sqrt(e) sin w) = p(e) / pi).
#include <doctest/doctest.h>

#include <cmath>
#include <limits>
#include <memory>
#include <random>
#include <vector>

#include "apsides/constants.h"
#include "apsides/data.h"
#include "apsides/keplerian_model.h"
#include "apsides/model_priors.h"
#include "apsides/parameter_blocks.h"
#include "apsides/posterior_model.h"

using namespace apsides;

namespace {

VelocityData two_instruments() {
  VelocityData d;
  d.reference_epoch_bjd = 2460000.0;
  d.instrument_names = {"Heron", "Plover"};
  std::mt19937_64 rng(11);
  std::normal_distribution<double> noise(0.0, 1.0);
  const Planet truth = Planet::from_elements(12.7, 9.0, 0.2, 0.8, 3.1);
  for (int i = 0; i < 60; ++i) {
    const double t = 1.9 * i + 0.37 * std::sin(1.3 * i);
    const int inst = i % 3 == 0 ? 1 : 0;
    d.time_days.push_back(t);
    d.instrument.push_back(inst);
    d.uncertainty_m_s.push_back(1.0 + 0.3 * inst);
    d.velocity_m_s.push_back(planet_velocity(truth, t) + (inst ? -4.0 : 6.0) + 1.4 * noise(rng));
    d.origin.push_back("synthetic:" + std::to_string(i + 1));
  }
  return d;
}

// ln L and ln prior written out from the definitions, nothing shared with the model but
// planet_velocity (pinned separately against CHECKS.md section 8) and Prior::log_density.
double by_hand(const VelocityData& d, const ModelPriors& pr, const std::vector<double>& th) {
  const Planet p{th[0], th[1], th[2], th[3], th[4]};
  double ln_l = 0.0;
  for (std::size_t i = 0; i < d.size(); ++i) {
    const std::size_t o = d.instrument[i] == 0 ? 5 : 7;
    const double var = d.uncertainty_m_s[i] * d.uncertainty_m_s[i] + th[o + 1] * th[o + 1];
    const double r = d.velocity_m_s[i] - th[o] - planet_velocity(p, d.time_days[i]);
    ln_l += -0.5 * (r * r / var + std::log(2.0 * constants::kPi * var));
  }
  double ln_p = 0.0;
  for (std::size_t i : {0u, 1u, 4u, 5u, 6u, 7u, 8u}) ln_p += pr.parameter[i].log_density(th[i]);
  // e uniform on [0, max) and omega uniform: p(h, k) = 1 / (max pi) inside the disc (CHECKS.md section 7).
  ln_p += std::log(1.0 / (pr.eccentricity[0].max_ecc * constants::kPi));
  return ln_l + ln_p;
}

}  // namespace

TEST_SUITE("posterior_model") {
  TEST_CASE("posterior_model: a posterior built from blocks by hand equals the configuration's and the formulas") {
    const VelocityData data = two_instruments();
    ModelLayout config;
    config.n_planets = 1;
    config.n_instruments = 2;
    const ModelPriors priors = build_priors(data, config, {}, {}, {});

    ParameterLayout blocks;
    blocks.add(std::make_unique<PlanetBlock>("b"));
    blocks.add(std::make_unique<InstrumentBlock>("Heron", 0, true));
    blocks.add(std::make_unique<InstrumentBlock>("Plover", 1, true));
    REQUIRE(blocks.n_params() == 9u);
    CHECK(blocks.names() == config.names(data.instrument_names));
    PosteriorModel hand(blocks, priors);
    hand.add_term(std::make_unique<WhiteNoiseVelocityTerm>(data, hand.layout()));
    const PosteriorModel made = make_posterior(data, config, priors, TransitData{});

    const std::vector<std::vector<double>> points = {
        {12.7, 9.0, 0.42, 0.31, 3.1, 6.0, 1.2, -4.0, 0.7},
        {12.69, 8.4, -0.2, 0.1, 2.9, 5.5, 0.3, -3.1, 2.0},
        {30.1, 2.0, 0.0, 0.0, 10.0, 0.0, 4.0, 0.0, 0.01}};
    for (const auto& th : points) {
      CAPTURE(th[0]);
      const double a = hand.log_posterior(th);
      const double b = made.log_posterior(th);
      const double c = by_hand(data, priors, th);
      REQUIRE(std::isfinite(a));
      CHECK(a == doctest::Approx(b).epsilon(1e-12));
      CHECK(a == doctest::Approx(c).epsilon(1e-12));
    }
    // Outside the priors: an eccentricity beyond the limit, a negative jitter.
    CHECK(hand.log_posterior(std::vector<double>{12.7, 9.0, 0.9, 0.9, 3.1, 6.0, 1.2, -4.0, 0.7}) ==
          -std::numeric_limits<double>::infinity());
    CHECK(hand.log_posterior(std::vector<double>{12.7, 9.0, 0.1, 0.1, 3.1, 6.0, -1.2, -4.0, 0.7}) ==
          -std::numeric_limits<double>::infinity());
  }

  TEST_CASE("posterior_model: blocks answer by name, terms declare what they read") {
    const VelocityData data = two_instruments();
    ModelLayout config;
    config.n_planets = 2;
    config.n_instruments = 2;
    config.trend = Trend::kLinear;
    config.transit_jitter_planets = {0};
    const ParameterLayout L = ParameterLayout::from(config, data.instrument_names);
    REQUIRE(L.planets().size() == 2u);
    CHECK(L.planet(1).info(PlanetBlock::kPeriod).name == "c.period_d");
    CHECK(L.find("Plover.jitter_ms") == L.instruments()[1]->jitter_index());
    CHECK(L.find("trend.c1_ms_per_d") == L.trend()->coefficient_index(1));
    CHECK(L.transit_jitter("b") != nullptr);
    CHECK(L.transit_jitter("c") == nullptr);
    CHECK(L.block_at(L.find("c.sesinw")).label() == "c");
    // Linear parameters: offsets and the trend, nothing else.
    int linear = 0;
    for (const auto& b : L.blocks())
      for (int s = 0; s < b->size(); ++s) linear += b->info(s).linear ? 1 : 0;
    CHECK(linear == 3);

    TransitData times;
    times.reference_epoch_bjd = data.reference_epoch_bjd;
    times.epoch = {0, 1, 2};
    times.time_days = {3.0, 15.7, 28.4};
    times.uncertainty_days = {1e-3, 1e-3, 1e-3};
    times.planet = {"b", "b", "b"};
    times.origin = {"t:1", "t:2", "t:3"};
    const PosteriorModel m = make_posterior(data, config, build_priors(data, config, {}, {}, {}, -1, nullptr, &times), times);
    REQUIRE(m.terms().size() == 2u);
    CHECK(m.n_points() == data.size() + 3u);
    const auto reads = m.terms()[1]->reads();
    REQUIRE(reads.size() == 2u);
    CHECK(reads[0]->label() == "b");
    CHECK(reads[1]->kind() == BlockKind::kTransitJitter);
  }

  TEST_CASE("posterior_model: parameters move between layouts by name") {
    ModelLayout two;
    two.n_planets = 2;
    two.n_instruments = 1;
    ModelLayout one = two;
    one.n_planets = 1;
    const ParameterLayout L2 = ParameterLayout::from(two, {"Heron"});
    const ParameterLayout L1 = ParameterLayout::from(one, {"Heron"});
    std::vector<double> t2(L2.n_params());
    for (std::size_t i = 0; i < t2.size(); ++i) t2[i] = 10.0 + static_cast<double>(i);
    std::vector<double> t1(L1.n_params(), 0.0);
    transfer_parameters(L2, t2, L1, t1);
    CHECK(t1[0] == 10.0);  // b.period_d
    CHECK(t1[L1.find("Heron.offset_ms")] == t2[L2.find("Heron.offset_ms")]);
  }
}
