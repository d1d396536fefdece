// The Keplerian planet block: period, K, sqrt(e) cos w, sqrt(e) sin w, time of conjunction.
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <limits>

#include "apsides/constants.h"
#include "apsides/error.h"
#include "apsides/keplerian_model.h"
#include "apsides/parameter_blocks.h"
#include "model/prior_context.h"

namespace apsides {
namespace {
constexpr double kInf = std::numeric_limits<double>::infinity();
}  // namespace

PlanetBlock::PlanetBlock(std::string label) : OrbitBlock(BlockKind::kPlanet, label) {
  params_ = {{label + ".period_d", "d", false},
             {label + ".K_ms", "m/s", false},
             {label + ".secosw", "1", false},
             {label + ".sesinw", "1", false},
             {label + ".t_conj_d", "d (BJD_TDB - reference epoch)", false}};
}

Planet PlanetBlock::planet(std::span<const double> theta) const {
  return Planet{value(theta, kPeriod), value(theta, kAmplitude), value(theta, kSecosw), value(theta, kSesinw),
                value(theta, kTConj)};
}

void PlanetBlock::put(std::span<double> theta, const Planet& p) const {
  theta[index(kPeriod)] = p.period_days;
  theta[index(kAmplitude)] = p.semi_amplitude_m_s;
  theta[index(kSecosw)] = p.sqrt_e_cos_omega;
  theta[index(kSesinw)] = p.sqrt_e_sin_omega;
  theta[index(kTConj)] = p.t_conj_days;
}

const EccentricityPrior& PlanetBlock::eccentricity_prior(const ModelPriors& priors) const {
  return priors.eccentricity.at(static_cast<std::size_t>(letter()));
}

double PlanetBlock::periastron_allowed_fraction(const ModelPriors& priors) const {
  return priors.periastron_allowed_fraction(prior_of(priors, kPeriod), eccentricity_prior(priors));
}

bool PlanetBlock::periastron_allowed(std::span<const double> theta, const ModelPriors& priors) const {
  return priors.periastron_allowed(period(theta), value(theta, kSecosw), value(theta, kSesinw));
}

// ---- Priors -------------------------------------------------------------------------------

void PlanetBlock::set_default_priors(const PriorContext& c, ModelPriors& priors) const {
  const double knee = std::max(c.stats.median_err, 1e-6);
  const double k_max = std::max(5.0 * c.stats.range, 100.0 * knee);
  const bool circ = c.eccentricity.kind == EccentricityPriorKind::kCircular;
  priors.parameter[index(kPeriod)] = Prior::log_uniform(c.periods.min_days, c.periods.max_days);
  priors.parameter[index(kAmplitude)] = Prior::modified_jeffreys(knee, k_max);
  priors.parameter[index(kSecosw)] = circ ? Prior::fixed(0.0) : Prior::uniform(-1.0, 1.0);
  priors.parameter[index(kSesinw)] = circ ? Prior::fixed(0.0) : Prior::uniform(-1.0, 1.0);
  priors.parameter[index(kTConj)] =
      Prior::uniform(c.stats.t_mid - 0.5 * c.periods.max_days, c.stats.t_mid + 0.5 * c.periods.max_days);
  const auto j = static_cast<std::size_t>(letter());
  if (priors.eccentricity.size() <= j) priors.eccentricity.resize(j + 1);
  priors.eccentricity[j] = c.eccentricity;
}

void PlanetBlock::check_override(int slot, const Prior& prior, const std::string& where) const {
  if (slot == kSecosw || slot == kSesinw)
    throw InputError(fmt::format("{}: set the eccentricity prior with \"{}.eccentricity\" instead", where, label()));
  if (slot == kPeriod) require_positive_support(prior, where, true);
  if (slot == kAmplitude) require_positive_support(prior, where, false);
}

void PlanetBlock::finish_priors(const PriorContext& c, const std::vector<std::string>& overridden,
                                ModelPriors& priors) const {
  // The eccentricity prior decides whether (h, k) are free; a period prior changed by an
  // override but t_conj left at its default widens the t_conj window to that period
  // prior's upper bound, so every phase stays reachable.
  const bool circ = eccentricity_prior(priors).kind == EccentricityPriorKind::kCircular;
  priors.parameter[index(kSecosw)] = circ ? Prior::fixed(0.0) : Prior::uniform(-1.0, 1.0);
  priors.parameter[index(kSesinw)] = circ ? Prior::fixed(0.0) : Prior::uniform(-1.0, 1.0);
  if (std::find(overridden.begin(), overridden.end(), info(kTConj).name) != overridden.end()) return;
  const Prior& pp = prior_of(priors, kPeriod);
  double pmax = pp.upper();
  // A normal period prior: 10 sd above the mean is beyond any reachable period.
  if (!std::isfinite(pmax)) pmax = pp.kind == PriorKind::kFixed ? pp.a : pp.a + 10.0 * pp.b;
  pmax = std::max(pmax, 1e-6);
  priors.parameter[index(kTConj)] = Prior::uniform(c.stats.t_mid - 0.5 * pmax, c.stats.t_mid + 0.5 * pmax);
}

double PlanetBlock::joint_log_prior(std::span<const double> theta, const ModelPriors& priors) const {
  const double l = eccentricity_prior(priors).log_density_hk(value(theta, kSecosw), value(theta, kSesinw));
  if (!std::isfinite(l)) return -kInf;
  if (!periastron_allowed(theta, priors)) return -kInf;
  return l;
}

std::vector<std::string> PlanetBlock::describe_priors(const ModelPriors& priors) const {
  const EccentricityPrior& ep = eccentricity_prior(priors);
  std::vector<std::string> out;
  for (int s = 0; s < size(); ++s) {
    if (s == kSecosw || s == kSesinw) {
      out.push_back(fmt::format("{:<22} {} of the joint eccentricity prior: {}", info(s).name,
                                s == kSecosw ? "sqrt(e) cos(omega)" : "sqrt(e) sin(omega)", ep.describe()));
      continue;
    }
    out.push_back(fmt::format("{:<22} {}", info(s).name, prior_of(priors, s).describe()));
  }
  return out;
}

// ---- The MAP fit ------------------------------------------------------------------------

std::pair<double, double> PlanetBlock::fit_bounds(int slot, std::span<const double> theta, const Prior& prior) const {
  if (slot == kSecosw || slot == kSesinw) return {-1.0, 1.0};
  if (slot != kTConj) return ParameterBlock::fit_bounds(slot, theta, prior);
  // t_conj within one period of its start (the likelihood repeats every period).
  const double P = period(theta), t = value(theta, kTConj);
  return finite_bounds(prior, std::max(prior.lower(), t - P), std::min(prior.upper(), t + P));
}

double PlanetBlock::fit_step(int slot, std::span<const double> theta, double baseline_days, double) const {
  const double T = std::max(baseline_days, 1.0);
  const double P = period(theta);
  switch (slot) {
    case kPeriod: return 0.1 * P * P / T;  // a tenth of a peak width
    case kAmplitude: return std::max(0.1 * std::fabs(value(theta, kAmplitude)), 0.2);
    case kSecosw:
    case kSesinw: return 0.1;
    default: return 0.05 * P;
  }
}

double PlanetBlock::fit_regularise(std::span<double> theta, const ModelPriors& priors) const {
  // The eccentricity is kept below the prior's limit and the periastron limit; the
  // excess is penalised smoothly, so the optimiser never sees a cliff.
  const EccentricityPrior& ep = eccentricity_prior(priors);
  const double emax = ep.kind == EccentricityPriorKind::kCircular
                          ? 0.0
                          : std::clamp(std::min(ep.max_ecc, priors.periastron_max_eccentricity(period(theta)) - 1e-9),
                                       0.0, 1.0);
  double& h = theta[index(kSecosw)];
  double& k = theta[index(kSesinw)];
  const double e = h * h + k * k;
  if (!(e >= emax && e > 0.0)) return 0.0;
  const double lim = std::max(emax - 1e-9, 0.0);
  const double s = std::sqrt(lim / e);
  h *= s;
  k *= s;
  return 1e4 * (e - lim) * (e - lim) + 1e2 * (e - lim);
}

double PlanetBlock::fit_joint_log_prior(std::span<const double> theta, const ModelPriors& priors) const {
  const EccentricityPrior& ep = eccentricity_prior(priors);
  if (ep.kind == EccentricityPriorKind::kCircular) return 0.0;
  double h = value(theta, kSecosw), k = value(theta, kSesinw);
  const double e = h * h + k * k;
  const double emax = std::min(ep.max_ecc, priors.periastron_max_eccentricity(period(theta)));
  if (e >= emax && e > 0.0) {
    const double s = std::sqrt(std::max(emax - 1e-9, 0.0) / e);
    h *= s;
    k *= s;
  }
  return ep.log_density_hk(h, k);
}

double PlanetBlock::ball_scale(int slot, std::span<const double> theta) const {
  const double P = std::abs(period(theta));
  switch (slot) {
    case kPeriod: return 1e-6 * P + 1e-9;
    case kAmplitude: return 1e-3 * std::abs(value(theta, kAmplitude)) + 1e-3;
    case kSecosw:
    case kSesinw: return 1e-3;
    default: return 1e-5 * P + 1e-6;  // t_conj: a tiny fraction of P
  }
}

// ---- Nested sampling ----------------------------------------------------------------------

std::vector<CubeCoordinate> PlanetBlock::cube_coordinates(const ModelPriors& priors, bool phase_conjunction,
                                                          const std::vector<bool>&) const {
  std::vector<CubeCoordinate> out;
  for (int s : {kPeriod, kAmplitude})
    if (prior_of(priors, s).kind != PriorKind::kFixed) out.push_back({s, CubeRole::kQuantile});
  if (eccentricity_prior(priors).kind != EccentricityPriorKind::kCircular) {
    out.push_back({kSecosw, CubeRole::kEccentricity});
    out.push_back({kSesinw, CubeRole::kOmega});
  }
  const Prior& tp = prior_of(priors, kTConj);
  if (tp.kind != PriorKind::kFixed)
    out.push_back({kTConj, phase_conjunction && tp.kind == PriorKind::kUniform ? CubeRole::kPhase : CubeRole::kQuantile});
  return out;
}

void PlanetBlock::from_cube(std::span<const double> u, std::span<const CubeCoordinate> coords,
                            const ModelPriors& priors, std::span<double> theta) const {
  double e = -1.0, w = 0.0, phase = -1.0;
  for (std::size_t c = 0; c < coords.size(); ++c) {
    switch (coords[c].role) {
      case CubeRole::kQuantile: theta[index(coords[c].slot)] = prior_of(priors, coords[c].slot).quantile(u[c]); break;
      case CubeRole::kEccentricity: e = eccentricity_prior(priors).quantile_e(u[c]); break;
      case CubeRole::kOmega: w = 2.0 * constants::kPi * u[c] - constants::kPi; break;
      case CubeRole::kPhase: phase = u[c]; break;
    }
  }
  if (e >= 0.0) {
    const double r = std::sqrt(e);
    theta[index(kSecosw)] = r * std::cos(w);
    theta[index(kSesinw)] = r * std::sin(w);
  }
  if (phase >= 0.0) {
    const Prior& tp = prior_of(priors, kTConj);
    theta[index(kTConj)] = 0.5 * (tp.a + tp.b) + (phase - 0.5) * period(theta);
  }
}

}  // namespace apsides
