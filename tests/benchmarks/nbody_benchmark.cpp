// The N-body engine (include/apsides/nbody.h) at the sizes of the interacting-planets issue:
//   * BM_NbodyTwoPlanets: two planets (10 and 20.2 d) over 1500 d at step P_in/30, one
//     evaluation = 100 star velocities + every transit time of both planets (~223);
//     with the default corrector (order 3) and without it.
//   * BM_NbodySeven: seven planets (TRAPPIST-1 masses and periods, M = 0.0898 M_sun) over
//     1500 d at step 0.06 d, 447 transit times spread like the published data set.
//   * BM_WhStep/N: the bare Wisdom–Holman step for N planets; counter per_planet_step.
//   * BM_Megno: 2 planets, 1000 inner orbits with the tangent map.
//   * BM_NbodyReference: the Bulirsch–Stoer reference on the two-planet work.
// `nbody_benchmark --dump=two|seven` prints the work (initial barycentric state, times,
// transit windows) as JSON for scripts/bench_nbody.py, which times scipy's DOP853 on it.
#include <benchmark/benchmark.h>
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <cstring>
#include <string>
#include <utility>
#include <vector>

#include "apsides/constants.h"
#include "apsides/nbody.h"
#include "apsides/stability.h"
#include "dynamics/wh_core.h"

using namespace apsides;

namespace {

struct Work {
  NbodySystem system;
  std::vector<double> rv_times;
  std::vector<std::vector<long long>> epochs;
  NbodyOptions options;
};

Work two_planets() {
  Work w;
  w.system.star_mass_msun = 1.0;
  w.system.osculating_epoch_days = 750.0;
  w.system.planets = {NbodyPlanet::from_elements(3e-5, 10.0, 0.05, 0.3, 752.0, 1.562),
                      NbodyPlanet::from_elements(3e-5, 20.2, 0.03, 1.0, 757.0, 1.565)};
  for (int i = 0; i < 100; ++i) w.rv_times.push_back(15.0 * i + 3.3);
  w.epochs.resize(2);
  for (long long e = -75; e <= 74; ++e) w.epochs[0].push_back(e);
  for (long long e = -37; e <= 36; ++e) w.epochs[1].push_back(e);
  w.options.step_days = 10.0 / 30.0;
  return w;
}

Work seven_planets() {
  // TRAPPIST-1: masses (Earth masses) and periods of Agol et al. 2021 (tests/data/real/README).
  const double mstar = 0.0898;
  const double mass[7] = {1.374, 1.308, 0.388, 0.692, 1.039, 1.321, 0.325};
  const double period[7] = {1.51088, 2.42180, 4.04978, 6.09963, 9.20670, 12.35294, 18.77287};
  const int count[7] = {161, 107, 53, 49, 33, 30, 14};  // transits per planet in the data set
  Work w;
  w.system.star_mass_msun = mstar;
  w.system.osculating_epoch_days = 750.0;
  for (int k = 0; k < 7; ++k) {
    w.system.planets.push_back(NbodyPlanet::from_elements(mass[k] * constants::kGMEarth / constants::kGMSun / mstar,
                                                          period[k], 0.0, 0.0, 750.0 + 0.37 * k));
    const long long span = static_cast<long long>(740.0 / period[k]);
    std::vector<long long> ep;
    for (int i = 0; i < count[k]; ++i) ep.push_back(-span + (2 * span * i) / (count[k] - 1));
    w.epochs.push_back(ep);
  }
  w.options.step_days = 0.06;
  return w;
}

void run_work(benchmark::State& state, const Work& w, const NbodyOptions& options) {
  NbodyObservables out;
  compute_observables(w.system, w.rv_times, w.epochs, options, out);
  if (!out.ok()) {
    state.SkipWithError(out.message.c_str());
    return;
  }
  for (auto _ : state) {
    compute_observables(w.system, w.rv_times, w.epochs, options, out);
    benchmark::DoNotOptimize(out.star_velocity_m_s.data());
    benchmark::ClobberMemory();
  }
  std::size_t nt = 0;
  for (const auto& e : w.epochs) nt += e.size();
  state.counters["steps"] = static_cast<double>(out.steps);
  state.counters["transits"] = static_cast<double>(nt);
  state.counters["per_eval"] = benchmark::Counter(static_cast<double>(state.iterations()),
                                                  benchmark::Counter::kIsRate | benchmark::Counter::kInvert);
  state.counters["per_planet_step"] =
      benchmark::Counter(static_cast<double>(state.iterations()) * static_cast<double>(out.steps) *
                             static_cast<double>(w.system.planets.size()),
                         benchmark::Counter::kIsRate | benchmark::Counter::kInvert);
}

void BM_NbodyTwoPlanets(benchmark::State& state) {
  const Work w = two_planets();
  NbodyOptions o = w.options;
  o.corrector_order = static_cast<int>(state.range(0));
  run_work(state, w, o);
}
BENCHMARK(BM_NbodyTwoPlanets)->Arg(3)->Arg(0)->Unit(benchmark::kMicrosecond);

void BM_NbodySeven(benchmark::State& state) {
  const Work w = seven_planets();
  NbodyOptions o = w.options;
  o.corrector_order = static_cast<int>(state.range(0));
  run_work(state, w, o);
}
BENCHMARK(BM_NbodySeven)->Arg(3)->Arg(0)->Unit(benchmark::kMillisecond);

void BM_NbodyReference(benchmark::State& state) {
  const Work w = two_planets();
  NbodyOptions o = w.options;
  o.integrator = NbodyIntegrator::kReference;
  run_work(state, w, o);
}
BENCHMARK(BM_NbodyReference)->Unit(benchmark::kMillisecond);

// The bare map: N planets (the seven above, first N), 10 000 steps of 0.06 d.
void BM_WhStep(benchmark::State& state) {
  const int n = static_cast<int>(state.range(0));
  Work w = seven_planets();
  w.system.planets.resize(static_cast<std::size_t>(n));
  dynamics::PreparedSystem ps;
  dynamics::prepare_system(w.system, 1.0, ps);
  dynamics::WhStepper stepper;
  const int steps = 10000;
  for (auto _ : state) {
    stepper.reset(&ps.sys, ps.initial);
    dynamics::WhFlags flags;
    for (int i = 0; i < steps; ++i) stepper.step(0.06, flags);
    benchmark::DoNotOptimize(stepper.state().r[1].x);
  }
  state.counters["per_planet_step"] =
      benchmark::Counter(static_cast<double>(state.iterations()) * steps * n,
                         benchmark::Counter::kIsRate | benchmark::Counter::kInvert);
}
BENCHMARK(BM_WhStep)->Arg(1)->Arg(2)->Arg(3)->Arg(5)->Arg(7)->Unit(benchmark::kMillisecond);

void BM_Megno(benchmark::State& state) {
  const Work w = two_planets();
  MegnoOptions o;
  o.inner_orbits = 1000.0;
  for (auto _ : state) benchmark::DoNotOptimize(megno(w.system, o).mean_megno);
}
BENCHMARK(BM_Megno)->Unit(benchmark::kMillisecond);

void dump(const Work& w) {
  const CartesianState s = nbody_initial_state(w.system);
  std::string out = "{\"G\": " + fmt::format("{:.17g}", gravitational_constant_au_msun_day());
  out += fmt::format(", \"t0\": {:.17g}, \"mass\": [", w.system.osculating_epoch_days);
  for (std::size_t i = 0; i < s.mass_msun.size(); ++i) out += fmt::format("{}{:.17g}", i ? ", " : "", s.mass_msun[i]);
  out += "], \"y0\": [";
  bool first = true;
  for (const auto& p : s.position_au)
    for (double x : p) out += fmt::format("{}{:.17g}", std::exchange(first, false) ? "" : ", ", x);
  for (const auto& v : s.velocity_au_per_day)
    for (double x : v) out += fmt::format(", {:.17g}", x);
  out += "], \"rv_times\": [";
  for (std::size_t i = 0; i < w.rv_times.size(); ++i) out += fmt::format("{}{:.17g}", i ? ", " : "", w.rv_times[i]);
  // The span the engine integrates (every requested epoch +- one period).
  double lo = w.system.osculating_epoch_days, hi = lo;
  for (double t : w.rv_times) {
    lo = std::min(lo, t);
    hi = std::max(hi, t);
  }
  std::size_t nt = 0;
  for (std::size_t p = 0; p < w.epochs.size(); ++p) {
    const NbodyPlanet& pl = w.system.planets[p];
    for (long long e : w.epochs[p]) {
      lo = std::min(lo, pl.t_conj_days + static_cast<double>(e - 1) * pl.period_days);
      hi = std::max(hi, pl.t_conj_days + static_cast<double>(e + 1) * pl.period_days);
    }
    nt += w.epochs[p].size();
  }
  out += fmt::format("], \"t_lo\": {:.17g}, \"t_hi\": {:.17g}, \"transits\": {}", lo, hi, nt);
  // Our transit times (planet index 1.. as in the state), for the comparison.
  const NbodyObservables obs = compute_observables(w.system, w.rv_times, w.epochs, w.options);
  out += ", \"ours\": {";
  for (std::size_t p = 0; p < obs.transit_times_days.size(); ++p) {
    out += fmt::format("{}\"{}\": [", p ? ", " : "", p + 1);
    for (std::size_t k = 0; k < obs.transit_times_days[p].size(); ++k)
      out += fmt::format("{}{:.17g}", k ? ", " : "", obs.transit_times_days[p][k]);
    out += "]";
  }
  out += "}}";
  fmt::print("{}\n", out);
}

}  // namespace

int main(int argc, char** argv) {
  for (int i = 1; i < argc; ++i) {
    if (std::strcmp(argv[i], "--dump=two") == 0) {
      dump(two_planets());
      return 0;
    }
    if (std::strcmp(argv[i], "--dump=seven") == 0) {
      dump(seven_planets());
      return 0;
    }
  }
  benchmark::Initialize(&argc, argv);
  if (benchmark::ReportUnrecognizedArguments(argc, argv)) return 1;
  benchmark::RunSpecifiedBenchmarks();
  benchmark::Shutdown();
  return 0;
}
