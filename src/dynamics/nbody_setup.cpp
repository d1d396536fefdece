// From orbital elements to the Jacobi state; validation, names, conserved quantities.
#include <fmt/format.h>

#include <algorithm>
#include <cassert>
#include <cmath>
#include <numeric>

#include "apsides/constants.h"
#include "apsides/kepler.h"
#include "apsides/keplerian_model.h"
#include "dynamics/wh_core.h"

namespace apsides {

using constants::kPi;
using constants::kTwoPi;

double NbodyPlanet::omega_rad() const {
  if (sqrt_e_cos_omega == 0.0 && sqrt_e_sin_omega == 0.0) return 0.0;
  return std::atan2(sqrt_e_sin_omega, sqrt_e_cos_omega);
}

NbodyPlanet NbodyPlanet::from_elements(double mass_ratio, double period_days, double ecc, double omega_star_rad,
                                       double t_conj_days, double inclination_rad, double node_rad) {
  NbodyPlanet p;
  p.mass_ratio = mass_ratio;
  p.period_days = period_days;
  const double se = std::sqrt(ecc);
  p.sqrt_e_cos_omega = se * std::cos(omega_star_rad);
  p.sqrt_e_sin_omega = se * std::sin(omega_star_rad);
  p.t_conj_days = t_conj_days;
  p.inclination_rad = inclination_rad;
  p.node_rad = node_rad;
  return p;
}

std::string NbodySystem::Validate() const {
  if (!(std::isfinite(star_mass_msun) && star_mass_msun > 0.0))
    return fmt::format("star_mass_msun = {}: must be > 0", star_mass_msun);
  if (!std::isfinite(osculating_epoch_days))
    return fmt::format("osculating_epoch_days = {}: must be finite", osculating_epoch_days);
  if (planets.empty()) return "planets: at least one planet is needed";
  if (planets.size() > static_cast<std::size_t>(kMaxNbodyPlanets))
    return fmt::format("planets: {} planets; at most {} are supported", planets.size(), kMaxNbodyPlanets);
  for (std::size_t j = 0; j < planets.size(); ++j) {
    const NbodyPlanet& p = planets[j];
    if (!(std::isfinite(p.mass_ratio) && p.mass_ratio > 0.0 && p.mass_ratio < 0.1))
      return fmt::format("planets[{}].mass_ratio = {}: must be > 0 and < 0.1", j, p.mass_ratio);
    if (!(std::isfinite(p.period_days) && p.period_days > 0.0))
      return fmt::format("planets[{}].period_days = {}: must be > 0", j, p.period_days);
    if (!(std::isfinite(p.sqrt_e_cos_omega) && std::isfinite(p.sqrt_e_sin_omega) && p.ecc() < 1.0))
      return fmt::format("planets[{}]: e = sqrt_e_cos_omega^2 + sqrt_e_sin_omega^2 = {}: must be < 1", j, p.ecc());
    if (!std::isfinite(p.t_conj_days)) return fmt::format("planets[{}].t_conj_days = {}: must be finite", j, p.t_conj_days);
    if (!(std::isfinite(p.inclination_rad) && p.inclination_rad >= 0.0 && p.inclination_rad <= kPi))
      return fmt::format("planets[{}].inclination_rad = {}: must be in [0, pi]", j, p.inclination_rad);
    if (!std::isfinite(p.node_rad)) return fmt::format("planets[{}].node_rad = {}: must be finite", j, p.node_rad);
  }
  return "";
}

std::string NbodyOptions::Validate() const {
  if (!(std::isfinite(step_days) && step_days >= 0.0))
    return fmt::format("step_days = {}: must be >= 0 (0 = automatic)", step_days);
  if (!(step_fraction > 0.0 && step_fraction <= 0.5))
    return fmt::format("step_fraction = {}: must be in (0, 0.5]", step_fraction);
  if (corrector_order != 0 && corrector_order != 3 && corrector_order != 5 && corrector_order != 7)
    return fmt::format("corrector_order = {}: must be 0, 3, 5 or 7", corrector_order);
  if (!(transit_tolerance_days > 0.0 && transit_tolerance_days <= 1e-3))
    return fmt::format("transit_tolerance_days = {}: must be in (0, 1e-3]", transit_tolerance_days);
  if (!(std::isfinite(encounter_hill_radii) && encounter_hill_radii >= 0.0))
    return fmt::format("encounter_hill_radii = {}: must be >= 0", encounter_hill_radii);
  if (!(reference_rel_tol > 0.0 && reference_rel_tol < 1e-3))
    return fmt::format("reference_rel_tol = {}: must be in (0, 1e-3)", reference_rel_tol);
  if (!(reference_abs_tol > 0.0 && reference_abs_tol < 1e-3))
    return fmt::format("reference_abs_tol = {}: must be in (0, 1e-3)", reference_abs_tol);
  if (max_steps < 1) return fmt::format("max_steps = {}: must be >= 1", max_steps);
  return "";
}

std::string to_string(NbodyIntegrator integrator) {
  return integrator == NbodyIntegrator::kWisdomHolman ? "wisdom_holman" : "reference";
}

std::string to_string(ReferenceMethod method) {
  return method == ReferenceMethod::kBulirschStoer ? "bulirsch_stoer" : "dormand_prince";
}

std::string to_string(NbodyStatus status) {
  switch (status) {
    case NbodyStatus::kOk: return "ok";
    case NbodyStatus::kNotRun: return "not_run";
    case NbodyStatus::kInvalidSystem: return "invalid_system";
    case NbodyStatus::kUnbound: return "unbound";
    case NbodyStatus::kCloseEncounter: return "close_encounter";
    case NbodyStatus::kKeplerFailed: return "kepler_failed";
    case NbodyStatus::kEpochNotReached: return "epoch_not_reached";
    case NbodyStatus::kIntegratorFailed: return "integrator_failed";
    case NbodyStatus::kTooManySteps: return "too_many_steps";
  }
  return "unknown";
}

std::string NbodyObservables::BriefReport() const {
  if (status != NbodyStatus::kOk) return fmt::format("N-body: {}: {}", to_string(status), message);
  std::size_t nt = 0;
  for (const auto& v : transit_times_days) nt += v.size();
  return fmt::format("N-body: {} velocities, {} transit times, step {:.5g} d, {} steps", star_velocity_m_s.size(), nt,
                     step_days, steps);
}

double nbody_step_days(const NbodySystem& system, const NbodyOptions& options) {
  if (options.step_days > 0.0) return options.step_days;
  double shortest = std::numeric_limits<double>::infinity();
  for (const NbodyPlanet& p : system.planets) {
    const double e = p.ecc();
    shortest = std::min(shortest, p.period_days * std::pow(1.0 - e, 1.5));
  }
  return options.step_fraction * shortest;
}

namespace dynamics {

void elements_to_cartesian(double gm, double period_days, double ecc, double omega_planet, double inc, double node,
                           double mean_anomaly, Vec3& r, Vec3& v) {
  const double n = kTwoPi / period_days;
  const double a = std::cbrt(gm / (n * n));
  const double E = solve_kepler(mean_anomaly, ecc);
  const double cE = std::cos(E), sE = std::sin(E);
  const double sq = std::sqrt((1.0 - ecc) * (1.0 + ecc));
  const double edot = n / (1.0 - ecc * cE);
  const double xo = a * (cE - ecc), yo = a * sq * sE;
  const double vxo = -a * sE * edot, vyo = a * sq * cE * edot;
  // Rotation R_z(Omega) R_x(i) R_z(omega) (Murray & Dermott 1999, Eq. 2.122).
  const double cw = std::cos(omega_planet), sw = std::sin(omega_planet);
  const double cO = std::cos(node), sO = std::sin(node);
  const double ci = std::cos(inc), si = std::sin(inc);
  const Vec3 p1{cO * cw - sO * sw * ci, sO * cw + cO * sw * ci, sw * si};
  const Vec3 p2{-cO * sw - sO * cw * ci, -sO * sw + cO * cw * ci, cw * si};
  r = xo * p1 + yo * p2;
  v = vxo * p1 + vyo * p2;
}

void prepare_system(const NbodySystem& system, double encounter_hill_radii, PreparedSystem& out) {
  const int n = static_cast<int>(system.planets.size());
  assert(n >= 1 && n <= kMaxPlanets);
  std::iota(out.order, out.order + n, 0);
  std::stable_sort(out.order, out.order + n, [&](int a, int b) {
    return system.planets[static_cast<std::size_t>(a)].period_days < system.planets[static_cast<std::size_t>(b)].period_days;
  });
  double mass_ratio[kMaxPlanets];
  for (int j = 0; j < n; ++j) mass_ratio[j] = system.planets[static_cast<std::size_t>(out.order[j])].mass_ratio;
  // Semi-major axes from the periods with G eta_k (needs the masses first).
  const double G = gravitational_constant_au_msun_day();
  double eta = 1.0;
  for (int j = 0; j < n; ++j) {
    const NbodyPlanet& p = system.planets[static_cast<std::size_t>(out.order[j])];
    eta += p.mass_ratio;
    const double gm = G * system.star_mass_msun * eta;
    const double nn = kTwoPi / p.period_days;
    out.a_au[j] = std::cbrt(gm / (nn * nn));
    out.period[j] = p.period_days;
    out.ecc[j] = p.ecc();
  }
  wh_setup(out.sys, system.star_mass_msun, mass_ratio, n, encounter_hill_radii, out.a_au);
  for (int j = 0; j < n; ++j) {
    const NbodyPlanet& p = system.planets[static_cast<std::size_t>(out.order[j])];
    const double e = p.ecc(), w_star = p.omega_rad();
    // Mean anomaly at the epoch from the conjunction (nu = pi/2 - omega_star).
    const double M = mean_anomaly_at_conjunction(e, w_star) +
                     kTwoPi * (system.osculating_epoch_days - p.t_conj_days) / p.period_days;
    elements_to_cartesian(out.sys.kepler_gm[j + 1], p.period_days, e, w_star + kPi, p.inclination_rad, p.node_rad,
                          std::fmod(M, kTwoPi), out.initial.r[j + 1], out.initial.v[j + 1]);
  }
  out.initial.r[0] = out.initial.v[0] = Vec3{};
}

}  // namespace dynamics

CartesianState nbody_initial_state(const NbodySystem& system) {
  assert(system.Validate().empty());
  dynamics::PreparedSystem ps;
  dynamics::prepare_system(system, 0.0, ps);
  const int n = ps.sys.n;
  dynamics::Vec3 x[dynamics::kMaxBodies], v[dynamics::kMaxBodies];
  dynamics::jacobi_to_barycentric(ps.sys, ps.initial.r, x);
  dynamics::jacobi_to_barycentric(ps.sys, ps.initial.v, v);
  CartesianState s;
  s.time_days = system.osculating_epoch_days;
  s.mass_msun.assign(static_cast<std::size_t>(n + 1), 0.0);
  s.position_au.assign(static_cast<std::size_t>(n + 1), {0.0, 0.0, 0.0});
  s.velocity_au_per_day.assign(static_cast<std::size_t>(n + 1), {0.0, 0.0, 0.0});
  s.mass_msun[0] = system.star_mass_msun;
  s.position_au[0] = {x[0].x, x[0].y, x[0].z};
  s.velocity_au_per_day[0] = {v[0].x, v[0].y, v[0].z};
  for (int j = 0; j < n; ++j) {
    const auto idx = static_cast<std::size_t>(ps.order[j] + 1);
    s.mass_msun[idx] = system.star_mass_msun * ps.sys.mu[j + 1];
    s.position_au[idx] = {x[j + 1].x, x[j + 1].y, x[j + 1].z};
    s.velocity_au_per_day[idx] = {v[j + 1].x, v[j + 1].y, v[j + 1].z};
  }
  return s;
}

double total_energy(const CartesianState& s) {
  const double G = gravitational_constant_au_msun_day();
  const std::size_t n = s.mass_msun.size();
  double kin = 0.0, pot = 0.0;
  for (std::size_t a = 0; a < n; ++a) {
    const auto& v = s.velocity_au_per_day[a];
    kin += 0.5 * s.mass_msun[a] * (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]);
    for (std::size_t b = a + 1; b < n; ++b) {
      const double dx = s.position_au[b][0] - s.position_au[a][0];
      const double dy = s.position_au[b][1] - s.position_au[a][1];
      const double dz = s.position_au[b][2] - s.position_au[a][2];
      pot -= G * s.mass_msun[a] * s.mass_msun[b] / std::sqrt(dx * dx + dy * dy + dz * dz);
    }
  }
  return kin + pot;
}

std::array<double, 3> total_angular_momentum(const CartesianState& s) {
  std::array<double, 3> L{0.0, 0.0, 0.0};
  for (std::size_t a = 0; a < s.mass_msun.size(); ++a) {
    const auto& r = s.position_au[a];
    const auto& v = s.velocity_au_per_day[a];
    const double m = s.mass_msun[a];
    L[0] += m * (r[1] * v[2] - r[2] * v[1]);
    L[1] += m * (r[2] * v[0] - r[0] * v[2]);
    L[2] += m * (r[0] * v[1] - r[1] * v[0]);
  }
  return L;
}

}  // namespace apsides
