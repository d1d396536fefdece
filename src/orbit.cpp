#include "apsides/orbit.h"

#include <boost/math/tools/roots.hpp>
#include <cassert>
#include <cmath>
#include <cstdint>

#include "apsides/constants.h"

namespace apsides {
using namespace constants;

double semi_amplitude_m_s(double period_days, double companion_msun, double star_msun,
                          double ecc, double sin_i) {
  const double P = period_days * kDay;
  const double gm_p = companion_msun * kGMSun;
  const double gm_tot = (star_msun + companion_msun) * kGMSun;
  // K = (2 pi / P)^(1/3) G m sin i / (G (M + m))^(2/3) / sqrt(1 - e^2)
  return std::cbrt(kTwoPi / P) * gm_p * sin_i / std::pow(gm_tot, 2.0 / 3.0) / std::sqrt(1.0 - ecc * ecc);
}

double mass_function_msun(double period_days, double semi_amplitude_m_s, double ecc) {
  const double P = period_days * kDay;
  const double K = semi_amplitude_m_s;
  const double gm_f = P * K * K * K * std::pow(1.0 - ecc * ecc, 1.5) / kTwoPi;
  return gm_f / kGMSun;
}

double minimum_mass_msun(double period_days, double semi_amplitude_m_s, double ecc,
                         double star_msun) {
  assert(star_msun > 0.0);
  const double f = mass_function_msun(period_days, std::fabs(semi_amplitude_m_s), ecc);
  if (f <= 0.0) return 0.0;
  // g(m) = m^3 - f (M + m)^2 has exactly one positive root; it lies above
  // max(f, (f M^2)^(1/3)) - bracket generously and solve with TOMS 748.
  const double M = star_msun;
  auto g = [&](double m) { return m * m * m - f * (M + m) * (M + m); };
  double lo = 0.0;
  double hi = std::cbrt(f * M * M) + f + 1e-300;
  while (g(hi) < 0.0) hi *= 2.0;
  std::uintmax_t it = 200;
  auto r = boost::math::tools::toms748_solve(
      g, lo, hi, boost::math::tools::eps_tolerance<double>(52), it);
  return 0.5 * (r.first + r.second);
}

double msun_to_mjup(double m_msun) { return m_msun * (kGMSun / kGMJupiter); }
double msun_to_mearth(double m_msun) { return m_msun * (kGMSun / kGMEarth); }

double semi_major_axis_au(double period_days, double star_msun, double companion_msun) {
  const double P = period_days * kDay;
  const double gm = (star_msun + companion_msun) * kGMSun;
  return std::cbrt(gm * P * P / (kTwoPi * kTwoPi)) / kAu;
}

double star_orbit_au(double period_days, double semi_amplitude_m_s, double ecc) {
  return std::fabs(semi_amplitude_m_s) * period_days * kDay * std::sqrt(1.0 - ecc * ecc) / kTwoPi / kAu;
}

double transit_probability(double star_radius_rsun, double a_au, double ecc, double omega_rad) {
  return (star_radius_rsun * kRSun) / (a_au * kAu) * (1.0 + ecc * std::sin(omega_rad)) /
         (1.0 - ecc * ecc);
}

HostMassEstimate host_mass_from_orbits(const std::vector<double>& period_days,
                                       const std::vector<double>& a_au,
                                       const std::vector<double>& a_err_au) {
  // Kepler III with masses of companions neglected: P^2 = 4 pi^2 a^3 / (G M), so
  //   y_i := ln(4 pi^2 a_i^3 / (G P_i^2)) = ln M  for each companion,
  // with sigma(y_i) = 3 sigma_a / a (periods are far better known than a). The
  // weighted mean of y_i is the slope-3/2 fit of ln P on ln a.
  HostMassEstimate out;
  double sw = 0.0, swy = 0.0;
  std::vector<double> y(period_days.size()), w(period_days.size());
  for (std::size_t i = 0; i < period_days.size(); ++i) {
    const double a = a_au[i] * kAu, P = period_days[i] * kDay;
    y[i] = std::log(kTwoPi * kTwoPi * a * a * a / (kGMSun * P * P));
    const double sy = 3.0 * a_err_au[i] / a_au[i];
    w[i] = 1.0 / (sy * sy);
    sw += w[i];
    swy += w[i] * y[i];
  }
  const double lnM = swy / sw;
  const double sig = 1.0 / std::sqrt(sw);
  for (std::size_t i = 0; i < y.size(); ++i) out.chi2 += w[i] * (y[i] - lnM) * (y[i] - lnM);
  out.dof = static_cast<int>(y.size()) - 1;
  out.mass_msun = std::exp(lnM);
  out.mass_err_msun = out.mass_msun * sig;
  return out;
}

}  // namespace apsides
