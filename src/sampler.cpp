#include "apsides/sampler.h"

#include <fmt/format.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <deque>
#include <thread>

namespace apsides {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

std::uint64_t splitmix64(std::uint64_t x) {
  x += 0x9e3779b97f4a7c15ULL;
  x = (x ^ (x >> 30)) * 0xbf58476d1ce4e5b9ULL;
  x = (x ^ (x >> 27)) * 0x94d049bb133111ebULL;
  return x ^ (x >> 31);
}

// A fixed pool of threads that share out one job over a range of walkers. Items are
// claimed one at a time from a shared counter, and the calling thread takes part, so a
// half-step never waits for a helper that the OS has not scheduled yet: whoever is
// running does the work (a half-step is only ~16 evaluations of a few microseconds, too
// short for a condition-variable or barrier handoff on a busy machine). Which thread moves
// which walker never affects the result (each walker's random numbers are its own, and a
// walker's move writes only its own row).
class WorkerPool {
 public:
  explicit WorkerPool(int threads) : n_(std::max(1, threads)) {
    for (int t = 1; t < n_; ++t) workers_.emplace_back([this] { loop(); });
  }
  WorkerPool(const WorkerPool&) = delete;
  WorkerPool& operator=(const WorkerPool&) = delete;
  ~WorkerPool() {
    quit_.store(true);
    generation_.fetch_add(1);
    generation_.notify_all();
    for (auto& w : workers_) w.join();
  }
  void run(int count, const std::function<void(int)>& job) {
    if (n_ == 1 || count <= 1 || count > 0xffff) {
      for (int i = 0; i < count; ++i) job(i);
      return;
    }
    // Every item of the previous run is done, so no helper touches job_ or done_ now.
    job_ = &job;
    done_.store(0, std::memory_order_relaxed);
    const std::uint32_t gen = generation_.load(std::memory_order_relaxed) + 1;
    claim_.store(pack(gen, count, 0), std::memory_order_release);
    generation_.store(gen, std::memory_order_release);
    generation_.notify_all();
    work(gen);
    for (int spins = 0; done_.load(std::memory_order_acquire) != count; ++spins)
      if (spins > 64) std::this_thread::yield();
  }

 private:
  // Claim word: generation (32 bits) | count (16 bits) | next index (16 bits), so a claim
  // made by a late helper can never take an item of a later run.
  static std::uint64_t pack(std::uint32_t gen, int count, int index) {
    return (static_cast<std::uint64_t>(gen) << 32) | (static_cast<std::uint64_t>(count) << 16) |
           static_cast<std::uint64_t>(index);
  }
  void work(std::uint32_t gen) {
    std::uint64_t v = claim_.load(std::memory_order_acquire);
    for (;;) {
      const int count = static_cast<int>((v >> 16) & 0xffff), index = static_cast<int>(v & 0xffff);
      if (static_cast<std::uint32_t>(v >> 32) != gen || index >= count) return;
      if (!claim_.compare_exchange_weak(v, v + 1, std::memory_order_acq_rel, std::memory_order_acquire)) continue;
      (*job_)(index);
      done_.fetch_add(1, std::memory_order_release);
      v = claim_.load(std::memory_order_acquire);
    }
  }
  void loop() {
    std::uint32_t seen = 0;
    for (;;) {
      std::uint32_t gen = generation_.load(std::memory_order_acquire);
      for (int spins = 0; gen == seen && spins < 2000; ++spins) gen = generation_.load(std::memory_order_acquire);
      if (gen == seen) {
        generation_.wait(seen, std::memory_order_acquire);
        continue;
      }
      if (quit_.load()) return;
      seen = gen;
      work(gen);
    }
  }
  int n_;
  std::vector<std::thread> workers_;
  const std::function<void(int)>* job_ = nullptr;
  std::atomic<std::uint64_t> claim_{0};
  std::atomic<std::uint32_t> generation_{0};
  std::atomic<int> done_{0};
  std::atomic<bool> quit_{false};
};

bool all_finite(std::span<const double> x) {
  return std::all_of(x.begin(), x.end(), [](double v) { return std::isfinite(v); });
}

}  // namespace

std::string SamplerOptions::Validate() const {
  if (walkers < 4 || walkers % 2 != 0) return fmt::format("walkers = {}: must be even and >= 4", walkers);
  if (max_steps < 1) return fmt::format("max_steps = {}: must be >= 1", max_steps);
  if (min_steps < 0) return fmt::format("min_steps = {}: must be >= 0", min_steps);
  if (!(ess_target > 0)) return fmt::format("ess_target = {}: must be > 0", ess_target);
  if (!(rhat_max > 1.0)) return fmt::format("rhat_max = {}: must be > 1", rhat_max);
  if (!(min_tau_multiple >= 0)) return fmt::format("min_tau_multiple = {}: must be >= 0", min_tau_multiple);
  if (!(window_c > 0)) return fmt::format("window_c = {}: must be > 0", window_c);
  if (threads < 1 || threads > 256) return fmt::format("threads = {}: must be in [1, 256]", threads);
  if (!(stretch_a > 1.0)) return fmt::format("stretch_a = {}: must be > 1", stretch_a);
  if (!(de_probability >= 0 && de_probability <= 1))
    return fmt::format("de_probability = {}: must be in [0, 1]", de_probability);
  if (!(de_mode_jump_probability >= 0 && de_mode_jump_probability <= 1))
    return fmt::format("de_mode_jump_probability = {}: must be in [0, 1]", de_mode_jump_probability);
  if (!(de_jitter >= 0 && de_jitter < 1)) return fmt::format("de_jitter = {}: must be in [0, 1)", de_jitter);
  if (check_every_steps < 1) return fmt::format("check_every_steps = {}: must be >= 1", check_every_steps);
  if (checkpoint_steps < 1) return fmt::format("checkpoint_steps = {}: must be >= 1", checkpoint_steps);
  if (diagnostic_rows < 16) return fmt::format("diagnostic_rows = {}: must be >= 16", diagnostic_rows);
  return "";
}

std::string to_string(SamplerTermination t) {
  switch (t) {
    case SamplerTermination::kNotRun: return "not run";
    case SamplerTermination::kConverged: return "converged";
    case SamplerTermination::kMaxSteps: return "max_steps reached";
    case SamplerTermination::kFailed: return "failed";
    case SamplerTermination::kInterrupted: return "interrupted";
  }
  return "?";
}

std::string SamplerResult::BriefReport() const {
  return fmt::format("{}: {} steps x {} walkers (burn-in {} discarded), R-hat max {:.4f}, ESS min {:.0f}, tau max {:.1f}, acceptance {:.2f}",
                     to_string(termination), steps, walkers, burn_in_steps, rhat_max, ess_min, tau_max,
                     acceptance_fraction);
}

std::string SamplerResult::FullReport(const std::vector<std::string>& names) const {
  std::string s = BriefReport() + "\n" + message + "\n";
  s += fmt::format("{:<28} {:>9} {:>10} {:>10} {:>9}\n", "parameter", "R-hat", "ESS bulk", "ESS tail", "tau");
  for (std::size_t i = 0; i < diagnostics.size(); ++i) {
    const auto& d = diagnostics[i];
    const std::string name = i < names.size() ? names[i] : fmt::format("theta[{}]", i);
    s += fmt::format("{:<28} {:>9.4f} {:>10.0f} {:>10.0f} {:>8.1f}{}\n", name, d.rhat, d.ess_bulk, d.ess_tail, d.tau,
                     d.tau_reliable ? " " : "*");
  }
  if (std::any_of(diagnostics.begin(), diagnostics.end(), [](const auto& d) { return !d.tau_reliable; }))
    s += "* tau is a lower bound: the chain is shorter than Sokal's window needs.\n";
  return s;
}

double sampler_uniform(std::uint64_t seed, long step, int walker, int draw) {
  std::uint64_t h = splitmix64(seed);
  h = splitmix64(h ^ static_cast<std::uint64_t>(step));
  h = splitmix64(h ^ (static_cast<std::uint64_t>(walker) << 20));
  h = splitmix64(h ^ static_cast<std::uint64_t>(draw));
  return static_cast<double>(h >> 11) * 0x1.0p-53;
}

double stretch_z(double u, double a) {
  const double r = (a - 1.0) * u + 1.0;
  return r * r / a;
}

std::vector<double> initial_ball(const LogDensity& log_density, std::span<const double> center,
                                 std::span<const double> scale, int walkers, std::uint64_t seed) {
  const std::size_t dim = center.size();
  if (!std::isfinite(log_density(center))) return {};
  std::vector<double> out(static_cast<std::size_t>(walkers) * dim);
  std::vector<double> x(dim);
  for (int w = 0; w < walkers; ++w) {
    double shrink = 1.0;
    for (int attempt = 0;; ++attempt) {
      if (attempt > 0 && attempt % 1000 == 0) shrink *= 0.1;
      for (std::size_t d = 0; d < dim; ++d) {
        const double u = sampler_uniform(seed ^ 0x5bd1e995ULL, -1 - attempt, w, static_cast<int>(d));
        x[d] = center[d] + shrink * scale[d] * (2.0 * u - 1.0);
      }
      if (attempt >= 10000) x.assign(center.begin(), center.end());
      if (std::isfinite(log_density(x))) break;
    }
    std::copy(x.begin(), x.end(), out.begin() + static_cast<long>(w * dim));
  }
  return out;
}

std::vector<long> diagnostic_steps(long steps, std::size_t max_rows) {
  long thin = 1;
  while (steps / thin > static_cast<long>(2 * max_rows)) thin *= 2;
  std::vector<long> out;
  for (long s = thin; s <= steps; s += thin)
    if (s > steps / 2) out.push_back(s);
  return out;
}

std::vector<ParameterDiagnostics> diagnose_rows(const std::vector<std::vector<double>>& rows, int walkers,
                                                std::size_t dim, double window_c, long thin) {
  std::vector<ParameterDiagnostics> out(dim);
  auto one = [&](std::size_t p) {
    ChainSet chains(static_cast<std::size_t>(walkers), std::vector<double>(rows.size()));
    for (std::size_t r = 0; r < rows.size(); ++r)
      for (int w = 0; w < walkers; ++w) chains[static_cast<std::size_t>(w)][r] = rows[r][static_cast<std::size_t>(w) * dim + p];
    ParameterDiagnostics d = diagnose(chains, window_c);
    d.tau *= static_cast<double>(thin);
    out[p] = d;
  };
  // Two threads over parameters; each parameter's numbers do not depend on the split.
  std::thread helper([&] {
    for (std::size_t p = 1; p < dim; p += 2) one(p);
  });
  for (std::size_t p = 0; p < dim; p += 2) one(p);
  helper.join();
  return out;
}

namespace {
long round_up(long x, long m) { return ((x + m - 1) / m) * m; }
}  // namespace

long first_check_step(const SamplerOptions& o) {
  return round_up(std::max(o.min_steps, o.check_every_steps), o.check_every_steps);
}

long next_check_step(long previous, const SamplerOptions& o) {
  const long grown = previous + std::max(o.check_every_steps, previous / 5);
  return round_up(grown, o.check_every_steps);
}

SamplerResult run_sampler(const LogDensity& log_density, std::size_t dim, const SamplerOptions& options,
                          const SamplerState& start, SamplerObserver* observer,
                          const std::vector<std::vector<double>>* resume_chain_rows) {
  SamplerResult result;
  result.walkers = options.walkers;
  result.dim = dim;
  const auto t0 = std::chrono::steady_clock::now();
  if (const std::string err = options.Validate(); !err.empty()) {
    result.termination = SamplerTermination::kFailed;
    result.message = "Invalid sampler options: " + err;
    return result;
  }
  const int nw = options.walkers;
  const std::size_t nwu = static_cast<std::size_t>(nw);
  SamplerState state = start;
  if (dim == 0 || state.positions.size() != nwu * dim) {
    result.termination = SamplerTermination::kFailed;
    result.message = fmt::format("The start holds {} numbers; {} walkers x {} parameters are needed.",
                                 state.positions.size(), nw, dim);
    return result;
  }
  if (state.accepted.size() != nwu) state.accepted.assign(nwu, 0);
  if (state.log_prob.size() != nwu) {
    state.log_prob.resize(nwu);
    for (std::size_t w = 0; w < nwu; ++w) {
      state.log_prob[w] = log_density(std::span<const double>(state.positions.data() + w * dim, dim));
      ++result.evaluations;
    }
  }
  for (std::size_t w = 0; w < nwu; ++w) {
    if (!std::isfinite(state.log_prob[w]) ||
        !all_finite(std::span<const double>(state.positions.data() + w * dim, dim))) {
      result.termination = SamplerTermination::kFailed;
      result.message = fmt::format("Walker {} starts where the log-posterior is not finite.", w);
      return result;
    }
  }

  // Thinned rows of the chain (steps multiple of `thin`) for the diagnostics.
  long thin = 1;
  while (state.step / thin > static_cast<long>(2 * options.diagnostic_rows)) thin *= 2;
  std::deque<std::pair<long, std::vector<double>>> rows;
  if (resume_chain_rows != nullptr && state.step > 0) {
    const std::vector<long> steps = diagnostic_steps(state.step, options.diagnostic_rows);
    for (std::size_t i = 0; i < steps.size() && i < resume_chain_rows->size(); ++i)
      rows.emplace_back(steps[i], (*resume_chain_rows)[i]);
  }

  // Convergence checks on a fixed geometric schedule (each check at least 20 % more steps
  // than the last, on multiples of check_every_steps): a pure function of the step, so a
  // resumed run checks and stops exactly where the uninterrupted one would, and the cost
  // of the diagnostics stays a small fraction of the sampling however long the chain.
  long next_check = first_check_step(options);
  while (next_check <= state.step) next_check = next_check_step(next_check, options);

  auto current_diagnostics = [&](long steps) {
    std::vector<std::vector<double>> kept;
    for (const auto& [s, r] : rows)
      if (s > steps / 2) kept.push_back(r);
    SamplerResult d;
    d.steps = steps;
    d.burn_in_steps = steps / 2;
    d.walkers = nw;
    d.dim = dim;
    if (kept.size() >= 8) {
      d.diagnostics = diagnose_rows(kept, nw, dim, options.window_c, thin);
      d.rhat_max = 0;
      d.ess_min = std::numeric_limits<double>::infinity();
      d.tau_max = 0;
      for (const auto& p : d.diagnostics) {
        d.rhat_max = std::isnan(p.rhat) ? kNaN : std::max(d.rhat_max, p.rhat);
        d.ess_min = std::isnan(p.ess_bulk) || std::isnan(p.ess_tail) ? kNaN : std::min({d.ess_min, p.ess_bulk, p.ess_tail});
        d.tau_max = std::max(d.tau_max, p.tau);
      }
    }
    long acc = 0;
    for (long a : state.accepted) acc += a;
    d.acceptance_fraction = steps > 0 ? static_cast<double>(acc) / (static_cast<double>(steps) * nw) : kNaN;
    return d;
  };
  auto is_converged = [&](const SamplerResult& d) {
    if (d.diagnostics.empty()) return false;
    for (const auto& p : d.diagnostics) {
      if (!(p.rhat < options.rhat_max) || !(p.ess_bulk >= options.ess_target) || !(p.ess_tail >= options.ess_target) ||
          !p.tau_reliable)
        return false;
    }
    const double kept_steps = static_cast<double>(d.steps - d.burn_in_steps);
    return kept_steps > options.min_tau_multiple * d.tau_max;
  };

  WorkerPool pool(options.threads);
  const double de_gamma = 2.38 / std::sqrt(2.0 * static_cast<double>(dim));
  const int half = nw / 2;
  std::vector<double> proposal(nwu * dim);
  std::atomic<long> evaluations{0};
  long last_checkpoint = state.step;
  bool stopped = false, converged = false;
  SamplerResult last_check;

  while (state.step < options.max_steps) {
    const long step = state.step;  // step being made (0-based)
    for (int h = 0; h < 2; ++h) {
      const int first = h * half;        // walkers being moved
      const int other = (1 - h) * half;  // the complement they move against
      const std::function<void(int)> job = [&](int i) {
        const int k = first + i;
        const std::size_t ku = static_cast<std::size_t>(k);
        double* y = proposal.data() + ku * dim;
        const double* xk = state.positions.data() + ku * dim;
        double log_ratio_extra = 0.0;
        const bool de = sampler_uniform(options.seed, step, k, 0) < options.de_probability;
        if (!de) {
          const int j = other + std::min(half - 1, static_cast<int>(sampler_uniform(options.seed, step, k, 1) * half));
          const double* xj = state.positions.data() + static_cast<std::size_t>(j) * dim;
          const double z = stretch_z(sampler_uniform(options.seed, step, k, 4), options.stretch_a);
          for (std::size_t d = 0; d < dim; ++d) y[d] = xj[d] + z * (xk[d] - xj[d]);
          log_ratio_extra = (static_cast<double>(dim) - 1.0) * std::log(z);
        } else {
          const int a = std::min(half - 1, static_cast<int>(sampler_uniform(options.seed, step, k, 1) * half));
          int b = std::min(half - 2, static_cast<int>(sampler_uniform(options.seed, step, k, 2) * (half - 1)));
          if (b >= a) ++b;
          const double* xa = state.positions.data() + static_cast<std::size_t>(other + a) * dim;
          const double* xb = state.positions.data() + static_cast<std::size_t>(other + b) * dim;
          double gamma = sampler_uniform(options.seed, step, k, 4) < options.de_mode_jump_probability ? 1.0 : de_gamma;
          gamma *= 1.0 + options.de_jitter * (2.0 * sampler_uniform(options.seed, step, k, 5) - 1.0);
          for (std::size_t d = 0; d < dim; ++d) y[d] = xk[d] + gamma * (xa[d] - xb[d]);
        }
        const double lp = log_density(std::span<const double>(y, dim));
        evaluations.fetch_add(1, std::memory_order_relaxed);
        if (!std::isfinite(lp)) return;
        const double log_alpha = log_ratio_extra + lp - state.log_prob[ku];
        const double u = sampler_uniform(options.seed, step, k, 3);
        if (log_alpha >= 0.0 || std::log(u) < log_alpha) {
          std::copy(y, y + dim, state.positions.data() + ku * dim);
          state.log_prob[ku] = lp;
          ++state.accepted[ku];
        }
      };
      pool.run(half, job);
    }
    state.step = step + 1;
    if (observer) observer->on_step(state.step, state.positions, state.log_prob);

    if (state.step % thin == 0) rows.emplace_back(state.step, state.positions);
    while (!rows.empty() && rows.front().first <= state.step / 2) rows.pop_front();
    if (state.step / thin > static_cast<long>(2 * options.diagnostic_rows)) {
      thin *= 2;
      std::erase_if(rows, [&](const auto& r) { return r.first % thin != 0; });
    }
    if (state.step % options.checkpoint_steps == 0 && observer) {
      observer->on_checkpoint(state);
      last_checkpoint = state.step;
    }
    if (state.step == next_check) {
      next_check = next_check_step(next_check, options);
      last_check = current_diagnostics(state.step);
      converged = is_converged(last_check);
      if (observer) observer->on_check(last_check);
      if (converged && options.stop_when_converged) break;
    }
    if (observer && observer->should_stop()) {
      stopped = true;
      break;
    }
  }
  if (observer && last_checkpoint != state.step) observer->on_checkpoint(state);

  const SamplerResult final_d = last_check.steps == state.step ? last_check : current_diagnostics(state.step);
  result.steps = state.step;
  result.burn_in_steps = state.step / 2;
  result.diagnostics = final_d.diagnostics;
  result.rhat_max = final_d.rhat_max;
  result.ess_min = final_d.ess_min;
  result.tau_max = final_d.tau_max;
  result.acceptance_fraction = final_d.acceptance_fraction;
  result.evaluations += evaluations.load();
  result.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  converged = converged || is_converged(final_d);
  const std::string rule = fmt::format(
      "Rule: R-hat < {} and bulk/tail ESS >= {} for every parameter, kept chain > {} tau; burn-in = first half of the steps.",
      options.rhat_max, options.ess_target, options.min_tau_multiple);
  if (stopped) {
    result.termination = SamplerTermination::kInterrupted;
    result.message = fmt::format("Stopped at step {} on request; the state is saved. {}", state.step, rule);
  } else if (converged) {
    result.termination = SamplerTermination::kConverged;
    result.message = fmt::format("Converged after {} steps. {}", state.step, rule);
  } else {
    result.termination = SamplerTermination::kMaxSteps;
    result.message = fmt::format(
        "WARNING: not converged after max_steps = {} steps (R-hat max {:.4f}, ESS min {:.0f}, kept {} steps vs {} tau = {:.0f}). "
        "Intervals from these chains may be wrong; run longer (--resume --max-steps N). {}",
        state.step, result.rhat_max, result.ess_min, state.step - state.step / 2, options.min_tau_multiple,
        options.min_tau_multiple * result.tau_max, rule);
  }
  return result;
}

}  // namespace apsides
