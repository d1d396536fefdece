// Interacting planets in the composed posterior (posterior_model.h): a parameter block per
// planet of an N-body model, the N-body signal (nbody.h) that drives both the velocity
// term and the transit-time terms, and the MAP fit of that posterior.
//
// Selected in the project file by
//   [model]  dynamics = "nbody"           ("keplerian" is the default and unchanged)
//            osculating_epoch = 2459000.0 (BJD_TDB, same frame as the data's times; default:
//                                          the data's reference epoch, a whole day near the
//                                          middle of the data). Must lie within the data's
//                                          time span +- 10 years.
//   [nbody]  planets [number of planets: the transiting ones plus perturbers; default the
//                     number of planets with transit times, at least [model] planets],
//            step_fraction [1/30] (Wisdom-Holman step / innermost period, nbody.h),
//            coplanar [true], inclination_deg [90] (the common inclination when coplanar).
//
// Parameters of planet <p> (block kind "nbody_planet"), osculating Jacobi elements at the
// osculating epoch (nbody.h):
//   <p>.mass_ratio     m / M_star (reports convert to Earth masses with [star] mass_msun)
//   <p>.period_d       osculating period (days)
//   <p>.secosw, <p>.sesinw   sqrt(e) cos w, sqrt(e) sin w (w of the star, keplerian_model.h)
//   <p>.t_conj_d       time of inferior conjunction of the osculating orbit, the one nearest
//                      the osculating epoch, days after the data's reference epoch
//   <p>.inclination_deg, <p>.node_deg   orbit orientation; fixed at [nbody] inclination_deg
//                      and 0 (coplanar, the default); free for non-transiting planets when
//                      coplanar = false (a transiting planet's inclination stays fixed:
//                      timing alone does not measure it).
// Default priors: mass ratio uniform on [0, 0.01] (0 itself is outside the model); period
// uniform within +-2 % of the linear ephemeris of its transit times (non-transiting: within
// +-30 % of the seed period); t_conj uniform within +-P/4 of the linear ephemeris's
// conjunction nearest the osculating epoch; sqrt(e) cos w and sqrt(e) sin w uniform on
// (-1, 1) with e < 0.9 (uniform in e and w); [priors] overrides apply by name as for any
// block. A prior allowing a negative mass is an input error.
//
// Transit epochs. The data's epoch numbers are shifted so that 0 is the epoch whose linear-
// ephemeris time is nearest the osculating epoch (the engine's epoch rule counts from the
// transit nearest T_conj); the shift is fixed when the posterior is built.
#pragma once

#include <cstddef>
#include <cstdint>
#include <limits>
#include <memory>
#include <optional>
#include <span>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/likelihood_terms.h"
#include "apsides/nbody.h"
#include "apsides/parameter_blocks.h"
#include "apsides/posterior_model.h"
#include "apsides/prior.h"
#include "apsides/project.h"

namespace apsides {

// One planet of an N-body model (parameters above).
class NbodyPlanetBlock final : public OrbitBlock {
 public:
  enum Slot : int { kMass = 0, kPeriod = 1, kSecosw = 2, kSesinw = 3, kTConj = 4, kInclination = 5, kNode = 6 };
  explicit NbodyPlanetBlock(std::string label);
  std::unique_ptr<ParameterBlock> clone() const override { return std::make_unique<NbodyPlanetBlock>(*this); }
  int period_slot() const override { return kPeriod; }
  int t_conj_slot() const override { return kTConj; }

  // The engine's planet at theta (angles in radians).
  NbodyPlanet planet(std::span<const double> theta) const;
  void put(std::span<double> theta, const NbodyPlanet& p) const;

  // Defaults need the seed (set_default_priors has no data context for N-body): the
  // model builder writes them directly (nbody_default_priors); this keeps the interface.
  void set_default_priors(const PriorContext& context, ModelPriors& priors) const override;
  void check_override(int slot, const Prior& prior, const std::string& where) const override;
  double joint_log_prior(std::span<const double> theta, const ModelPriors& priors) const override;
  std::string joint_name() const override { return label() + ".eccentricity"; }
  double fit_step(int slot, std::span<const double> theta, double baseline_days, double bound_width) const override;
  double ball_scale(int slot, std::span<const double> theta) const override;
};

// NbodySettings ([model] dynamics/osculating_epoch, [nbody]) is in project.h.

// A starting point for planet <label> (the seeds of the fit; also centre the priors).
struct NbodySeed {
  std::string label;
  double mass_ratio = 3e-6;
  double period_days = 0.0;
  double t_conj_days = 0.0;  // days after the frame's reference epoch
  double secosw = 0.0, sesinw = 0.0;
  bool transiting = false;   // has transit times
};

// What the N-body posterior is built from.
struct NbodyProblem {
  VelocityData velocities;   // may be empty (transit-timing-only systems)
  TransitData transits;      // labelled by planet; may be empty (velocities only)
  double star_mass_msun = 1.0;
  bool fit_jitter = true;
  NbodySettings settings;
  std::vector<PriorSpec> prior_overrides;  // [priors] entries, by parameter name
  double reference_epoch_bjd = 0.0;        // the frame: velocities' if any, else the transits'
  double osculating_epoch_days = 0.0;      // in the frame
  std::vector<NbodySeed> seeds;            // one per planet, by letter (b, c, ...)
};

// Builds the problem of a project with dynamics = "nbody": loads the data, fixes the
// frame and the osculating epoch, and seeds every transiting planet from the weighted
// linear ephemeris of its times. Planets without transit times are seeded by
// fit_nbody_map (seed_perturbers). Throws InputError for bad inputs (one line): no star
// mass, osculating epoch outside the data +- 10 years, a step not below the innermost
// period, a transit epoch the orbit cannot reach (a time more than P/3 from its linear
// ephemeris), too many planets.
NbodyProblem nbody_problem(const Project& project);
// Same from data (tests): transits labelled b, c, ...; n_planets >= planets with times.
NbodyProblem nbody_problem(const VelocityData& velocities, const TransitData& transits, double star_mass_msun,
                           const NbodySettings& settings, const std::vector<PriorSpec>& prior_overrides = {});

// The N-body signal: one engine evaluation per theta (cached per thread, so the velocity
// term and every transit-time term share it), at the data's velocity times and requested
// transit epochs.
class NbodySignal final : public Signal {
 public:
  NbodySignal(const ParameterLayout& layout, const NbodyProblem& problem);
  void velocity(std::span<const double> theta, std::span<const double> t, std::span<double> out) const override;
  bool linear_transit_times() const override { return false; }
  // The engine's observables at theta for the data (velocity times, transit epochs);
  // null when the engine fails (message in *why when given). The pointer is valid until
  // the next call on this thread.
  const NbodyObservables* at_data(std::span<const double> theta, std::string* why = nullptr) const;
  // The system at theta.
  NbodySystem system(std::span<const double> theta) const;
  // Planet (block position) of each data transit row, and the shifted engine epochs.
  const std::vector<std::vector<long long>>& engine_epochs() const { return epochs_; }
  const NbodyOptions& options() const { return options_; }
  // Model transit times for any epochs of planet `position` (engine numbering: epoch data -
  // shift(position)); NaN on failure.
  std::vector<double> transit_times(std::span<const double> theta, int position,
                                    const std::vector<long long>& data_epochs) const;
  long long epoch_shift(int position) const { return shift_.at(static_cast<std::size_t>(position)); }
  const std::vector<const NbodyPlanetBlock*>& planets() const { return planets_; }

 private:
  std::vector<const NbodyPlanetBlock*> planets_;
  double star_mass_msun_;
  double osculating_epoch_days_;
  NbodyOptions options_;
  std::vector<double> rv_times_;
  std::vector<std::vector<long long>> epochs_;  // per planet, engine numbering
  std::vector<long long> shift_;
  std::uint64_t id_;
};

// Velocities under an N-body signal: white noise (stated errors and per-instrument jitter),
// instrument offsets and trend profiled by weighted least squares in the fit.
class NbodyVelocityTerm final : public LikelihoodTerm {
 public:
  NbodyVelocityTerm(const VelocityData& data, const ParameterLayout& layout, const NbodySignal& signal);
  std::string name() const override { return "velocities"; }
  std::size_t n_points() const override { return data_.size(); }
  std::vector<const ParameterBlock*> reads() const override;
  double log_likelihood(std::span<const double> theta) const override;
  double log_likelihood_profiled(std::span<double> theta, const std::vector<bool>& free_linear) const override;
  // Observed minus model (planets, offsets, trend); empty when the engine fails.
  std::vector<double> residuals(std::span<const double> theta) const;

 private:
  double evaluate(std::span<double> theta, const std::vector<bool>* free_linear) const;
  VelocityData data_;
  const ParameterLayout* layout_;
  const NbodySignal* signal_;
  std::vector<const InstrumentBlock*> instruments_;
  const TrendBlock* trend_;
};

// One planet's mid-transit times under the N-body signal: Gaussian in (observed - model)
// with the stated errors and the planet's optional transit jitter in quadrature.
class NbodyTransitTimesTerm final : public LikelihoodTerm {
 public:
  NbodyTransitTimesTerm(const TransitData& times, double frame_reference_epoch_bjd, const NbodyPlanetBlock& planet,
                        int position, const NbodySignal& signal, const TransitJitterBlock* jitter);
  std::string name() const override { return "transit times of " + planet_->label(); }
  std::size_t n_points() const override { return time_days_.size(); }
  std::vector<const ParameterBlock*> reads() const override;
  double log_likelihood(std::span<const double> theta) const override;
  // Observed minus model (days), in the data's order; empty when the engine fails.
  std::vector<double> residuals(std::span<const double> theta) const;
  const std::vector<long long>& epochs() const { return epoch_; }
  const std::vector<double>& times_days() const { return time_days_; }  // in the frame
  const std::vector<double>& errors_days() const { return error_days_; }
  const NbodyPlanetBlock& planet() const { return *planet_; }

 private:
  std::vector<long long> epoch_;
  std::vector<double> time_days_, error_days_;
  std::vector<std::size_t> slot_;  // index into the signal's transit times of this planet
  const NbodyPlanetBlock* planet_;
  int position_;
  const NbodySignal* signal_;
  const TransitJitterBlock* jitter_;
};

// The blocks (planets b, c, ..., then instruments, trend, transit jitters), their priors
// (defaults above, then the problem's overrides; InputError for a bad override), the signal
// and the terms. The returned model owns the signal (kept alive by its terms).
struct NbodyPosterior {
  PosteriorModel model;
  std::shared_ptr<const NbodySignal> signal;
  std::vector<double> start;  // theta from the seeds (offsets at the weighted means)
};
NbodyPosterior make_nbody_posterior(const NbodyProblem& problem);

// ---- The MAP fit ----------------------------------------------------------------------

// Lithwick, Xie & Wu 2012 (ApJ 761, 122): near a first-order j:j-1 resonance the TTVs
// have the super-period P_super = 1 / |j / P_out - (j - 1) / P_in|. Given a transiting
// planet's period and its TTV period, the periods of a perturber that would give that
// super-period near j:j-1 (j = 2 .. j_max), outside (P_out > P) and inside (P_in < P).
std::vector<double> super_period_perturber_periods(double period_days, double ttv_period_days, int j_max = 4);
// The strongest period of a planet's O-C (residuals from its linear ephemeris), by a
// Lomb-Scargle scan of the residuals over [2 P, 4 baseline]; NaN with fewer than 6 times.
double ttv_period_days(const std::vector<long long>& epochs, const std::vector<double>& times_days,
                       const std::vector<double>& errors_days, double period_days);

struct NbodyFitOptions {
  int max_evaluations = 6000;    // per local optimisation (BOBYQA)
  double xtol_rel = 1e-9;
  int mass_starts = 2;           // starting masses tried per perturber candidate (3, 30 Earth masses on the Sun)
  std::string Validate() const;
};

struct NbodyFitResult {
  std::vector<std::string> names;
  std::vector<std::string> units;
  std::vector<double> theta;
  double log_likelihood = -std::numeric_limits<double>::infinity();
  double log_posterior = -std::numeric_limits<double>::infinity();
  double star_mass_msun = 1.0;
  double reference_epoch_bjd = 0.0;
  double osculating_epoch_bjd = 0.0;
  std::vector<std::string> planet_labels;
  std::vector<double> mass_mearth;          // per planet
  std::vector<double> period_days;          // osculating
  std::vector<double> eccentricity;
  std::vector<bool> transiting;
  std::vector<double> seed_periods_tried;   // perturber periods tried (super-period candidates)
  int evaluations = 0;
  bool converged = false;
  std::string message = "fit_nbody_map was not run.";
  std::string BriefReport() const;
  std::string FullReport() const;
};

// MAP of the N-body posterior: transiting planets start at their linear ephemerides, a
// perturber without transit times at each candidate period (the Lithwick-Xie-Wu
// super-period candidates of the transiting planets' TTVs, or the seed's period when
// given) with a few starting masses; each start is optimised (BOBYQA, linear parameters
// profiled), the best posterior wins. Deterministic.
NbodyFitResult fit_nbody_map(const NbodyProblem& problem, const NbodyFitOptions& options = {});

}  // namespace apsides
