// Default priors bound to one model and one data set, with the project's [priors]
// overrides applied. The MAP fit, the ensemble sampler and nested sampling all start
// from `build_priors`, so the three see the same posterior.
//
// Defaults (meant for a first look; every one can be overridden in [priors]):
//   <p>.period_d     log-uniform(P_min, P_max): P_min = [search] min_period_d, else
//                    0.5 d; P_max = [search] max_period_d, else 3 x the data's baseline
//                    (at least 2 x P_min). Planets are ordered: P_b < P_c < ...
//   <p>.K_ms         modified-Jeffreys(knee, K_max): knee = the median stated uncertainty
//                    (a signal below the noise is as likely as any), K_max = 5 x the full
//                    velocity range after removing each instrument's mean, at least 100 x
//                    the knee (eccentric orbits can hide their extremes between points).
//   <p>.secosw/sesinw uniform in the unit disc: e uniform on [0, 0.99) and omega uniform
//                    ([model] eccentricity = "beta" gives Kipping 2013, "circular" fixes
//                    e = 0). Stored as uniform(-1, 1) per coordinate (the bounds) plus the
//                    joint EccentricityPrior of the planet.
//   <p>.t_conj_d     uniform over a window of width P_max (the planet's period-prior upper
//                    bound) centred on the middle of the data (days after the reference
//                    epoch). The likelihood is periodic in t_conj with period P, so this
//                    is a uniform prior on the orbital phase; a fit or sampler may move
//                    t_conj by whole periods inside the window without changing anything.
//   <i>.offset_ms    uniform(mean_i - W, mean_i + W), mean_i the instrument's weighted
//                    mean velocity, W = 10 x (the full velocity range + median error).
//   <i>.jitter_ms    half-normal(sd = the instrument's velocity standard deviation, at
//                    least 2 x its median stated uncertainty): allows zero jitter, and
//                    is nearly flat over any jitter the data can support.
//   periastron       with `star` given (mass known) and [model] periastron_outside_star
//                    (default true): orbits with a (1 - e) below the star's radius are
//                    excluded (they would cross the star). The radius is [star] radius_rsun,
//                    else estimated from the mass as R = M^0.8 (main-sequence relation,
//                    common practice; stated in describe_priors). Without a star mass there
//                    is no limit.
//   <p>.transit_jitter_d  half-normal(sd = the median stated uncertainty of that planet's
//                    transit times, 1e-3 d without them): extra scatter of the transit
//                    times (timing noise, underestimated errors) in quadrature.
//   trend.c1_ms_per_d  uniform(+-10 x range / baseline);
//   trend.c2_ms_per_d2 uniform(+-10 x range / baseline^2).
//   gp.*             ([noise] kind = "gp", gp_kernels.h for the parameters' meaning)
//                    gp.amplitude_ms log-uniform(0.01 x median error, 10 x max(range/2, median error));
//                    gp.rotation_period_d (and the quasi-periodic gp.period_d)
//                    log-uniform(1 d, baseline / 2), or log-uniform(P / 1.5, 1.5 P) around
//                    the period P the activity indicators show (stated in the report);
//                    gp.period_d of the SHO, gp.timescale_d, gp.evolution_timescale_d
//                    log-uniform(1 d, baseline); gp.quality log-uniform(0.1, 50) (SHO:
//                    (0.1, 100)); gp.quality_difference log-uniform(0.01, 50); gp.mix
//                    uniform(0, 1); gp.smoothness log-uniform(0.1, 10); gp.epsilon_per_d
//                    fixed at 0.01; gp.scale_<instrument> log-uniform(0.1, 10). Common
//                    practice: wide log-uniform priors on scales, proper so that the
//                    evidence is defined.
//
// Overrides: [priors] keys are the names of ModelLayout::names() ("b.period_d",
// "north.jitter_ms", "trend.c1_ms_per_d") plus "eccentricity" (every planet) and
// "b.eccentricity" (one planet). The (secosw, sesinw) pair is not overridden directly:
// use "<p>.eccentricity". Impossible choices are InputErrors naming the key:
// a parameter the model does not have, a period prior reaching P <= 0, a K or jitter
// prior reaching negative values, a t_conj prior narrower than nothing.
#pragma once

#include <optional>
#include <span>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/keplerian_model.h"
#include "apsides/prior.h"
#include "apsides/project.h"

namespace apsides {

// The period range the defaults use (also the range a planet search scans).
struct PeriodRange {
  double min_days = 0.5;
  double max_days = 0.0;
};
// From [search] min/max_period_d when set, else 0.5 d and 3 x baseline (>= 2 x min).
// Throws InputError when the settings are impossible (min >= max, min <= 0).
PeriodRange default_period_range(const VelocityData& data, const SearchSettings& search);

// Builds the priors of `layout` on `data`. `planets_allowed` is the largest number of
// planets any model of this run will have (a search up to max_planets): an override for
// planet "c" is accepted while fitting one planet when planets_allowed >= 2, and skipped
// there; -1 means layout.n_planets. Overrides naming anything else are InputErrors.
// `star` (may be null) sets the periastron limit (see above).
ModelPriors build_priors(const VelocityData& data, const ModelLayout& layout,
                         const SearchSettings& search, const ModelSettings& model,
                         const std::vector<PriorSpec>& overrides, int planets_allowed = -1,
                         const StarSpec* star = nullptr, const TransitData* transits = nullptr);

// The periastron limit's radius in solar radii for a star ([star] radius_rsun, else
// M^0.8), and whether it was estimated; nullopt without a mass.
struct StarRadius {
  double radius_rsun = 0.0;
  bool estimated = false;
};
std::optional<StarRadius> periastron_limit_radius(const StarSpec& star);

// The name (ModelLayout::names order) of the first parameter of `theta` outside the
// prior's support, "" when theta is inside. Eccentricity is reported as
// "<p>.eccentricity", the period ordering as "<p>.period_d".
std::string first_outside_support(const ModelPriors& priors, const ModelLayout& layout,
                                  const std::vector<std::string>& instrument_names,
                                  std::span<const double> theta);
// Throws InputError "<what>: <name> = <value> is outside its prior <prior>" when theta is
// outside the support (for a user's start point or a reported MAP).
void require_in_support(const ModelPriors& priors, const ModelLayout& layout,
                        const std::vector<std::string>& instrument_names,
                        std::span<const double> theta, const std::string& what);

// One line per parameter, in theta order: "b.period_d  log-uniform(0.5, 4200)"; a
// planet's sqrt(e) cos w and sqrt(e) sin w lines name their joint eccentricity prior.
// For reports and results files (/parameters/priors has one row per parameter).
std::vector<std::string> describe_priors(const ModelPriors& priors, const ModelLayout& layout,
                                         const std::vector<std::string>& instrument_names);
// Rules that act across parameters (period ordering, periastron limit), one line each.
std::vector<std::string> prior_notes(const ModelPriors& priors, const ModelLayout& layout,
                                     const std::vector<std::string>& instrument_names);

}  // namespace apsides
