// Nested sampling: the analytic Gaussian in a box (CHECKS.md section 6) at several
// dimensions, and the demo system's 0/1/2-planet comparison (150 points, 3 instruments),
// the performance target of issue 6 (<= 60 s, ln Z errors <= 0.3).
#include <benchmark/benchmark.h>

#include <cmath>

#include "apsides/constants.h"
#include "apsides/evidence.h"
#include "apsides/fit.h"
#include "apsides/model_priors.h"
#include "apsides/project.h"

namespace {

void BM_GaussianBox(benchmark::State& state) {
  const int d = static_cast<int>(state.range(0));
  apsides::NestedProblem p;
  p.dimension = d;
  p.prior_transform = [](std::span<const double> u, std::span<double> x) {
    for (std::size_t i = 0; i < u.size(); ++i) x[i] = -10.0 + 20.0 * u[i];
  };
  p.log_likelihood = [d](std::span<const double> x) {
    double r2 = 0.0;
    for (double v : x) r2 += v * v;
    return -0.5 * r2 - 0.5 * d * std::log(2.0 * apsides::constants::kPi);
  };
  apsides::NestedOptions opt;
  opt.live_points = 200;
  opt.seed = 1;
  double err = 0.0;
  for (auto _ : state) {
    const auto r = apsides::run_nested_sampling(p, opt);
    benchmark::DoNotOptimize(r.ln_evidence);
    err = std::fabs(r.ln_evidence - d * (std::log(std::erf(10.0 / std::sqrt(2.0))) - std::log(20.0)));
    state.counters["calls"] = static_cast<double>(r.likelihood_calls);
    state.counters["ln_z_err"] = r.ln_evidence_err;
  }
  state.counters["abs_error"] = err;
  state.SetComplexityN(d);
}
BENCHMARK(BM_GaussianBox)->Arg(2)->Arg(5)->Arg(10)->Arg(20)->Unit(benchmark::kMillisecond)->Complexity();

void BM_DemoCompareTwoPlanets(benchmark::State& state) {
  // As `apsides compare --max-planets 2` runs it: velocities and transit times, the
  // project's priors (periastron limit included), jumps to the search's periods.
  const auto project = apsides::load_project(std::string(APSIDES_SOURCE_DIR) + "/datasets_synthetic/demo/project.toml");
  const auto data = project.load_velocities();
  const auto transits = project.load_transits();
  apsides::SearchProblem problem = apsides::search_problem(project, data, transits);
  problem.search.max_planets = 2;
  const apsides::ModelLayout base = apsides::problem_layout(problem, 0);
  apsides::CompareOptions opt;
  opt.max_planets = 2;
  opt.nested.live_points = project.evidence.live_points;
  opt.nested.threads = 2;
  apsides::SearchOptions so = apsides::search_options(project);
  so.max_planets = 2;
  opt.search_hints = apsides::search_signals(apsides::search_planets(problem, so));
  auto priors_for = [&](const apsides::ModelLayout& l) { return apsides::problem_priors(problem, l); };
  for (auto _ : state) {
    const auto r = apsides::compare_planet_counts(data, base, priors_for, opt, {}, &transits);
    benchmark::DoNotOptimize(r.selected_n_planets);
    double worst = 0.0;
    for (const auto& row : r.rows) worst = std::max(worst, row.ln_evidence_err);
    state.counters["selected"] = r.selected_n_planets;
    state.counters["max_ln_z_err"] = worst;
  }
}
BENCHMARK(BM_DemoCompareTwoPlanets)->Unit(benchmark::kSecond)->Iterations(1);

}  // namespace

BENCHMARK_MAIN();
