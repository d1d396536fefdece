// CPU cost of streaming a chain into the results file (ChainWriter: stored rows every 16
// steps with shuffle + deflate, the off-stride rows the diagnostics still use, a checkpoint
// every 1000 steps), per sampler step, at the demo's shape: 64 walkers x 16 parameters.
// Early steps (the diagnostics thin by 1..8: off-stride rows are written for --resume) and
// late steps (only the stored rows). Compare with the sampler's own cost per step (the
// demo: ~0.5 ms of wall time on 2 cores, README "Performance").
#include <benchmark/benchmark.h>

#include <cmath>
#include <cstdio>
#include <filesystem>
#include <random>
#include <string>
#include <vector>

#include "apsides/results_file.h"

namespace {

constexpr int kWalkers = 64;
constexpr std::size_t kDim = 16;

// A stand-in for the demo's chain: each walker moves (a small random step) with
// probability 0.3 per step, as the demo's acceptance fraction, around demo-like values.
struct FakeChain {
  std::vector<double> pos, lp;
  std::mt19937_64 rng{7};
  FakeChain() : pos(kWalkers * kDim), lp(kWalkers) {
    const double centre[kDim] = {6.4127, 10.1, -0.06, 0.14, 0.238, 118.7, 14.3, -0.18, -0.55, -23.0,
                                 -18.46, 0.77, 41.5, 1.6, -12450.2, 1.05};
    std::normal_distribution<double> g(0.0, 1.0);
    for (int w = 0; w < kWalkers; ++w)
      for (std::size_t d = 0; d < kDim; ++d) pos[w * kDim + d] = centre[d] * (1.0 + 1e-3 * g(rng));
    for (auto& l : lp) l = -250.0 + g(rng);
  }
  void step() {
    std::uniform_real_distribution<double> u(0.0, 1.0);
    std::normal_distribution<double> g(0.0, 1.0);
    for (int w = 0; w < kWalkers; ++w) {
      if (u(rng) > 0.3) continue;
      for (std::size_t d = 0; d < kDim; ++d) pos[w * kDim + d] *= 1.0 + 1e-4 * g(rng);
      lp[static_cast<std::size_t>(w)] = -250.0 + g(rng);
    }
  }
};

// Steps first+1 .. first+n through a ChainWriter into a fresh file.
void stream(benchmark::State& state, long first) {
  const long n = 4000;
  const std::string path = (std::filesystem::temp_directory_path() / "apsides_bench_chain.h5").string();
  FakeChain chain;
  for (auto _ : state) {
    state.PauseTiming();
    std::filesystem::remove(path);
    apsides::ResultsFile file(path, apsides::ResultsFile::Mode::kCreate);
    file.create_chains(kWalkers, kDim, 1, "bench");
    if (first > 0) file.set_attribute("/chains", "steps", static_cast<long long>(first));
    apsides::ChainWriter writer(file, 2048);  // SamplerOptions::diagnostic_rows default
    apsides::SamplerState s;
    s.positions = chain.pos;
    s.log_prob = chain.lp;
    s.accepted.assign(kWalkers, 0);
    state.ResumeTiming();
    for (long k = first + 1; k <= first + n; ++k) {
      state.PauseTiming();
      chain.step();
      state.ResumeTiming();
      writer.add_step(k, chain.pos, chain.lp);
      if (k % 1000 == 0) {
        s.step = k;
        s.positions = chain.pos;
        s.log_prob = chain.lp;
        writer.checkpoint(s);
      }
    }
  }
  std::filesystem::remove(path);
  state.SetItemsProcessed(state.iterations() * n);
  state.counters["per_step"] = benchmark::Counter(static_cast<double>(state.iterations() * n),
                                                  benchmark::Counter::kIsRate | benchmark::Counter::kInvert);
}

void BM_ChainWriterEarlySteps(benchmark::State& state) { stream(state, 0); }
void BM_ChainWriterLateSteps(benchmark::State& state) { stream(state, 40000); }

}  // namespace

BENCHMARK(BM_ChainWriterEarlySteps)->Unit(benchmark::kMillisecond);
BENCHMARK(BM_ChainWriterLateSteps)->Unit(benchmark::kMillisecond);

BENCHMARK_MAIN();
