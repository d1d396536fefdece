// Quantities derived from an orbit: minimum mass, semi-major axis, periastron and
// apastron distances, transit probability, and the host mass from Kepler's third law.
// All use the constants of constants.h (IAU 2015 B3, IAU 2012 B2).
#pragma once

#include <vector>

namespace apsides {

// Semi-amplitude K (m/s) of a companion of mass m (solar masses) on a star of mass M
// (solar masses), period P (days), eccentricity e, inclination given as sin i:
//   K = (2 pi G / P)^(1/3) m sin i (M + m)^(-2/3) / sqrt(1 - e^2).
double semi_amplitude_m_s(double period_days, double companion_msun, double star_msun,
                          double ecc, double sin_i = 1.0);

// Mass function f = P K^3 (1 - e^2)^(3/2) / (2 pi G), in solar masses.
double mass_function_msun(double period_days, double semi_amplitude_m_s, double ecc);

// Minimum mass m sin i (solar masses), solving m^3 = f (M + m)^2 exactly for any mass
// ratio (no m << M shortcut). Requires star_msun > 0.
double minimum_mass_msun(double period_days, double semi_amplitude_m_s, double ecc,
                         double star_msun);

// Unit conversions of a mass given in solar masses (ratio of nominal GM values).
double msun_to_mjup(double m_msun);
double msun_to_mearth(double m_msun);

// Semi-major axis of the relative orbit (au): a^3 = G (M + m) P^2 / (4 pi^2).
double semi_major_axis_au(double period_days, double star_msun, double companion_msun);
// Semi-major axis of the star's own orbit about the barycentre, a_star sin i (au):
//   a_star sin i = K P sqrt(1 - e^2) / (2 pi).
double star_orbit_au(double period_days, double semi_amplitude_m_s, double ecc);

inline double periastron_distance(double a, double ecc) { return a * (1.0 - ecc); }
inline double apastron_distance(double a, double ecc) { return a * (1.0 + ecc); }

// Geometric transit probability (R_star / a) (1 + e sin w) / (1 - e^2), w of the star
// (Winn 2010, Eq. 9, with w the star's argument of periastron). R in solar radii.
double transit_probability(double star_radius_rsun, double a_au, double ecc, double omega_rad);

// Host mass from Kepler's third law given several companions' periods (days) and
// semi-major axes (au, with 1-sigma errors): weighted fit of log P against log a with
// the slope fixed at 3/2, i.e. log P = 3/2 log a - 1/2 log M + const (companion masses
// neglected). Returns mass and its 1-sigma error in solar masses.
struct HostMassEstimate {
  double mass_msun = 0.0;
  double mass_err_msun = 0.0;
  double chi2 = 0.0;
  int dof = 0;
};
HostMassEstimate host_mass_from_orbits(const std::vector<double>& period_days,
                                       const std::vector<double>& a_au,
                                       const std::vector<double>& a_err_au);

}  // namespace apsides
