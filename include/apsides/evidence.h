// Bayesian evidence by nested sampling (Skilling 2006, Bayesian Analysis 1, 833), with
// new live points found by slice sampling inside the likelihood constraint along
// directions from the live points' covariance (after Handley, Hobson & Lasenby 2015,
// MNRAS 450, L61), and the evidence of 0, 1, 2, ... Keplerians for model comparison.
//
// The algorithm, as implemented here:
//   * n live points are drawn uniformly in the unit cube [0, 1)^d; a prior transform maps
//     each to the parameters theta (the inverse-CDF of every prior), so uniform in the
//     cube is the prior in theta.
//   * Each iteration removes the `batch_size` lowest-likelihood live points. The j-th
//     removed point (j = 0, 1, ...) closes a prior-volume shell with expected shrinkage
//     ln X_i = ln X_{i-1} - 1/(n - j) (the live set shrinks while points are removed),
//     and its weight is L_i (X_{i-1} - X_i). The batch is then refilled with points drawn
//     inside L > L* (L* the highest removed likelihood), each by a slice-sampling walk that
//     starts from a randomly chosen surviving live point, so the live set is again n
//     points uniform inside the constraint. This removal-then-refill keeps the shrinkage
//     statistics exact for any batch size.
//   * Replacements of one batch run concurrently (`threads`), each with its own random
//     stream derived from (seed, replacement number): the result is bit-identical for a
//     seed whatever the number of threads. It depends on `batch_size`, which is therefore
//     an option of its own and not the thread count.
//   * Slice sampling: the live points' covariance in the cube is factored (Cholesky,
//     C = R R^T) once per batch; a walk takes `slice_steps` one-dimensional slice moves
//     (Neal 2003, Ann. Statist. 31, 705: stepping out, then shrinkage), cycling through a
//     random orthonormal basis e_1..e_d of the whitened space, direction R e_k, initial
//     bracket width |R e_k| placed at random around the current point.
//   * Stop when the live points can add at most `ln_z_tolerance` to ln Z
//     (ln(Z + L_max X) - ln Z < tolerance); the final live points are then added, each
//     with weight L X / n.
//   * Reported: ln Z, its error sqrt(H / n) (Skilling 2006, section 9), the information
//     H = sum_i p_i ln(L_i / Z) in nats, and every dead and final live point with its
//     posterior weight p_i = L_i w_i / Z.
#pragma once

#include <cstdint>
#include <functional>
#include <limits>
#include <random>
#include <span>
#include <string>
#include <vector>

#include "apsides/keplerian_model.h"
#include "apsides/prior.h"

namespace apsides {

// What nested sampling integrates: a prior given as a transform of the unit cube and a
// log-likelihood. Both are called concurrently from several threads and must be
// thread-safe (KeplerianModel::log_likelihood is).
struct NestedProblem {
  int dimension = 0;
  // Writes theta (size `n_params`, >= dimension allowed) for a point u in [0, 1)^dimension.
  std::function<void(std::span<const double> u, std::span<double> theta)> prior_transform;
  int n_params = 0;  // size of theta; 0 means equal to `dimension`
  // ln L(theta); -inf (or NaN) rejects the point.
  std::function<double(std::span<const double> theta)> log_likelihood;
  std::vector<std::string> names;  // optional parameter names (theta order), for reports

  // Optional mode jumps, for narrow modes a local walk finds late (a planet's period: the
  // likelihood is a comb of narrow peaks across the period prior). A jump is a
  // Metropolis-Hastings independence move on a block of cube coordinates (a planet's
  // period `coordinate`, its amplitude `small_coordinate`, and `redraw_uniform`, e.g. its
  // phase), all other coordinates kept. The block is drawn from the mixture
  //   q = w_u (all uniform)
  //     + w_peak (a target m drawn by weight; period from N(period_u, period_w)
  //               truncated to [0, 1); amplitude likewise when the target knows it, phase
  //               from a wrapped normal when it knows it; the rest uniform)
  //     + w_small (amplitude uniform on [0, kappa), the rest uniform; kappa follows the
  //                live points' amplitudes, so this part proposes "no signal here")
  //     + w_live  (the whole block near where some live point has a block: a kernel
  //                density of the live points' blocks, pooled over the jumps; it moves
  //                points between the modes that already hold live points at the rate
  //                their volumes call for, instead of the slow copying of walk starts)
  // and accepted when inside the likelihood constraint and with probability
  // min(1, q(old) / q(new)). The walk still leaves the uniform distribution inside the
  // constraint invariant (the evidence is unchanged); what changes is how fast points
  // move between "no planet at this period" and a narrow peak, so that a mode gets its
  // share of live points when it takes over instead of late.
  struct Jump {
    int coordinate = 0;
    int small_coordinate = -1;
    std::vector<int> redraw_uniform;
    int phase_coordinate = -1;  // a periodic coordinate (orbital phase) among redraw_uniform
    struct Target {             // in the cube; NaN amplitude/phase: uniform
      double period_u = 0.5, period_w = 0.1, weight = 1.0;
      double amplitude_u = std::numeric_limits<double>::quiet_NaN(), amplitude_w = 0.1;
      double phase_u = std::numeric_limits<double>::quiet_NaN(), phase_w = 0.1;
    };
    std::vector<Target> targets;
    double w_uniform = 0.1, w_peak = 0.2, w_small = 0.2, w_live = 0.5;
  };
  std::vector<Jump> jumps;

  // Optional, for a log_likelihood that integrates some parameters out analytically
  // (make_rv_evidence_problem: instrument offsets). Called on every recorded point after
  // the run. With `rng`, it draws those parameters into theta from their conditional
  // posterior (so the weighted points are posterior draws of every parameter); without,
  // it sets them to their best values. Either way it returns the full ln L at the theta it
  // leaves (the best values give the profile likelihood, which max ln L reports).
  std::function<double(std::span<double> theta, std::mt19937_64* rng)> complete_point;

  // Optional posterior repartitioning (Chen, Feroz & Hobson 2019, Statistics and Computing, doi:10.1007/s11222-018-9841-3): when
  // >= 0, the prior transform draws from a modified prior pi~ and writes ln(pi~ / pi) at
  // the point into theta[log_prior_ratio_index]; the sampler then works with
  // ln L - ln(pi~ / pi), so L pi is unchanged and so are Z and the posterior. Samples
  // report ln L and theta up to (not including) that index. It must be the last entry.
  int log_prior_ratio_index = -1;

  // Default slice moves per walk, per dimension (NestedOptions::slice_steps = 0). Handley
  // et al. 2015 use 5; 3 is enough for unimodal or one-planet-multimodal problems (the
  // analytic Gaussians, the demo's two planets with one period free). Walks that must
  // also carry a "no signal" planet across its whole period prior (a comb of local
  // modes) need 5: with 3, the demo's three-planet ln Z came out 4.6 nats below the
  // Savage-Dickey ratio of its own posterior, with 5 within 0.2.
  double slice_steps_per_dimension = 3.0;
};

enum class NestedTermination {
  kNotRun,
  kConverged,         // remaining live-point contribution below ln_z_tolerance
  kMaxIterations,     // stopped by max_iterations: ln Z is a lower bound, error understated
  kSliceFailed,       // slice sampling could not find a point inside the constraint
  kBadLikelihood,     // no finite likelihood among the initial live points
};
std::string to_string(NestedTermination t);

struct NestedOptions {
  // Live points n. The ln Z error scales as sqrt(H / n); 500 gives <= 0.3 nats up to
  // H = 45 nats (the bundled demo's two-planet model with its transit times: H = 41).
  // Range >= 2 * batch_size + 1 and >= dimension + 1.
  int live_points = 500;
  // Seed of every random stream (initial live points, slice walks).
  std::uint64_t seed = 1;
  // Worker threads for the replacements of a batch; 0 = hardware concurrency. The result
  // does not depend on it.
  int threads = 0;
  // Live points removed and replaced per iteration (>= 1). The result depends on it (the
  // shrinkage treatment is exact for any value); keep it small against live_points.
  int batch_size = 2;
  // Mode-jump attempts (NestedProblem::jumps) after each slice move, on average. A jump
  // costs one likelihood call (a slice move several); enough of them let a walk settle
  // between the modes it can jump to, instead of staying in its start's mode.
  double jumps_per_step = 2.0;
  // Slice moves per replacement walk; 0 means the problem's slice_steps_per_dimension x
  // dimension.
  int slice_steps = 0;
  // Stop when the live points can change ln Z by less than this (nats).
  double ln_z_tolerance = 0.01;
  // Hard cap on iterations (batches); 0 = no cap.
  long max_iterations = 0;
  // Called every so often with (iterations done, current ln Z, ln(remaining)/ln Z gap),
  // for progress bars. May be empty. Called from the calling thread only.
  std::function<void(long iteration, double ln_z, double ln_remaining)> progress;

  // "" when valid, else "field = value: must be ...".
  std::string Validate() const;
};

// One dead (or final live) point.
struct NestedSample {
  std::vector<double> theta;
  double ln_like = 0.0;  // ln L at theta (parameters integrated out: at their drawn values)
  double ln_prior_volume = 0.0;  // expected ln X at which the point was removed
  double ln_weight = 0.0;        // normalised posterior weight: sum exp(ln_weight) = 1
};

struct NestedResult {
  NestedTermination termination = NestedTermination::kNotRun;
  std::string message = "Nested sampling was not run.";
  double ln_evidence = -std::numeric_limits<double>::infinity();
  double ln_evidence_err = std::numeric_limits<double>::quiet_NaN();  // sqrt(H / n_live)
  double information_nats = std::numeric_limits<double>::quiet_NaN();  // H
  // Best point visited (parameters integrated out: at their best values).
  double ln_like_max = -std::numeric_limits<double>::infinity();
  std::vector<double> theta_max_like;
  int live_points = 0;
  long iterations = 0;             // batches
  long likelihood_calls = 0;
  double seconds = 0.0;
  std::vector<NestedSample> samples;  // dead points, then the final live points
  std::vector<std::string> names;

  double effective_sample_size() const;  // Kish: 1 / sum p_i^2
  // n equally weighted posterior draws (systematic resampling, deterministic for a seed).
  std::vector<std::vector<double>> equal_weight_samples(std::size_t n, std::uint64_t seed) const;
  // Weighted quantile of parameter `index` (q in [0, 1]).
  double weighted_quantile(std::size_t index, double q) const;

  std::string BriefReport() const;
  std::string FullReport() const;
};

NestedResult run_nested_sampling(const NestedProblem& problem, const NestedOptions& options);

// ---------------------------------------------------------------------------------------
// The radial-velocity problem for nested sampling.
//
// Prior transform from ModelPriors (prior.h): every parameter through its Prior::quantile;
// each planet's (sqrt e cos w, sqrt e sin w) from e = EccentricityPrior::quantile_e(u1)
// and w = 2 pi u2 - pi (w uniform, so the pair follows the prior of prior.h).
// Time of conjunction: when `phase_conjunction` is set (default), t_conj = t_ref + (u - 1/2) P,
// uniform over one period around the data's reference epoch, whatever its Prior says.
// The likelihood is periodic in t_conj with period P, so this is the same evidence as a
// uniform t_conj prior over any whole number of periods, without the many copies of
// each mode a wider window would have the sampler explore.
//
// Labelling by increasing period (ModelPriors::order_periods): when every planet has the
// same priors, the k planets are drawn from the unordered (independent, identical) prior
// and their whole parameter blocks sorted by period. The sorted draw follows the ordered
// prior k! prod p(P_j) ... on P_1 < ... < P_k, which is normalised; as the likelihood is
// symmetric under relabelling, the evidence equals the unordered one, and each mode is
// counted once. Note ModelPriors::log_density omits the k! (it integrates to 1/k!): add
// ln k! to it to get the density the evidence uses. When planets have different priors
// the ordering is imposed as a constraint (L = 0 outside) and the evidence divided by the
// prior probability of the ordering, estimated by Monte Carlo (see RvEvidenceProblem).
// Transit times in the evidence (issue: every model compared must explain the same data).
// A planet whose letter labels transit times keeps that letter (slot) in every model and
// is not part of the period ordering (ModelPriors::label_fixed must say so); its
// (P, t_conj) enter T_n = T_conj + n P. In a model with fewer planets than that letter,
// the transit times get a transit-only ephemeris (P, t_conj) with the period and phase
// priors of `wide_priors` (the priors of a model large enough to have the letter): the
// transiting body exists in every model, and only its velocity signal is compared.
struct EvidenceTransits {
  TransitData times;
  ModelPriors wide_priors;
  ModelLayout wide_layout;  // the configuration wide_priors belong to
};

//
// Instrument offsets with uniform priors (the default) are integrated out analytically
// (KeplerianModel::log_likelihood_offsets_integrated): exact, and each one removes a
// dimension and its ln(prior width / posterior width) nats of information, the largest
// share of H in a multi-instrument problem -- fewer nats means a smaller ln Z error for
// the same live points. The samples get the offsets drawn from their conditional
// posterior (NestedProblem::complete_point). When nothing else would be left to sample,
// the first offset stays a coordinate.
struct RvEvidenceProblem {
  NestedProblem problem;
  int n_integrated_params = 0;       // offsets integrated out (free parameters all the same)
  int n_free_params = 0;             // the model's free parameters (sampled or integrated; not selectors)
  std::size_t n_transit_points = 0;  // transit times in the likelihood
  double ln_evidence_offset = 0.0;  // to add to ln Z (ordering normalisation, see above)
  std::string ordering_note;        // how the labelling entered the evidence
  std::vector<std::string> prior_notes;  // one line per prior, for the report
};
//
// `hints` (periodogram peaks, a planet search's planets) become mode-jump targets
// (NestedProblem::Jump) on every ordered planet's block (period, K, e, omega, phase):
// the period within about P^2 / baseline of the hint, K within half of it and the phase
// within 0.08 cycles when the hint knows them. Weighted by `weight` (equal by default).
//
// The hints also repartition the period prior (NestedProblem::log_prior_ratio_index):
// each ordered planet gets one more cube coordinate, a selector; with probability 1/2 its
// period is drawn from the prior as usual, else uniformly (in the prior's CDF) inside one
// hinted window of half-width ~ P^2 / (2 baseline), chosen by weight. The sampler's
// likelihood is divided by pi~ / pi, so L pi -- the evidence and the posterior -- is
// unchanged (Chen, Feroz & Hobson 2019). Why: a planet's period mode is a narrow peak in a
// wide prior. Under the plain prior the peak holds a handful of live points when it
// separates from the "no signal" region, and nested sampling then grows that handful by
// copying walk starts; the few points' chance count sets ln Z, which scattered by 1-2
// nats between seeds on the bundled demo (stated error 0.4). With the windows the peak
// starts with tens of points, and the scatter matches the stated error
// (tests/evidence_test.cpp measures it on a simulated system).
//
// A planet with transit times gets the same treatment for its (period, phase) pair: with
// probability 1/2 both are drawn inside a box of +-20 sigma around the linear ephemeris
// of its times (fit_ephemeris), in the model with that planet and in the transit-only
// ephemeris of the models without it. The times pin the period to ~1e-6 of its prior;
// without the box the sampler spends ~20 nats of compression (H) getting there, which
// costs run time and sqrt(H / n) of ln Z error (demo, two planets: H = 61 -> 41 nats).
//
// Neither the jumps nor the repartitioning change the evidence; both change how well a
// finite run finds it. ln Z is reported for the prior pi (stated in the report), whatever
// pi~ the sampler used.
struct WeightedHint {
  SignalHint signal;
  double weight = 1.0;
};
RvEvidenceProblem make_rv_evidence_problem(const KeplerianModel& model, const ModelPriors& priors,
                                           bool phase_conjunction = true,
                                           const EvidenceTransits* transits = nullptr,
                                           std::span<const WeightedHint> hints = {});

// The best sinusoid at `period_days` (weighted least squares with one offset per
// instrument) as a signal: K = its amplitude, t_conj where a circular orbit's velocity
// crosses zero going down (the conjunction of the model's convention).
SignalHint sinusoid_hint(const VelocityData& data, double period_days);

// ---------------------------------------------------------------------------------------
// Model comparison over 0..N planets.

struct ComparisonRow {
  int n_planets = 0;
  int n_params = 0;
  double ln_like_max = -std::numeric_limits<double>::infinity();
  double bic = std::numeric_limits<double>::quiet_NaN();   // k ln n - 2 ln L
  double aicc = std::numeric_limits<double>::quiet_NaN();  // 2k - 2 ln L + 2k(k+1)/(n-k-1)
  double ln_evidence = -std::numeric_limits<double>::infinity();
  double ln_evidence_err = std::numeric_limits<double>::quiet_NaN();
  double information_nats = std::numeric_limits<double>::quiet_NaN();
  double ln_bayes_vs_previous = std::numeric_limits<double>::quiet_NaN();  // ln Z_k - ln Z_{k-1}
  double ln_bayes_err = std::numeric_limits<double>::quiet_NaN();
  std::string bayes_wording;  // Kass & Raftery 1995 (see kass_raftery_wording)
  double seconds = 0.0;
  long likelihood_calls = 0;
  NestedResult nested;
  std::string ordering_note;
  // ln Z more than 5 below the model with one planet fewer, which this one contains: the
  // sampler lost that region and the row is not evidence (a note says so).
  bool unreliable = false;
};

// Kass & Raftery 1995 (JASA 90, 773), on ln B: < 0 "favours the simpler model",
// 0-1 "barely worth mentioning", 1-3 "positive", 3-5 "strong", > 5 "very strong".
std::string kass_raftery_wording(double ln_bayes);

// BIC = k ln n - 2 ln L; AICc = 2k - 2 ln L + 2k(k+1)/(n-k-1) (NaN when n <= k + 1).
double bic(double ln_like_max, int n_params, std::size_t n_points);
double aicc(double ln_like_max, int n_params, std::size_t n_points);

struct CompareOptions {
  int max_planets = 2;          // compare min_planets..max_planets Keplerians
  // Smallest model compared (>= 0). `analyze` compares only the neighbours of the planet
  // search's answer (k - 1, k, k + 1) to keep the run short; it is then the baseline
  // selected when no larger model passes the threshold.
  int min_planets = 0;
  NestedOptions nested;         // sampler settings for every k
  // Selection rule: the largest k whose ln B against k - 1 exceeds this (a smaller step
  // may be weaker: two planets of similar amplitude can each explain little alone). Kass &
  // Raftery call ln B > 5 "very strong".
  double bayes_threshold = 5.0;
  bool phase_conjunction = true;  // see make_rv_evidence_problem
  // Signals the nested sampler may jump to (make_rv_evidence_problem): callers that ran a
  // planet search should pass its planets (search_signals). They share half the jump
  // targets' weight; the 20 strongest peaks of the velocities' periodogram (with the
  // sinusoid's K and phase, sinusoid_hint), always used, share the other half.
  std::vector<SignalHint> search_hints;
  std::string Validate() const;
};

struct CompareResult {
  std::vector<ComparisonRow> rows;
  int selected_n_planets = -1;
  std::string selection_rule;
  std::vector<std::string> notes;  // cautions: m sin i, aliases, priors stated, ...
  std::string message = "Model comparison was not run.";
  double seconds = 0.0;
  std::size_t n_points = 0;  // velocities + transit times in the likelihood

  std::string BriefReport() const;
  std::string FullReport() const;
};

// Builds the model for each k from `data` and `base_layout` (n_planets replaced), the
// priors from `priors_for(layout)`, and runs nested sampling for each. With `transits`,
// the transit times join every model's likelihood (see EvidenceTransits). Throws InputError
// when options are invalid.
CompareResult compare_planet_counts(const VelocityData& data, const ModelLayout& base_layout,
                                    const std::function<ModelPriors(const ModelLayout&)>& priors_for,
                                    const CompareOptions& options,
                                    const std::function<void(int k, const std::string& status)>& on_status = {},
                                    const TransitData* transits = nullptr);

}  // namespace apsides
