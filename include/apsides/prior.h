// Priors on the model parameters, used alike by the MAP fit, the ensemble sampler and
// nested sampling. Each one-dimensional prior is built on a Boost.Math distribution;
// the eccentricity prior acts jointly on (sqrt(e) cos w, sqrt(e) sin w).
//
// Declared in the project TOML under [priors] (see project.h), e.g.
//   [priors]
//   "b.period_d" = { dist = "log-uniform", min = 1.0, max = 1000.0 }
//   "b.K_ms"     = { dist = "modified-jeffreys", knee = 1.0, max = 500.0 }
//   "north.jitter_ms" = { dist = "half-normal", sd = 5.0 }
//   eccentricity = { dist = "beta", a = 0.867, b = 3.03 }   # Kipping 2013
#pragma once

#include <span>
#include <string>
#include <vector>

namespace apsides {

enum class PriorKind {
  kUniform,           // min, max
  kLogUniform,        // min, max (> 0); density 1/(x ln(max/min))
  kNormal,            // mean, sd
  kTruncatedNormal,   // mean, sd, min, max
  kHalfNormal,        // sd; x >= 0
  kModifiedJeffreys,  // knee, max; density 1/((x + knee) ln((knee + max)/knee)), 0 <= x <= max
  kFixed,             // value; the parameter is held fixed (fit only)
};
std::string to_string(PriorKind kind);
PriorKind parse_prior_kind(const std::string& text, const std::string& where);

struct Prior {
  PriorKind kind = PriorKind::kUniform;
  double a = 0.0, b = 1.0, c = 0.0, d = 0.0;  // meaning depends on kind (see make_*)

  static Prior uniform(double min, double max);
  static Prior log_uniform(double min, double max);
  static Prior normal(double mean, double sd);
  static Prior truncated_normal(double mean, double sd, double min, double max);
  static Prior half_normal(double sd);
  static Prior modified_jeffreys(double knee, double max);
  static Prior fixed(double value);

  // "" if the parameters are possible, else "min = 5 is not below max = 3"-like text.
  std::string Validate() const;
  double log_density(double x) const;  // -inf outside the support
  double lower() const;                // support bounds (may be +-inf)
  double upper() const;
  double quantile(double u) const;     // inverse CDF, u in (0, 1), for nested sampling
  std::string describe() const;        // "log-uniform(1, 1000)"
};

// Eccentricity prior, acting on the pair (h, k) = (sqrt(e) cos w, sqrt(e) sin w).
// Uniform in the unit disc <=> e uniform on [0, 1) and w uniform (area element
// dh dk = 1/2 de dw), so p(h, k) = p_e(e) / pi for any p_e with w uniform.
enum class EccentricityPriorKind {
  kUniform,   // e ~ U(0, max_ecc)
  kBeta,      // e ~ Beta(a, b) (Kipping 2013, MNRAS 434, L51: a = 0.867, b = 3.03)
  kCircular,  // e = 0 held fixed
};
struct EccentricityPrior {
  EccentricityPriorKind kind = EccentricityPriorKind::kUniform;
  double a = 0.867, b = 3.03;  // Beta shape (kBeta)
  double max_ecc = 0.99;       // support limit, e < max_ecc

  std::string Validate() const;
  double log_density_hk(double h, double k) const;  // -inf outside the support
  double quantile_e(double u) const;                // inverse CDF of e
  double cdf_e(double e) const;                     // P(eccentricity <= e)
  std::string describe() const;
};

// All priors of one model: the values. A one-dimensional prior per theta entry, an
// eccentricity prior per planet letter (b = 0), and the rules that act across parameters.
struct ModelPriors {
  std::vector<Prior> parameter;             // one per theta entry
  std::vector<EccentricityPrior> eccentricity;  // one per planet letter (acts on its h, k)
  bool order_periods = true;  // planets labelled by increasing period: P_b < P_c < ...
  // Planets whose letter is fixed by data (transit times labelled with it): they keep
  // their slot and take no part in the ordering; the other planets are ordered by period
  // among themselves. One flag per planet; empty = none fixed.
  std::vector<bool> label_fixed;

  bool is_label_fixed(int planet) const {
    return planet >= 0 && static_cast<std::size_t>(planet) < label_fixed.size() &&
           label_fixed[static_cast<std::size_t>(planet)];
  }
  // Orbits whose periastron lies inside the star are excluded: a (1 - e) must exceed
  // `min_periastron_au`, with a from Kepler's third law around `star_mass_msun` (the
  // planet's mass neglected). Off when either is 0. The excluded region makes the prior
  // integrate to less than one; nested sampling divides its evidence by the allowed
  // fraction of each planet (PlanetBlock::periastron_allowed_fraction, evidence.h).
  double min_periastron_au = 0.0;
  double star_mass_msun = 0.0;

  bool periastron_limit_active() const { return min_periastron_au > 0.0 && star_mass_msun > 0.0; }
  // Largest eccentricity the periastron limit allows at this period (1 when no limit;
  // <= 0 when even a circular orbit would be inside the star).
  double periastron_max_eccentricity(double period_days) const;
  // true when planet (period, h, k) keeps its periastron outside the limit (or no limit).
  bool periastron_allowed(double period_days, double h, double k) const;
  // Prior probability that an orbit with these period and eccentricity priors is allowed:
  // the integral over the period prior of P(e < 1 - r_min / a(P)) (adaptive Gauss-Kronrod
  // quadrature, Boost.Math). 1 when no limit.
  double periastron_allowed_fraction(const Prior& period_prior, const EccentricityPrior& eccentricity_prior) const;
  // Where each value sits in theta, and the density over all of theta (joint priors,
  // period ordering), is the business of the model's parameter blocks
  // (parameter_blocks.h: ParameterLayout::log_prior).
};

}  // namespace apsides
