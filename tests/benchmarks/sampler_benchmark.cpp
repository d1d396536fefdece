// Posterior evaluations per second of the ensemble sampler: 2 planets, 2 instruments,
// N = 200 velocities, 32 walkers, both cores (issue 5 target: >= 300 000 per second).
#include <memory>
#include <benchmark/benchmark.h>

#include <chrono>
#include <cmath>
#include <random>

#include "apsides/keplerian_model.h"
#include "apsides/prior.h"
#include "apsides/sampler.h"

namespace {

struct Setup {
  apsides::ModelLayout layout;
  apsides::ModelPriors priors;
  std::vector<double> theta;
  std::unique_ptr<apsides::KeplerianModel> model;
  Setup() {
    layout.n_planets = 2;
    layout.n_instruments = 2;
    apsides::VelocityData d;
    d.instrument_names = {"north", "south"};
    std::mt19937_64 rng(17);
    std::uniform_real_distribution<double> when(-600.0, 600.0);
    std::normal_distribution<double> noise(0.0, 2.0);
    theta.assign(layout.n_params(), 0.0);
    apsides::put_planet(theta, layout, 0, apsides::Planet::from_elements(6.41, 9.8, 0.05, 1.9, 0.3));
    apsides::put_planet(theta, layout, 1, apsides::Planet::from_elements(118.6, 14.2, 0.32, 4.4, 20.0));
    theta[layout.offset_index(0)] = -18.0;
    theta[layout.jitter_index(0)] = 1.2;
    theta[layout.offset_index(1)] = 41.0;
    theta[layout.jitter_index(1)] = 2.5;
    for (int i = 0; i < 200; ++i) {
      d.time_days.push_back(when(rng));
      d.instrument.push_back(i % 2);
      d.uncertainty_m_s.push_back(2.0);
    }
    std::sort(d.time_days.begin(), d.time_days.end());
    d.velocity_m_s.assign(200, 0.0);
    d.origin.assign(200, "bench");
    apsides::KeplerianModel truth(d, layout);
    const auto v = truth.predict(theta);
    for (int i = 0; i < 200; ++i) d.velocity_m_s[static_cast<std::size_t>(i)] = v[static_cast<std::size_t>(i)] + noise(rng);
    model = std::make_unique<apsides::KeplerianModel>(d, layout);
    const double lo[] = {1.0, 0.0, -1.0, -1.0, -200.0};
    const double hi[] = {1000.0, 100.0, 1.0, 1.0, 200.0};
    for (int p = 0; p < 2; ++p)
      for (int k = 0; k < 5; ++k) priors.parameter.push_back(apsides::Prior::uniform(lo[k], hi[k]));
    for (int i = 0; i < 2; ++i) {
      priors.parameter.push_back(apsides::Prior::uniform(-200.0, 200.0));
      priors.parameter.push_back(apsides::Prior::uniform(0.0, 50.0));
    }
    priors.eccentricity.assign(2, apsides::EccentricityPrior{});
  }
};

// Times the stepping loop alone (first to last on_step), leaving out the one-off start-up
// and the final convergence diagnostics, which a 2000-step run would otherwise be dominated by.
class StepClock : public apsides::SamplerObserver {
 public:
  void on_step(long step, std::span<const double>, std::span<const double>) override {
    const auto now = std::chrono::steady_clock::now();
    if (step == first_step_) start_ = now;
    last_ = now;
    last_step_ = step;
  }
  void on_checkpoint(const apsides::SamplerState&) override {}
  double seconds() const { return std::chrono::duration<double>(last_ - start_).count(); }
  long timed_steps() const { return last_step_ - first_step_; }
  long first_step_ = 1;

 private:
  std::chrono::steady_clock::time_point start_, last_;
  long last_step_ = 0;
};

// One log-posterior evaluation (prior + likelihood) at the truth, single thread.
void BM_LogPosterior(benchmark::State& state) {
  static Setup s;
  double acc = 0;
  for (auto _ : state) {
    const double lp = s.priors.log_density(s.theta, 2);
    acc += lp + s.model->log_likelihood(s.theta);
  }
  benchmark::DoNotOptimize(acc);
}
BENCHMARK(BM_LogPosterior);

void BM_SamplerEvaluations(benchmark::State& state) {
  static Setup s;
  const apsides::LogDensity f = [&](std::span<const double> th) {
    const double lp = s.priors.log_density(th, 2);
    return std::isfinite(lp) ? lp + s.model->log_likelihood(th) : lp;
  };
  apsides::SamplerOptions opt;
  opt.walkers = 32;
  opt.threads = static_cast<int>(state.range(0));
  opt.max_steps = 2000;
  opt.stop_when_converged = false;
  opt.check_every_steps = 1000000;
  std::vector<double> scale(s.theta.size(), 1e-4);
  apsides::SamplerState start;
  start.positions = apsides::initial_ball(f, s.theta, scale, 32, 1);
  long evals = 0;
  double loop_seconds = 0;
  long loop_evals = 0;
  for (auto _ : state) {
    StepClock clock;
    const auto r = apsides::run_sampler(f, s.theta.size(), opt, start, &clock);
    evals += r.evaluations;
    loop_seconds += clock.seconds();
    loop_evals += clock.timed_steps() * opt.walkers;
    benchmark::DoNotOptimize(r.acceptance_fraction);
  }
  // Whole run_sampler call, including the final diagnostics of the kept half.
  state.counters["evaluations_per_s"] = benchmark::Counter(static_cast<double>(evals), benchmark::Counter::kIsRate);
  // The stepping loop only (what a long run converges to).
  state.counters["loop_evaluations_per_s"] = static_cast<double>(loop_evals) / loop_seconds;
}
BENCHMARK(BM_SamplerEvaluations)->Arg(1)->Arg(2)->Unit(benchmark::kMillisecond)->UseRealTime();

}  // namespace

BENCHMARK_MAIN();
