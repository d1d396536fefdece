#include "apsides/prior.h"

#include <fmt/format.h>

#include <boost/math/distributions/beta.hpp>
#include <boost/math/distributions/normal.hpp>
#include <boost/math/quadrature/gauss_kronrod.hpp>
#include <algorithm>
#include <cmath>
#include <limits>

#include "apsides/constants.h"
#include "apsides/error.h"

namespace apsides {
namespace {
constexpr double kInf = std::numeric_limits<double>::infinity();
constexpr double kLnSqrt2Pi = 0.91893853320467274178;
}  // namespace

std::string to_string(PriorKind kind) {
  switch (kind) {
    case PriorKind::kUniform: return "uniform";
    case PriorKind::kLogUniform: return "log-uniform";
    case PriorKind::kNormal: return "normal";
    case PriorKind::kTruncatedNormal: return "truncated-normal";
    case PriorKind::kHalfNormal: return "half-normal";
    case PriorKind::kModifiedJeffreys: return "modified-jeffreys";
    case PriorKind::kFixed: return "fixed";
  }
  return "uniform";
}

PriorKind parse_prior_kind(const std::string& text, const std::string& where) {
  for (PriorKind k : {PriorKind::kUniform, PriorKind::kLogUniform, PriorKind::kNormal,
                      PriorKind::kTruncatedNormal, PriorKind::kHalfNormal,
                      PriorKind::kModifiedJeffreys, PriorKind::kFixed}) {
    if (text == to_string(k)) return k;
  }
  throw InputError(fmt::format(
      "{}: distribution is '{}'; it must be one of uniform, log-uniform, normal, "
      "truncated-normal, half-normal, modified-jeffreys, fixed",
      where, text));
}

Prior Prior::uniform(double min, double max) { return Prior{PriorKind::kUniform, min, max, 0, 0}; }
Prior Prior::log_uniform(double min, double max) { return Prior{PriorKind::kLogUniform, min, max, 0, 0}; }
Prior Prior::normal(double mean, double sd) { return Prior{PriorKind::kNormal, mean, sd, 0, 0}; }
Prior Prior::truncated_normal(double mean, double sd, double min, double max) {
  return Prior{PriorKind::kTruncatedNormal, mean, sd, min, max};
}
Prior Prior::half_normal(double sd) { return Prior{PriorKind::kHalfNormal, sd, 0, 0, 0}; }
Prior Prior::modified_jeffreys(double knee, double max) {
  return Prior{PriorKind::kModifiedJeffreys, knee, max, 0, 0};
}
Prior Prior::fixed(double value) { return Prior{PriorKind::kFixed, value, 0, 0, 0}; }

std::string Prior::Validate() const {
  auto finite = [](double x) { return std::isfinite(x); };
  switch (kind) {
    case PriorKind::kUniform:
      if (!finite(a) || !finite(b)) return "min and max must be finite";
      if (!(a < b)) return fmt::format("min = {} is not below max = {}", a, b);
      return "";
    case PriorKind::kLogUniform:
      if (!finite(a) || !finite(b)) return "min and max must be finite";
      if (!(a > 0)) return fmt::format("min = {}; a log-uniform prior needs min > 0", a);
      if (!(a < b)) return fmt::format("min = {} is not below max = {}", a, b);
      return "";
    case PriorKind::kNormal:
      if (!finite(a)) return "mean must be finite";
      if (!(b > 0) || !finite(b)) return fmt::format("sd = {}; it must be > 0", b);
      return "";
    case PriorKind::kTruncatedNormal:
      if (!finite(a)) return "mean must be finite";
      if (!(b > 0) || !finite(b)) return fmt::format("sd = {}; it must be > 0", b);
      if (!(c < d)) return fmt::format("min = {} is not below max = {}", c, d);
      return "";
    case PriorKind::kHalfNormal:
      if (!(a > 0) || !finite(a)) return fmt::format("sd = {}; it must be > 0", a);
      return "";
    case PriorKind::kModifiedJeffreys:
      if (!(a > 0) || !finite(a)) return fmt::format("knee = {}; it must be > 0", a);
      if (!(b > 0) || !finite(b)) return fmt::format("max = {}; it must be > 0", b);
      return "";
    case PriorKind::kFixed:
      if (!finite(a)) return "value must be finite";
      return "";
  }
  return "";
}

double Prior::lower() const {
  switch (kind) {
    case PriorKind::kUniform:
    case PriorKind::kLogUniform: return a;
    case PriorKind::kTruncatedNormal: return c;
    case PriorKind::kHalfNormal:
    case PriorKind::kModifiedJeffreys: return 0.0;
    case PriorKind::kNormal: return -kInf;
    case PriorKind::kFixed: return a;
  }
  return -kInf;
}

double Prior::upper() const {
  switch (kind) {
    case PriorKind::kUniform:
    case PriorKind::kLogUniform:
    case PriorKind::kModifiedJeffreys: return b;
    case PriorKind::kTruncatedNormal: return d;
    case PriorKind::kHalfNormal:
    case PriorKind::kNormal: return kInf;
    case PriorKind::kFixed: return a;
  }
  return kInf;
}

double Prior::log_density(double x) const {
  if (!std::isfinite(x)) return -kInf;
  switch (kind) {
    case PriorKind::kUniform:
      return (x >= a && x <= b) ? -std::log(b - a) : -kInf;
    case PriorKind::kLogUniform:
      return (x >= a && x <= b) ? -std::log(x * std::log(b / a)) : -kInf;
    case PriorKind::kNormal: {
      const double z = (x - a) / b;
      return -0.5 * z * z - std::log(b) - kLnSqrt2Pi;
    }
    case PriorKind::kTruncatedNormal: {
      if (x < c || x > d) return -kInf;
      boost::math::normal_distribution<double> n(a, b);
      const double mass = boost::math::cdf(n, d) - boost::math::cdf(n, c);
      const double z = (x - a) / b;
      return -0.5 * z * z - std::log(b) - kLnSqrt2Pi - std::log(mass);
    }
    case PriorKind::kHalfNormal: {
      if (x < 0) return -kInf;
      const double z = x / a;
      return -0.5 * z * z - std::log(a) - kLnSqrt2Pi + std::log(2.0);
    }
    case PriorKind::kModifiedJeffreys:
      return (x >= 0 && x <= b) ? -std::log((x + a) * std::log((a + b) / a)) : -kInf;
    case PriorKind::kFixed:
      return 0.0;
  }
  return -kInf;
}

double Prior::quantile(double u) const {
  switch (kind) {
    case PriorKind::kUniform: return a + u * (b - a);
    case PriorKind::kLogUniform: return a * std::exp(u * std::log(b / a));
    case PriorKind::kNormal:
      return boost::math::quantile(boost::math::normal_distribution<double>(a, b), u);
    case PriorKind::kTruncatedNormal: {
      boost::math::normal_distribution<double> n(a, b);
      const double lo = boost::math::cdf(n, c), hi = boost::math::cdf(n, d);
      return boost::math::quantile(n, lo + u * (hi - lo));
    }
    case PriorKind::kHalfNormal:
      return boost::math::quantile(boost::math::normal_distribution<double>(0.0, a), 0.5 + 0.5 * u);
    case PriorKind::kModifiedJeffreys:
      return a * (std::exp(u * std::log((a + b) / a)) - 1.0);
    case PriorKind::kFixed: return a;
  }
  return a;
}

std::string Prior::describe() const {
  switch (kind) {
    case PriorKind::kUniform: return fmt::format("uniform({:g}, {:g})", a, b);
    case PriorKind::kLogUniform: return fmt::format("log-uniform({:g}, {:g})", a, b);
    case PriorKind::kNormal: return fmt::format("normal({:g}, {:g})", a, b);
    case PriorKind::kTruncatedNormal:
      return fmt::format("truncated-normal({:g}, {:g}; {:g}, {:g})", a, b, c, d);
    case PriorKind::kHalfNormal: return fmt::format("half-normal({:g})", a);
    case PriorKind::kModifiedJeffreys: return fmt::format("modified-jeffreys(knee {:g}, max {:g})", a, b);
    case PriorKind::kFixed: return fmt::format("fixed({:g})", a);
  }
  return "";
}

std::string EccentricityPrior::Validate() const {
  if (!(max_ecc > 0.0 && max_ecc < 1.0) && kind != EccentricityPriorKind::kCircular)
    return fmt::format("max_ecc = {}; it must be in (0, 1)", max_ecc);
  if (kind == EccentricityPriorKind::kBeta && (!(a > 0) || !(b > 0)))
    return fmt::format("beta shape a = {}, b = {}; both must be > 0", a, b);
  return "";
}

double EccentricityPrior::log_density_hk(double h, double k) const {
  const double e = h * h + k * k;
  switch (kind) {
    case EccentricityPriorKind::kCircular:
      return e == 0.0 ? 0.0 : -kInf;
    case EccentricityPriorKind::kUniform:
      // p(h, k) = p_e(e) / pi with p_e = 1/max_ecc on [0, max_ecc).
      return e < max_ecc ? -std::log(constants::kPi * max_ecc) : -kInf;
    case EccentricityPriorKind::kBeta: {
      if (!(e < max_ecc)) return -kInf;
      boost::math::beta_distribution<double> beta(a, b);
      const double norm = boost::math::cdf(beta, max_ecc);
      // For a < 1 the density diverges (integrably) at e = 0, a point of zero measure.
      const double ee = std::max(e, 1e-300);
      return std::log(boost::math::pdf(beta, ee) / norm) - std::log(constants::kPi);
    }
  }
  return -kInf;
}

double EccentricityPrior::quantile_e(double u) const {
  switch (kind) {
    case EccentricityPriorKind::kCircular: return 0.0;
    case EccentricityPriorKind::kUniform: return u * max_ecc;
    case EccentricityPriorKind::kBeta: {
      boost::math::beta_distribution<double> beta(a, b);
      return boost::math::quantile(beta, u * boost::math::cdf(beta, max_ecc));
    }
  }
  return 0.0;
}

std::string EccentricityPrior::describe() const {
  switch (kind) {
    case EccentricityPriorKind::kCircular: return "circular (e = 0)";
    case EccentricityPriorKind::kUniform:
      return fmt::format("e uniform on [0, {:g}), omega uniform (uniform in the sqrt(e) disc)", max_ecc);
    case EccentricityPriorKind::kBeta:
      return fmt::format("e ~ Beta({:g}, {:g}) on [0, {:g}) (Kipping 2013), omega uniform", a, b, max_ecc);
  }
  return "";
}

double EccentricityPrior::cdf_e(double e) const {
  if (kind == EccentricityPriorKind::kCircular) return e >= 0.0 ? 1.0 : 0.0;
  if (!(e > 0.0)) return 0.0;
  if (e >= max_ecc) return 1.0;
  if (kind == EccentricityPriorKind::kUniform) return e / max_ecc;
  boost::math::beta_distribution<double> beta(a, b);
  return boost::math::cdf(beta, e) / boost::math::cdf(beta, max_ecc);
}

namespace {
// Semi-major axis (au) of a massless body with period P (days) around mass M (Msun), by
// Kepler's third law with the IAU nominal solar mass parameter.
double semi_major_axis_au(double period_days, double star_mass_msun) {
  const double p_s = period_days * constants::kDay;
  const double gm = constants::kGMSun * star_mass_msun;
  return std::cbrt(gm * p_s * p_s / (4.0 * constants::kPi * constants::kPi)) / constants::kAu;
}
}  // namespace

double ModelPriors::periastron_max_eccentricity(double period_days) const {
  if (!periastron_limit_active()) return 1.0;
  return 1.0 - min_periastron_au / semi_major_axis_au(period_days, star_mass_msun);
}

bool ModelPriors::periastron_allowed(double period_days, double h, double k) const {
  if (!periastron_limit_active()) return true;
  return h * h + k * k < periastron_max_eccentricity(period_days);
}

double ModelPriors::periastron_allowed_fraction(const Prior& pp, const EccentricityPrior& ep) const {
  if (!periastron_limit_active()) return 1.0;
  // Integrate over the period prior's quantile u in (0, 1): P(allowed) = E_u[F_e(e_max(P(u)))].
  auto allowed_given_u = [&](double u) {
    const double period = pp.kind == PriorKind::kFixed ? pp.a : pp.quantile(std::clamp(u, 1e-15, 1.0 - 1e-15));
    return ep.cdf_e(periastron_max_eccentricity(period));
  };
  if (pp.kind == PriorKind::kFixed) return allowed_given_u(0.5);
  double err = 0.0;
  const double f = boost::math::quadrature::gauss_kronrod<double, 31>::integrate(allowed_given_u, 0.0, 1.0, 15,
                                                                                  1e-10, &err);
  return std::clamp(f, 0.0, 1.0);
}

}  // namespace apsides
