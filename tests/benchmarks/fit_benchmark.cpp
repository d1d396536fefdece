// The planet search on the demo system (150 points, 3 instruments, 2 planets):
// `apsides fit --search --max-planets 3` does this work. Target: <= 2 s.
#include <benchmark/benchmark.h>

#include <string>

#include "apsides/fit.h"
#include "apsides/project.h"

namespace {
void BM_SearchDemo(benchmark::State& state) {
  const apsides::Project pr = apsides::load_project(std::string(APSIDES_SOURCE_DIR) + "/datasets_synthetic/demo/project.toml");
  apsides::SearchProblem sp;
  sp.data = pr.load_velocities();
  sp.search = pr.search;
  apsides::SearchOptions so;
  so.max_planets = 3;
  for (auto _ : state) {
    apsides::SearchResult r = apsides::search_planets(sp, so);
    benchmark::DoNotOptimize(r.selected_n_planets);
  }
}
BENCHMARK(BM_SearchDemo)->Unit(benchmark::kMillisecond)->Iterations(3);

void BM_FitOnePlanetDemo(benchmark::State& state) {
  const apsides::Project pr = apsides::load_project(std::string(APSIDES_SOURCE_DIR) + "/datasets_synthetic/demo/project.toml");
  apsides::SearchProblem sp;
  sp.data = pr.load_velocities();
  const apsides::FitProblem pb = apsides::make_fit_problem(sp, 1);
  for (auto _ : state) {
    apsides::FitResult r = apsides::fit_map(pb, apsides::FitOptions{});
    benchmark::DoNotOptimize(r.log_likelihood);
  }
}
BENCHMARK(BM_FitOnePlanetDemo)->Unit(benchmark::kMillisecond)->Iterations(3);
}  // namespace

BENCHMARK_MAIN();
