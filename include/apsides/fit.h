// Maximum-a-posteriori Keplerian fits and the iterative planet search.
//
// The fit. Per planet the nonlinear parameters (period, K, sqrt(e) cos w, sqrt(e) sin w,
// time of conjunction) and the jitter of each instrument are optimised with NLopt's
// BOBYQA (Powell 2009, bound-constrained quadratic models, no derivatives) inside the
// bounds of the priors; the linear parameters -- one offset per instrument and the trend
// coefficients -- are not searched but solved at every evaluation by weighted linear
// least squares (Eigen, weights 1/(sigma^2 + jitter^2)), i.e. they are profiled out.
// Objective: ln L + ln prior (the MAP; the priors' densities of the linear parameters are
// added at their profiled values) or, with `use_prior_density = false`, ln L alone within
// the prior support (the maximum-likelihood point). The eccentricity limit of the prior
// (e < e_max) is enforced by a smooth penalty, so the optimiser never sees a cliff.
//
// Starts. Every planet the caller supplies a start for (FitOptions::starts) is used as
// given. Otherwise a new planet is seeded from candidate periods (FitOptions::seed_periods,
// or the top peaks of the residual periodogram and their daily and yearly aliases), each
// with (a) circular seeds at several phases and (b) the best points of a coarse
// period x e x phase grid on which the sinusoid-in-true-anomaly coefficients and the
// offsets are solved exactly (K and omega follow from them) -- the eccentricity-aware seed
// that finds e = 0.7 orbits a sinusoid fits badly. The new planet is first optimised alone
// (others held), the best few starts then jointly with everything; the best posterior wins.
// Deterministic: the same data, priors and options give bit-identical results.
//
// The search (`search_planets`): fit 0 planets; compute the residual periodogram; while
// the strongest peak's Baluev FAP is below `fap_threshold` and fewer than `max_planets`
// are fitted, add a planet seeded there and refit all together; the planet is admitted
// only when that lowers the velocities' BIC by `min_bic_improvement` (a periodogram peak
// can be significant while no Keplerian explains it better than noise). A peak within
// 1/baseline of a window alias (|f_j +- 1/sidereal day|, |f_j +- 1/day|, |f_j +- 1/year|)
// of a fitted planet j is first tried as that planet's true period (the earlier step may
// have taken the wrong alias): the move is kept when it lowers the BIC. Every fit keeps
// the priors' physical limits (a periastron outside the star when its mass is known).
// Each step records ln L,
// the number of free parameters k, BIC = k ln n - 2 ln L and AICc = 2k - 2 ln L +
// 2k(k+1)/(n-k-1) (CHECKS.md section 6), and the FAP that admitted it.
//
// Reported orbits: planets sorted by increasing period (labels b, c, ...), omega of the
// STAR in [0, 360) degrees, t_conj moved by whole periods to the conjunction nearest the
// middle of the data. m sin i is a MINIMUM mass (sin i unknown) and needs the star's mass.
#pragma once

#include <limits>
#include <optional>
#include <span>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/keplerian_model.h"
#include "apsides/prior.h"
#include "apsides/project.h"

namespace apsides {

// What to fit: data, the model's layout and its priors (model_priors.h: build_priors).
struct FitProblem {
  VelocityData data;
  ModelLayout layout;
  ModelPriors priors;
  // Mid-transit times; rows whose planet label names a planet of the model ("b", "c", ...)
  // add that planet's transit-timing likelihood (ephemeris.h) to the objective.
  TransitData transits;
};

struct FitOptions {
  // true: maximise ln L + ln prior (MAP). false: maximise ln L inside the prior support.
  bool use_prior_density = true;
  // Evaluation limit of each local optimisation (>= 100).
  int max_evaluations = 8000;
  // Convergence: relative change of the parameters, absolute change of the objective.
  double xtol_rel = 1e-10;
  double ftol_abs = 1e-9;
  // Full theta vectors (ModelLayout order) to start from. When given, only these are used
  // (after the linear parameters are solved); each must lie inside the prior support
  // (InputError naming the parameter otherwise).
  std::vector<std::vector<double>> starts;
  // Starting planets for the first planets of the model (e.g. the previous search step);
  // the remaining planets are seeded from candidate periods.
  std::vector<Planet> known_planets;
  // Candidate periods (days) for seeded planets; empty: the strongest residual-periodogram
  // peaks and their aliases.
  std::vector<double> seed_periods_days;
  int n_peaks = 4;               // periodogram peaks used when seed_periods_days is empty (>= 1)
  bool add_aliases = true;       // also try f +- 1/sidereal day, f +- 1/year of each peak
  bool eccentric_seeds = true;   // the period x e x phase grid seeds
  int joint_starts = 4;          // starts refined jointly with all parameters (>= 1)
  double oversample = 10.0;      // residual-periodogram grid density (points per 1/baseline)

  std::string Validate() const;
};

enum class FitTermination {
  kNotRun,
  kConverged,         // NLopt reached a tolerance
  kEvaluationLimit,   // stopped at max_evaluations (result usable, maybe not optimal)
  kRoundoffLimited,   // stopped by round-off (result usable)
  kFailed,            // no finite objective anywhere, or NLopt failed
};
std::string to_string(FitTermination t);

struct FitResult {
  ModelLayout layout;
  std::vector<std::string> names;   // ModelLayout::names order
  std::vector<std::string> instrument_names;
  double reference_epoch_bjd = 0.0;
  std::vector<double> theta;        // the optimum (planets by period, t_conj near data middle)
  double log_likelihood = -std::numeric_limits<double>::infinity();   // velocities (+ transits)
  double log_likelihood_transits = 0.0;   // the transit part of log_likelihood
  double log_prior = -std::numeric_limits<double>::infinity();
  double log_posterior = -std::numeric_limits<double>::infinity();
  double chi2 = std::numeric_limits<double>::quiet_NaN();  // velocities, jitter in quadrature
  int n_free = 0;                   // k: free parameters (fixed ones not counted)
  std::size_t n_points = 0;         // velocities + transit times
  double bic = std::numeric_limits<double>::quiet_NaN();
  double aicc = std::numeric_limits<double>::quiet_NaN();
  std::vector<double> rms_m_s;      // rms of the residuals per instrument
  std::vector<double> residuals_m_s;  // per data point (observed - model)
  int evaluations = 0;              // objective evaluations, all starts
  int starts_tried = 0;
  FitTermination termination = FitTermination::kNotRun;
  std::string message = "Fit was not run.";

  bool success() const {
    return termination == FitTermination::kConverged || termination == FitTermination::kEvaluationLimit ||
           termination == FitTermination::kRoundoffLimited;
  }
  // The blocks of theta (planets, instruments, trend, ...).
  ParameterLayout parameters() const { return ParameterLayout::from(layout, instrument_names); }
  std::string BriefReport() const;
  std::string FullReport() const;
};

// The MAP fit. Throws InputError for invalid options, a start outside the priors or
// fewer data points than free parameters; numerical failures go into the result.
FitResult fit_map(const FitProblem& problem, const FitOptions& options = {});

// Sets the linear parameters of theta (offsets; trend coefficients) to their weighted
// least-squares values given the rest of theta (planets, jitters). Returns false when the
// normal equations are singular (e.g. an instrument without points).
bool solve_linear_parameters(const KeplerianModel& model, std::span<double> theta);

// Quantities derived from a fitted planet, for tables and JSON.
struct PlanetSummary {
  std::string label;
  double period_d = 0.0, K_ms = 0.0, ecc = 0.0;
  double omega_deg = 0.0;           // of the star, [0, 360)
  double t_conj_bjd = 0.0, t_peri_bjd = 0.0;
  // Minimum mass and semi-major axis; NaN without the star's mass.
  double msini_mjup = std::numeric_limits<double>::quiet_NaN();
  double msini_mearth = std::numeric_limits<double>::quiet_NaN();
  double a_au = std::numeric_limits<double>::quiet_NaN();
};
std::vector<PlanetSummary> derive_planets(const FitResult& fit, std::optional<double> star_mass_msun);

// ---- Planet search ------------------------------------------------------------------
struct SearchOptions {
  int max_planets = 3;             // >= 0
  double fap_threshold = 1e-3;     // admit a peak with Baluev FAP below this, (0, 1)
  // ... and only when the fit with the new planet lowers the velocities' BIC by at
  // least this much (>= 0; 10 is "very strong" on the scale of Kass & Raftery 1995).
  double min_bic_improvement = 10.0;
  // ... and only when its 3 most improved points give at most this share of its chi-square
  // gain (common practice: a "planet" that a few outlying points make is not a periodic
  // signal; a sinusoid over N points spreads its gain over all of them).
  double max_point_share = 0.5;
  FitOptions fit;                  // for every step's fit

  std::string Validate() const;
};

struct SearchStep {
  int n_planets = 0;
  double log_likelihood = -std::numeric_limits<double>::infinity();
  int n_free = 0;
  double bic = std::numeric_limits<double>::quiet_NaN();
  double aicc = std::numeric_limits<double>::quiet_NaN();
  // Residual-periodogram peak of the previous step that admitted this planet (NaN for 0).
  double admitting_fap = std::numeric_limits<double>::quiet_NaN();
  double admitting_period_days = std::numeric_limits<double>::quiet_NaN();
};

struct SearchResult {
  std::vector<SearchStep> steps;   // one per accepted model, 0, 1, ... planets
  std::vector<FitResult> fits;     // the fit of each step
  int selected_n_planets = 0;
  // The search stopped because the next planet's chi-square gain came from a few points
  // (SearchOptions::max_point_share): a larger model is then not worth comparing.
  bool stopped_by_outliers = false;
  // Strongest residual peak after the last accepted step (why the search stopped).
  double final_peak_fap = std::numeric_limits<double>::quiet_NaN();
  double final_peak_period_days = std::numeric_limits<double>::quiet_NaN();
  std::string message = "Planet search was not run.";

  const FitResult& best() const { return fits.at(static_cast<std::size_t>(selected_n_planets)); }
  std::string BriefReport() const;
  std::string FullReport() const;
};

// What a search runs on: the data and the project's model settings; priors are built for
// each number of planets with build_priors (model_priors.h).
struct SearchProblem {
  VelocityData data;
  TransitData transits;
  SearchSettings search;           // period range, oversample, fap_threshold, max_planets
  ModelSettings model;             // trend, fit_jitter, eccentricity prior
  std::vector<PriorSpec> priors;   // [priors] overrides
  StarSpec star;                   // host star: the periastron limit of the priors
  std::vector<int> transit_jitter_planets;  // [[transits]] fit_jitter: planets (b = 0)
};

// The search problem of a project (its data, transit times, [search], [model], [priors]),
// and the search options its [search] table sets.
SearchProblem search_problem(const Project& project, const VelocityData& data, const TransitData& transits);
SearchOptions search_options(const Project& project);

// The model layout for `n_planets` planets (instruments, trend, jitters, transit-time
// jitters) and its priors (build_priors with the star and transit times; planets named
// by transit times keep their letter). The fit, the sampler and the comparison all use
// these, so they see one model.
ModelLayout problem_layout(const SearchProblem& problem, int n_planets);
ModelPriors problem_priors(const SearchProblem& problem, const ModelLayout& layout);

// Builds the FitProblem for `n_planets` planets from a SearchProblem.
FitProblem make_fit_problem(const SearchProblem& problem, int n_planets);

// Every planet a search found (all its steps: period, K, t_conj) and the residual peak
// that stopped it (period only): targets for nested sampling's mode jumps
// (CompareOptions::search_hints).
std::vector<SignalHint> search_signals(const SearchResult& result);

SearchResult search_planets(const SearchProblem& problem, const SearchOptions& options);

}  // namespace apsides
