// One Gaussian log-likelihood of the velocity model: 2 planets, 2 instruments with
// jitter, N = 200 and 1000 points; the fast kernel next to the plain scalar reference.
//
// The data are a deterministic formula (no random generator), so that
// scripts/bench_likelihood.py rebuilds exactly the same points and parameters in numpy;
// the "lnL" counter lets it check that both compute the same number.
#include <benchmark/benchmark.h>

#include "bench_main.h"

#include <cmath>
#include <vector>

#include "apsides/keplerian_model.h"

namespace {
using apsides::KeplerianModel;
using apsides::ModelLayout;
using apsides::Planet;
using apsides::Trend;
using apsides::VelocityData;

// Keep in step with scripts/bench_likelihood.py.
VelocityData make_data(int n) {
  VelocityData d;
  d.reference_epoch_bjd = 2460000.0;
  d.instrument_names = {"north", "south"};
  for (int i = 0; i < n; ++i) {
    const double x = static_cast<double>(i);
    const double frac = x * 0.6180339887498949 - std::floor(x * 0.6180339887498949);
    d.time_days.push_back(1200.0 * frac - 600.0);
    d.velocity_m_s.push_back(20.0 * std::cos(0.1 * x) + 5.0 * std::sin(1.7 * x));
    d.uncertainty_m_s.push_back(1.5 + 0.5 * std::sin(3.0 * x));
    d.instrument.push_back(i % 2);
    d.origin.push_back("bench");
  }
  return d;
}

std::vector<double> make_theta(const ModelLayout& L) {
  std::vector<double> th(L.n_params());
  apsides::put_planet(th, L, 0, Planet::from_elements(4.23, 55.0, 0.10, 1.2, 1.5));
  apsides::put_planet(th, L, 1, Planet::from_elements(310.0, 30.0, 0.45, -2.0, 40.0));
  th[L.offset_index(0)] = 3.0;
  th[L.jitter_index(0)] = 2.5;
  th[L.offset_index(1)] = -4.0;
  th[L.jitter_index(1)] = 1.2;
  return th;
}

template <bool kFast>
void BM_LogLikelihood(benchmark::State& state) {
  const int n = static_cast<int>(state.range(0));
  const ModelLayout L{2, 2, Trend::kNone, true};
  const KeplerianModel model(make_data(n), L);
  const std::vector<double> th = make_theta(L);
  double lnl = 0.0;
  for (auto _ : state) {
    lnl = kFast ? model.log_likelihood(th) : model.log_likelihood_reference(th);
    benchmark::DoNotOptimize(lnl);
  }
  state.counters["per_call"] = benchmark::Counter(
      static_cast<double>(state.iterations()),
      benchmark::Counter::kIsRate | benchmark::Counter::kInvert);
  state.counters["lnL"] = lnl;
}
BENCHMARK(BM_LogLikelihood<true>)->Name("BM_LogLikelihood")->Arg(200)->Arg(1000);
BENCHMARK(BM_LogLikelihood<false>)->Name("BM_LogLikelihoodReference")->Arg(200)->Arg(1000);

}  // namespace

APSIDES_BENCHMARK_MAIN()
