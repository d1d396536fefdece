// Kepler's equation: ns per solve of the batch kernel over random (M, e), e uniform in
// [0, 0.95], next to plain scalar Newton from E0 = M + e sin M, one scalar glibc sin+cos
// pair and one vectorised sin+cos pair, all in the same run.
//
// The "per_solve" counter is the CPU time per element; scripts/bench prints the ratios.
// The kernels run on the SIMD target APSIDES_SIMD_TARGET names (else the best the CPU
// has); the scalar baselines are ordinary code, the same under every target.
#include <benchmark/benchmark.h>

#include "bench_main.h"

#include <cmath>
#include <random>
#include <vector>

#include "apsides/kepler.h"
#include "kernels/kernels.h"

namespace {
constexpr double kTwoPi = 6.28318530717958647692;

struct Inputs {
  std::vector<double> M, e;
};

// Fixed seed: every benchmark sees the same (M, e).
Inputs make_inputs(std::size_t n, double e_max = 0.95) {
  std::mt19937_64 rng(20240501);
  std::uniform_real_distribution<double> um(0.0, kTwoPi), ue(0.0, e_max);
  Inputs in;
  in.M.resize(n);
  in.e.resize(n);
  for (std::size_t i = 0; i < n; ++i) {
    in.M[i] = um(rng);
    in.e[i] = ue(rng);
  }
  return in;
}

void set_per_solve(benchmark::State& state, std::size_t n) {
  state.SetItemsProcessed(static_cast<int64_t>(state.iterations() * n));
  state.counters["per_solve"] = benchmark::Counter(
      static_cast<double>(state.iterations() * n),
      benchmark::Counter::kIsRate | benchmark::Counter::kInvert);
}

// Plain scalar Newton, the textbook baseline: E0 = M + e sin M, iterate to 1e-12.
// Compiled with the project's ordinary flags (no fast-math), like any user code.
double plain_newton(double M, double e) {
  double E = M + e * std::sin(M);
  for (int it = 0; it < 50; ++it) {
    const double dE = (E - e * std::sin(E) - M) / (1.0 - e * std::cos(E));
    E -= dE;
    if (std::fabs(dE) < 1e-12) break;
  }
  return E;
}

void BM_KeplerBatch(benchmark::State& state) {
  const auto n = static_cast<std::size_t>(state.range(0));
  const Inputs in = make_inputs(n);
  std::vector<double> E(n);
  for (auto _ : state) {
    apsides::solve_kepler_batch(in.M, in.e, E);
    benchmark::DoNotOptimize(E.data());
    benchmark::ClobberMemory();
  }
  set_per_solve(state, n);
}
BENCHMARK(BM_KeplerBatch)->Arg(1000)->Arg(10000);

// The likelihood's path: one e per planet, sin E and cos E out. e cycles over 16 values
// in [0, 0.95] so every eccentricity regime is timed.
void BM_KeplerSinCos(benchmark::State& state) {
  const auto n = static_cast<std::size_t>(state.range(0));
  const Inputs in = make_inputs(n);
  std::vector<double> s(n), c(n);
  std::size_t k = 0;
  for (auto _ : state) {
    const double e = 0.95 * static_cast<double>(k++ % 16) / 15.0;
    apsides::solve_kepler_sincos(in.M, e, s, c);
    benchmark::DoNotOptimize(s.data());
    benchmark::DoNotOptimize(c.data());
    benchmark::ClobberMemory();
  }
  set_per_solve(state, n);
}
BENCHMARK(BM_KeplerSinCos)->Arg(1000)->Arg(10000);

void BM_PlainScalarNewton(benchmark::State& state) {
  const auto n = static_cast<std::size_t>(state.range(0));
  const Inputs in = make_inputs(n);
  std::vector<double> E(n);
  for (auto _ : state) {
    for (std::size_t i = 0; i < n; ++i) E[i] = plain_newton(in.M[i], in.e[i]);
    benchmark::DoNotOptimize(E.data());
    benchmark::ClobberMemory();
  }
  set_per_solve(state, n);
}
BENCHMARK(BM_PlainScalarNewton)->Arg(1000)->Arg(10000);

// The robust scalar reference solver of the library (Halley with a bracket).
void BM_ScalarReferenceSolver(benchmark::State& state) {
  const auto n = static_cast<std::size_t>(state.range(0));
  const Inputs in = make_inputs(n);
  std::vector<double> E(n);
  for (auto _ : state) {
    for (std::size_t i = 0; i < n; ++i) E[i] = apsides::solve_kepler(in.M[i], in.e[i]);
    benchmark::DoNotOptimize(E.data());
    benchmark::ClobberMemory();
  }
  set_per_solve(state, n);
}
BENCHMARK(BM_ScalarReferenceSolver)->Arg(1000);

// One scalar sin+cos pair from glibc, for scale ("per_solve" here is per pair).
void BM_ScalarSinCosPair(benchmark::State& state) {
  const auto n = static_cast<std::size_t>(state.range(0));
  const Inputs in = make_inputs(n);
  std::vector<double> s(n), c(n);
  for (auto _ : state) {
    for (std::size_t i = 0; i < n; ++i) {
      s[i] = std::sin(in.M[i]);
      c[i] = std::cos(in.M[i]);
    }
    benchmark::DoNotOptimize(s.data());
    benchmark::DoNotOptimize(c.data());
    benchmark::ClobberMemory();
  }
  set_per_solve(state, n);
}
BENCHMARK(BM_ScalarSinCosPair)->Arg(1000);

// One vectorised sin+cos pair (SLEEF on x86, Highway's Sin/Cos elsewhere; kernels::sincos_batch).
void BM_VectorSinCosPair(benchmark::State& state) {
  const auto n = static_cast<std::size_t>(state.range(0));
  const Inputs in = make_inputs(n);
  std::vector<double> s(n), c(n);
  for (auto _ : state) {
    apsides::kernels::sincos_batch(in.M.data(), n, s.data(), c.data());
    benchmark::DoNotOptimize(s.data());
    benchmark::DoNotOptimize(c.data());
    benchmark::ClobberMemory();
  }
  set_per_solve(state, n);
}
BENCHMARK(BM_VectorSinCosPair)->Arg(1000)->Arg(10000);

}  // namespace

APSIDES_BENCHMARK_MAIN()
