// Gaussian-process log-likelihood (include/apsides/gp.h): the rotation kernel (two SHO
// terms, semiseparable width J = 4) on the residuals of a 2-planet Keplerian model, at
// N = 1000 and 10^4, with a scaling row (500 ... 16000, fitted complexity) showing the
// cost linear in N; the dense quasi-periodic kernel (Eigen LLT, O(N^3)) beside it.
//
// Each iteration does the whole work of one likelihood call with new parameters: the
// planets' velocities, residuals, the factorization of K and the forward sweep.
//
// The data are the deterministic formula of likelihood_benchmark.cpp (same planets,
// offsets, jitters), sorted by time; scripts/bench_gp.py rebuilds the same matrix in
// numpy, checks ln L ("lnL" counter) and times numpy's dense Cholesky on it.
#include <benchmark/benchmark.h>

#include <algorithm>
#include <cmath>
#include <numeric>
#include <vector>

#include "apsides/gp.h"
#include "apsides/keplerian_model.h"

namespace {
using apsides::KeplerianModel;
using apsides::ModelLayout;
using apsides::Planet;
using apsides::Trend;
using apsides::VelocityData;

// Keep in step with scripts/bench_gp.py (and likelihood_benchmark.cpp's formula).
VelocityData make_data(int n) {
  struct Point {
    double t, y, dy;
    int inst;
  };
  std::vector<Point> pts;
  for (int i = 0; i < n; ++i) {
    const double x = static_cast<double>(i);
    const double frac = x * 0.6180339887498949 - std::floor(x * 0.6180339887498949);
    pts.push_back({1200.0 * frac - 600.0, 20.0 * std::cos(0.1 * x) + 5.0 * std::sin(1.7 * x),
                   1.5 + 0.5 * std::sin(3.0 * x), i % 2});
  }
  std::stable_sort(pts.begin(), pts.end(), [](const Point& a, const Point& b) { return a.t < b.t; });
  VelocityData d;
  d.reference_epoch_bjd = 2460000.0;
  d.instrument_names = {"north", "south"};
  for (const Point& p : pts) {
    d.time_days.push_back(p.t);
    d.velocity_m_s.push_back(p.y);
    d.uncertainty_m_s.push_back(p.dy);
    d.instrument.push_back(p.inst);
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

// The activity kernel of the benchmark: rotation 27 d, 5 m/s.
const apsides::gp::RotationKernel kRotation{27.0, 5.0, 1.2, 2.0, 0.6};

struct Setup {
  ModelLayout layout{2, 2, Trend::kNone, true, {}};
  KeplerianModel model;
  std::vector<double> theta, var, offset, planets, r;
  explicit Setup(int n) : model(make_data(n), layout), theta(make_theta(layout)) {
    const VelocityData& d = model.data();
    const std::size_t m = d.time_days.size();
    var.resize(m);
    offset.resize(m);
    planets.resize(m);
    r.resize(m);
    for (std::size_t i = 0; i < m; ++i) {
      const int k = d.instrument[i];
      const double jit = theta[layout.jitter_index(k)];
      var[i] = d.uncertainty_m_s[i] * d.uncertainty_m_s[i] + jit * jit;
      offset[i] = theta[layout.offset_index(k)];
    }
  }
  // The deterministic model's residuals into r.
  void residuals() {
    const VelocityData& d = model.data();
    model.planets_velocity(theta, d.time_days, planets);
    for (std::size_t i = 0; i < r.size(); ++i) r[i] = d.velocity_m_s[i] - offset[i] - planets[i];
  }
};

void per_call(benchmark::State& state, double lnl) {
  state.counters["per_call"] = benchmark::Counter(static_cast<double>(state.iterations()),
                                                  benchmark::Counter::kIsRate | benchmark::Counter::kInvert);
  state.counters["lnL"] = lnl;
  state.SetComplexityN(state.range(0));
}

// Planets + rotation-kernel GP: the whole likelihood call (factor and sweep in one pass).
void BM_GpRotationTwoPlanets(benchmark::State& state) {
  Setup s(static_cast<int>(state.range(0)));
  apsides::gp::SemiseparableGP gp;  // the workspace, reused by every call
  const apsides::gp::SemiseparableKernel kernel = kRotation.semiseparable();
  double lnl = 0.0;
  for (auto _ : state) {
    s.residuals();
    lnl = gp.compute_log_likelihood(kernel, s.model.data().time_days, s.var, s.r);
    benchmark::DoNotOptimize(lnl);
  }
  per_call(state, lnl);
}
BENCHMARK(BM_GpRotationTwoPlanets)->Arg(1000)->Arg(10000);
BENCHMARK(BM_GpRotationTwoPlanets)->Name("BM_GpRotationTwoPlanetsScaling")
    ->RangeMultiplier(2)->Range(500, 16000)->Complexity(benchmark::oN);

// The GP alone (kernel terms from the parameters, factor, then a separate forward sweep).
void BM_GpRotationOnly(benchmark::State& state) {
  Setup s(static_cast<int>(state.range(0)));
  s.residuals();
  apsides::gp::SemiseparableGP gp;
  double lnl = 0.0;
  for (auto _ : state) {
    if (!gp.compute(kRotation.semiseparable(), s.model.data().time_days, s.var).empty())
      state.SkipWithError("not PD");
    lnl = gp.log_likelihood(s.r);
    benchmark::DoNotOptimize(lnl);
  }
  per_call(state, lnl);
}
BENCHMARK(BM_GpRotationOnly)->Arg(1000)->Arg(10000);

// One solve with the factor kept (e.g. the conditional mean's K^-1 r).
void BM_GpRotationSolve(benchmark::State& state) {
  Setup s(static_cast<int>(state.range(0)));
  s.residuals();
  apsides::gp::SemiseparableGP gp;
  (void)gp.compute(kRotation.semiseparable(), s.model.data().time_days, s.var);
  std::vector<double> x(s.r.size());
  for (auto _ : state) {
    gp.solve(s.r, x);
    benchmark::DoNotOptimize(x.data());
  }
  per_call(state, 0.0);
}
BENCHMARK(BM_GpRotationSolve)->Arg(1000)->Arg(10000);

// Dense quasi-periodic kernel (Eigen LLT), planets included: O(N^3).
void BM_DenseQuasiPeriodicTwoPlanets(benchmark::State& state) {
  Setup s(static_cast<int>(state.range(0)));
  apsides::gp::DenseGP gp;
  const apsides::gp::QuasiPeriodicKernel qp{5.0, 40.0, 27.0, 0.6};
  double lnl = 0.0;
  for (auto _ : state) {
    s.residuals();
    if (!gp.compute(qp, s.model.data().time_days, s.var).empty()) state.SkipWithError("not PD");
    lnl = gp.log_likelihood(s.r);
    benchmark::DoNotOptimize(lnl);
  }
  per_call(state, lnl);
}
BENCHMARK(BM_DenseQuasiPeriodicTwoPlanets)->Arg(250)->Arg(500)->Arg(1000)->Unit(benchmark::kMillisecond);

}  // namespace

BENCHMARK_MAIN();
