// Affine-invariant ensemble sampler.
//
// Moves (each walker, each step, one of):
//   * stretch move, Goodman & Weare 2010, CAMCoS 5, 65: Y = X_j + z (X_k - X_j), z drawn
//     from g(z) ~ z^-1/2 on [1/a, a] as z = ((a - 1) u + 1)^2 / a, accepted with
//     min(1, z^(n-1) p(Y) / p(X_k));
//   * differential-evolution move, ter Braak 2006, Stat. Comput. 16, 239:
//     Y = X_k + gamma (X_i - X_j) + e, gamma = 2.38 / sqrt(2 n) (1 with probability
//     `de_mode_jump_probability`, to jump between modes), e a small symmetric jitter;
//     accepted with min(1, p(Y) / p(X_k)).
// The ensemble is updated in two halves, each half moved against the other (Foreman-Mackey
// et al. 2013's parallel scheme), so the walkers of one half can be evaluated at once on
// `threads` cores. Every random number a walker uses at a step is a pure function of
// (seed, step, walker, draw), a counter-based stream: the chains are bitwise identical
// whatever the number of threads, and a run resumed from any saved state continues
// exactly as the uninterrupted run would.
//
// Convergence (checked on a geometric schedule, see next_check_step, on the kept part of the chain, see
// SamplerResult::burn_in_steps): rank-normalised split R-hat < rhat_max, bulk and tail ESS
// >= ess_target for every parameter, and kept chain length > min_tau_multiple x tau_max.
// Burn-in rule: the first half of the steps are discarded (Gelman et al., Bayesian Data
// Analysis, 3rd ed., section 11.4); all diagnostics use the second half.
//
// Memory is flat in the chain length: the sampler holds the current ensemble and a thinned
// copy of the kept chain for diagnostics (at most `diagnostic_rows` rows, thinning by
// powers of two); every step is handed to the observer, which streams it to disk.
#pragma once

#include <cstdint>
#include <functional>
#include <limits>
#include <span>
#include <string>
#include <vector>

#include "apsides/diagnostics.h"

namespace apsides {

// Log-density of the target; called concurrently from several threads, so it must be
// thread-safe. Returns -inf outside the support.
using LogDensity = std::function<double(std::span<const double>)>;

struct SamplerOptions {
  int walkers = 32;                  // even, >= 2 x dimension + 2 recommended
  long max_steps = 200000;           // hard limit on steps (each step moves every walker)
  long min_steps = 1000;             // never stop before this many steps
  double ess_target = 2000.0;        // bulk and tail ESS for every parameter
  double rhat_max = 1.01;            // Vehtari et al. 2021 threshold
  double min_tau_multiple = 50.0;    // kept chain longer than this x tau_max
  double window_c = 5.0;             // Sokal window constant
  std::uint64_t seed = 1;
  int threads = 2;                   // cores used; results do not depend on it
  double stretch_a = 2.0;            // Goodman & Weare scale a > 1
  double de_probability = 0.2;       // chance that a walker's move is a DE move
  double de_mode_jump_probability = 0.1;  // DE moves with gamma = 1
  double de_jitter = 1e-4;           // relative jitter e of DE moves (uniform, symmetric)
  long check_every_steps = 500;      // convergence checks
  long checkpoint_steps = 1000;      // observer's checkpoint calls
  std::size_t diagnostic_rows = 2048;  // thinned rows kept in memory for diagnostics
  bool stop_when_converged = true;   // false: always run max_steps

  std::string Validate() const;
};

// The full sampler state at a step boundary: enough to continue bitwise identically.
struct SamplerState {
  long step = 0;                          // steps done
  std::vector<double> positions;          // walkers x dim, row-major
  std::vector<double> log_prob;           // per walker
  std::vector<long> accepted;             // per walker, accepted moves so far
};

enum class SamplerTermination { kNotRun, kConverged, kMaxSteps, kFailed, kInterrupted };
std::string to_string(SamplerTermination t);

struct SamplerResult {
  SamplerTermination termination = SamplerTermination::kNotRun;
  std::string message = "The sampler was not run.";
  long steps = 0;                 // total steps in the chain
  long burn_in_steps = 0;         // discarded: the first half
  int walkers = 0;
  std::size_t dim = 0;
  double acceptance_fraction = std::numeric_limits<double>::quiet_NaN();
  std::vector<ParameterDiagnostics> diagnostics;  // per parameter, on the kept half
  double rhat_max = std::numeric_limits<double>::quiet_NaN();
  double ess_min = std::numeric_limits<double>::quiet_NaN();   // min over bulk and tail
  double tau_max = std::numeric_limits<double>::quiet_NaN();   // in steps
  long evaluations = 0;           // log-density calls in this run (not counting resumed part)
  double seconds = 0.0;

  bool converged() const { return termination == SamplerTermination::kConverged; }
  std::string BriefReport() const;
  std::string FullReport(const std::vector<std::string>& names = {}) const;
};

// Receives the chain as it grows. All calls come from the thread that called run_sampler.
class SamplerObserver {
 public:
  virtual ~SamplerObserver() = default;
  // One step: positions (walkers x dim, row-major) and log-probabilities after the step.
  virtual void on_step(long step, std::span<const double> positions, std::span<const double> log_prob) = 0;
  // Every checkpoint_steps steps and at the end: flush, save the state.
  virtual void on_checkpoint(const SamplerState& state) = 0;
  // After each convergence check (diagnostics of the current kept chain).
  virtual void on_check(const SamplerResult& progress) { (void)progress; }
  // Polled every step: return true to stop now (state is checkpointed first).
  virtual bool should_stop() { return false; }
};

// Uniform deviate in [0, 1) number `draw` of walker `walker` at step `step`: the
// counter-based stream all moves use (splitmix64 finaliser of the combined counter).
double sampler_uniform(std::uint64_t seed, long step, int walker, int draw);
// The stretch factor z for a uniform u: ((a - 1) u + 1)^2 / a.
double stretch_z(double u, double a);

// Draw walkers from a ball: start[w] = center + scale * (2u - 1) componentwise, redrawn
// until log_density is finite (up to 1000 tries per walker, then the ball shrinks).
// Deterministic for a seed. Returns walkers x dim row-major; throws nothing: a centre
// with -inf density returns an empty vector.
std::vector<double> initial_ball(const LogDensity& log_density, std::span<const double> center,
                                 std::span<const double> scale, int walkers, std::uint64_t seed);

// Runs from `start` (walkers x dim row-major, all with finite density), or continues
// `resume` when its step > 0. `resume_thinned` optionally supplies the thinned diagnostic
// rows of the kept chain so far (see thinned_rows_for_resume).
SamplerResult run_sampler(const LogDensity& log_density, std::size_t dim, const SamplerOptions& options,
                          const SamplerState& start, SamplerObserver* observer = nullptr,
                          const std::vector<std::vector<double>>* resume_chain_rows = nullptr);

// The convergence-check schedule: the first check, and the one after `previous` (at least
// check_every_steps and 20 % more steps later, on multiples of check_every_steps).
long first_check_step(const SamplerOptions& options);
long next_check_step(long previous, const SamplerOptions& options);

// Which stored steps the diagnostics of a chain of `steps` steps use (the thinned rows of
// its kept half), so that a resumed run can rebuild them from the file.
std::vector<long> diagnostic_steps(long steps, std::size_t max_rows);

// Diagnostics of rows (each row walkers x dim) as the sampler computes them.
std::vector<ParameterDiagnostics> diagnose_rows(const std::vector<std::vector<double>>& rows, int walkers,
                                                std::size_t dim, double window_c, long thin);

}  // namespace apsides
