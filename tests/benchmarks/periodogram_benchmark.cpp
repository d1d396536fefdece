// Periodogram engines: exact (recurrences) on 1 and 2 threads and fast (extirpolation +
// FFTW), at the sizes of issue 3. Counters: ns per point-frequency term (exact), seconds
// per call. Data: a fixed-seed uneven series, built outside the timed loop.
#include <benchmark/benchmark.h>

#include "bench_main.h"

#include <cmath>
#include <random>
#include <vector>

#include "apsides/periodogram.h"

namespace {
struct Series {
  std::vector<double> t, y, dy;
};
Series make(std::size_t n) {
  std::mt19937_64 rng(12345);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  std::normal_distribution<double> g(0.0, 1.0);
  Series s;
  for (std::size_t i = 0; i < n; ++i) {
    const double t = 2459000.0 + 1000.0 * u(rng);
    s.t.push_back(t);
    s.dy.push_back(1.0 + u(rng));
    s.y.push_back(3.0 * std::sin(2 * 3.141592653589793 * t / 13.7) + g(rng));
  }
  return s;
}

void run(benchmark::State& state, apsides::PeriodogramMethod method, int threads) {
  const std::size_t n = static_cast<std::size_t>(state.range(0));
  const std::size_t nf = static_cast<std::size_t>(state.range(1));
  const Series s = make(n);
  const double df = 1.0 / (10 * 1000.0), f0 = 1.0 / 3000.0;
  for (auto _ : state) {
    auto p = apsides::gls_power(s.t, s.y, s.dy, f0, df, nf, method, threads);
    benchmark::DoNotOptimize(p.data());
  }
  state.counters["ns_per_term"] = benchmark::Counter(
      static_cast<double>(n) * static_cast<double>(nf) * 1e-9,
      benchmark::Counter::kIsIterationInvariantRate | benchmark::Counter::kInvert);
  state.counters["per_call"] = benchmark::Counter(1.0, benchmark::Counter::kIsIterationInvariantRate |
                                                           benchmark::Counter::kInvert);
}
void BM_ExactOneThread(benchmark::State& s) { run(s, apsides::PeriodogramMethod::kExact, 1); }
void BM_ExactTwoThreads(benchmark::State& s) { run(s, apsides::PeriodogramMethod::kExact, 2); }
void BM_Fast(benchmark::State& s) { run(s, apsides::PeriodogramMethod::kFast, 0); }
}  // namespace

BENCHMARK(BM_ExactOneThread)->Args({1000, 100000})->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_ExactTwoThreads)->Args({1000, 100000})->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_Fast)->Args({1000, 100000})->Args({5000, 100000})->Unit(benchmark::kMillisecond)->UseRealTime();
BENCHMARK(BM_Fast)->Args({50000, 1000000})->Unit(benchmark::kMillisecond)->UseRealTime()->Iterations(2);
APSIDES_BENCHMARK_MAIN()
