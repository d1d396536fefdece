// The N-body engine: planets that pull on each other. Given osculating orbital elements
// at an epoch, it integrates the star and its planets under Newtonian gravity and returns
// what is observed: the star's radial velocity at any times and each transiting planet's
// mid-transit times for requested epochs.
//
// Integrators
//   * Wisdom–Holman (default). The symplectic map of Wisdom & Holman 1991 (AJ 102, 1528)
//     in Jacobi coordinates, in its kick–drift–kick form K(h/2) D(h) K(h/2). The drift D
//     advances every planet's Jacobi Kepler orbit exactly, by the universal-variable
//     solution with Stumpff functions (Stumpff 1959; Danby 1988, "Fundamentals of
//     Celestial Mechanics", §6.9): the universal Kepler equation
//         t = r0 X + eta0 G2(X) + zeta0 G3(X),  G_k = X^k c_k(beta X^2),
//     is solved by safeguarded Halley steps from a third-order Taylor guess, with a
//     bisection bracket as fallback. It works for any conic; a Jacobi orbit with
//     non-negative energy (hyperbolic or parabolic) ends an evaluation with kUnbound.
//     The kick K applies the planets' mutual interaction (and the difference between the
//     true and the Jacobi-Keplerian pull of the star).
//     Symplectic corrector of Wisdom, Holman & Touma 1996 (Fields Inst. Commun. 10,
//     217), orders 3 (default), 5 or 7, or off (0): the kernel's O(eps h^2) error becomes
//     O(eps h^4 .. eps h^8) + O(eps^2 h^2) (eps ~ planet/star mass ratio). The initial
//     state is mapped once to the map's coordinates and outputs are taken back in the
//     corrected ("real") coordinates. Without it the map's O(eps h^2) offset of the
//     initial conditions shifts transit times linearly in time (measured in the tests:
//     27 s after 200 d for two 5e-5 planets near 3:2 at the default step; 0.005 s with it).
//   * Reference: an adaptive Boost.Odeint integrator (Bulirsch–Stoer with dense output,
//     or Dormand–Prince 5(4) with dense output) of the Newtonian equations in barycentric
//     Cartesian coordinates, at tight tolerance (relative 1e-13 by default). Slow; for
//     checks and close approaches.
//
// Units and frames
//   Time: days, in whatever frame the caller uses (e.g. days after the data's reference
//   epoch, see data.h). Lengths: au; velocities inside: au/day; star velocity output: m/s.
//   Masses: the star in solar masses, each planet as the ratio m/M_star. G M_sun from
//   constants.h (IAU 2015 B3), the au from IAU 2012 B2.
//   Frame: barycentric, right-handed, x and y in the sky plane, +z pointing AWAY from the
//   observer (along the line of sight). So the radial velocity is v_r = +v_z (> 0
//   receding, the project's convention), and a planet is in front of its star when
//   z_planet - z_star < 0.
//   Orbit orientation: the usual rotation by (omega_planet, i, Omega) (Murray & Dermott
//   1999, Eq. 2.122):  X = r[cos Omega cos(w+nu) - sin Omega sin(w+nu) cos i], Y = r[sin
//   Omega cos(w+nu) + cos Omega sin(w+nu) cos i], Z = r sin(w+nu) sin i, with
//   w = omega_planet = omega_star + pi. Omega is measured in the sky plane from +x
//   towards +y; the ascending node is where the planet moves away from the observer.
//   With these conventions a single planet gives exactly the velocity curve of
//   keplerian_model.h, v = K [cos(nu + omega) + e cos omega] with omega the star's
//   argument of periastron, and transits at nu = pi/2 - omega (CHECKS.md section 8);
//   i = 90 deg is edge-on; the sign of the velocity does not depend on i in (0, pi).
//
// Elements and Jacobi coordinates
//   Planets are ordered by period internally (Jacobi order, inside out); inputs and
//   outputs stay in the caller's order. Each planet's elements are OSCULATING JACOBI
//   elements at the system's osculating epoch: the Kepler orbit of the planet about the
//   centre of mass of the star and the planets inside it, with gravitational parameter
//   G eta_k, eta_k = M_star + m_1 + ... + m_k (the "interior mass" including the planet
//   itself: star + inner planets + planet). So a = (G eta_k P^2 / 4 pi^2)^(1/3). With one
//   planet this is the exact two-body relation used by orbit.h. T_conj is the time of
//   inferior conjunction of that osculating orbit (nu = pi/2 - omega_star); it need not
//   be near the osculating epoch.
//
// Transit times
//   A transit (mid-transit) is a sky-plane conjunction: the time at which the star–planet
//   separation projected on the sky, s = (x, y) = (x_p - x_star, y_p - y_star), reaches
//   a minimum with the planet in front, i.e. g(t) = x vx + y vy crosses zero upwards and
//   z_p - z_star < 0. Crossings are detected from one step to the next (the map state is
//   kept), counted, and only those of requested epochs are refined, by Newton's method on g (first guess: the parabola through the last three values of g),
//   each iterate a partial integrator step from the nearest (corrected) state on the step
//   grid; it stops once the remaining error, estimated from the last update, is below
//   transit_tolerance_days (default 1e-8 d); scipy's DOP853 agrees to ~0.1 s (tests).
//   Epoch rule: epoch 0 of a planet is its detected transit nearest T_conj; epoch n is the
//   n-th transit after it (n < 0: before it), counted along the integration. The
//   integration covers every requested epoch's linear prediction T_conj + n P with one
//   period to spare; an epoch beyond what was found gives kEpochNotReached. A gap of more
//   than 1.5 P between consecutive transits (a missed conjunction, e.g. a face-on orbit)
//   also gives kEpochNotReached.
//
// Default step: h = P_in / 30 (P_in the shortest osculating period), the usual advice of
//   20–30 steps per innermost orbit for the Wisdom–Holman map (Wisdom & Holman 1992, AJ
//   104, 2022 used ~1/20): the map's relative energy error is ~ eps (2 pi h / P)^2 / 24 ~
//   2e-3 eps, far below transit-timing precision for planetary masses; for an eccentric
//   inner orbit the step should also resolve the periastron passage, so the default is
//   h = min over planets of P (1 - e)^(3/2) / 30.
//
// Cost and threads: compute_observables allocates nothing in its integration loop (the
//   state lives on the stack, up to kMaxNbodyPlanets planets); the output vectors are
//   reused when the same NbodyObservables is passed again. Every function here is
//   thread-safe for concurrent calls on different outputs.
#pragma once

#include <array>
#include <cstddef>
#include <limits>
#include <memory>
#include <span>
#include <string>
#include <vector>

namespace apsides {

inline constexpr int kMaxNbodyPlanets = 16;

// One planet's osculating Jacobi elements at the system's osculating epoch.
struct NbodyPlanet {
  double mass_ratio = 0.0;        // m / M_star, > 0 (3.0e-6 is about one Earth mass on the Sun)
  double period_days = 0.0;       // osculating Jacobi period, > 0
  double sqrt_e_cos_omega = 0.0;  // sqrt(e) cos(omega_star), omega of the STAR (keplerian_model.h)
  double sqrt_e_sin_omega = 0.0;  // sqrt(e) sin(omega_star)
  double t_conj_days = 0.0;       // time of inferior conjunction of the osculating orbit
  double inclination_rad = 1.57079632679489661923;  // i; pi/2 = edge-on
  double node_rad = 0.0;          // Omega, longitude of the ascending node in the sky plane

  double ecc() const { return sqrt_e_cos_omega * sqrt_e_cos_omega + sqrt_e_sin_omega * sqrt_e_sin_omega; }
  double omega_rad() const;  // omega_star = atan2(sqrt_e_sin, sqrt_e_cos); 0 when circular
  static NbodyPlanet from_elements(double mass_ratio, double period_days, double ecc, double omega_star_rad,
                                   double t_conj_days, double inclination_rad = 1.57079632679489661923,
                                   double node_rad = 0.0);
};

struct NbodySystem {
  double star_mass_msun = 1.0;        // > 0
  double osculating_epoch_days = 0.0; // the epoch of the elements (same time frame as every time here)
  std::vector<NbodyPlanet> planets;   // any order; 1 .. kMaxNbodyPlanets

  // "" or "planets[1].period_days = -3: must be > 0" (first problem found). Checks
  // masses > 0 and < 0.1, periods > 0, e < 1, finite values, planet count.
  std::string Validate() const;
};

enum class NbodyIntegrator { kWisdomHolman = 0, kReference = 1 };
enum class ReferenceMethod { kBulirschStoer = 0, kDormandPrince = 1 };
std::string to_string(NbodyIntegrator integrator);
std::string to_string(ReferenceMethod method);

struct NbodyOptions {
  NbodyIntegrator integrator = NbodyIntegrator::kWisdomHolman;
  // Wisdom–Holman step. step_days > 0 is used as given; otherwise
  // h = step_fraction * min_k P_k (1 - e_k)^(3/2) (see the header comment; default 1/30).
  double step_days = 0.0;
  double step_fraction = 1.0 / 30.0;  // in (0, 0.5]
  // Symplectic corrector order (Wisdom, Holman & Touma 1996): 0 (off), 3, 5 or 7. On by
  // default: it costs one corrector application per step that has an output (~10 % of an
  // evaluation) and removes the map's O(eps h^2) offset, which otherwise shifts transit
  // times linearly in time (measured: ~5 s after 8 years for two Earth masses near 2:1 at
  // P_in/30; 4 ms with order 3; tests/nbody_test.cpp).
  int corrector_order = 3;
  // Newton refinement of each mid-transit time stops when its error is below this (days):
  // after an update d the error left is ~ K d^2 + delta d (K = g''/2g' <~ 4/day, delta
  // <~ 1e-3 the error of the two-body g'), so it stops at |d| <= max(tol, sqrt(0.01 tol)).
  double transit_tolerance_days = 1e-8;
  // A planet pair closer than this many mutual Hill radii, R_H = ((m_i + m_j) / 3 M_star)^(1/3)
  // (a_i + a_j) / 2 from the initial elements, ends the evaluation with kCloseEncounter:
  // neither the map nor the observables are trustworthy there. 0 disables the check.
  double encounter_hill_radii = 1.0;
  // Reference integrator: method and tolerances (relative; absolute in au and au/day).
  ReferenceMethod reference_method = ReferenceMethod::kBulirschStoer;
  double reference_rel_tol = 1e-13;
  double reference_abs_tol = 1e-15;
  // Refuse integrations longer than this many steps (a runaway time span).
  long long max_steps = 50'000'000;

  // "" or "field = value: must be ...".
  std::string Validate() const;
};

enum class NbodyStatus {
  kOk = 0,
  kNotRun,
  kInvalidSystem,     // NbodySystem::Validate or NbodyOptions::Validate failed
  kUnbound,           // a Jacobi orbit became hyperbolic/parabolic (ejection)
  kCloseEncounter,    // two planets within encounter_hill_radii mutual Hill radii
  kKeplerFailed,      // the universal Kepler equation did not converge (never seen; reported)
  kEpochNotReached,   // a requested transit epoch was not found (or a conjunction missed)
  kIntegratorFailed,  // the reference integrator could not keep its tolerance
  kTooManySteps,      // the time span needs more than max_steps steps
};
std::string to_string(NbodyStatus status);

// What compute_observables returns. Fields start at sentinels; on any status other than
// kOk the numbers are NaN and `message` says why (e.g. "planets 0 and 1 came within 0.8
// mutual Hill radii at t = 1234.5").
struct NbodyObservables {
  NbodyStatus status = NbodyStatus::kNotRun;
  std::string message = "compute_observables was not run.";
  std::vector<double> star_velocity_m_s;               // one per velocity time, input order
  std::vector<std::vector<double>> transit_times_days; // [planet (input order)][k], one per requested epoch
  double step_days = std::numeric_limits<double>::quiet_NaN();  // the WH step used
  long long steps = 0;                                  // integrator steps taken (both directions)

  bool ok() const { return status == NbodyStatus::kOk; }
  std::string BriefReport() const;
};

// The one call: star velocities (m/s, barycentric, v > 0 receding) at `rv_times_days`
// (any order, either side of the osculating epoch) and, for each planet p with a
// non-empty transit_epochs[p], its mid-transit times for those epochs (epoch rule above).
// `transit_epochs` may be empty or shorter than the planet list (missing = no transits).
// Never throws on bad numbers: an invalid system or options gives kInvalidSystem.
NbodyObservables compute_observables(const NbodySystem& system, std::span<const double> rv_times_days,
                                     const std::vector<std::vector<long long>>& transit_epochs,
                                     const NbodyOptions& options = {});
// Same, writing into `out` and reusing its vectors' capacity (the MCMC form).
void compute_observables(const NbodySystem& system, std::span<const double> rv_times_days,
                         const std::vector<std::vector<long long>>& transit_epochs, const NbodyOptions& options,
                         NbodyObservables& out);

// The WH step compute_observables uses for this system and these options (days).
double nbody_step_days(const NbodySystem& system, const NbodyOptions& options);

// ---------------------------------------------------------------------------------------
// Lower-level access, for tests, figures and stability work.

// Barycentric Cartesian state. Body 0 is the star, then the planets.
struct CartesianState {
  double time_days = 0.0;
  std::vector<double> mass_msun;
  std::vector<std::array<double, 3>> position_au;
  std::vector<std::array<double, 3>> velocity_au_per_day;
};

// G in au^3 / (M_sun day^2), from constants.h.
double gravitational_constant_au_msun_day();

// The system at its osculating epoch, barycentric, star first then planets in the
// caller's order. Requires a valid system (assert).
CartesianState nbody_initial_state(const NbodySystem& system);
// Total energy (M_sun au^2 / day^2) and angular momentum (M_sun au^2 / day), barycentric.
double total_energy(const CartesianState& state);
std::array<double, 3> total_angular_momentum(const CartesianState& state);

// A propagator of a Cartesian state, for checks: Wisdom–Holman (planets taken in the
// state's order as the Jacobi order, which should be inside out) or the reference
// integrator, per `options`. advance_to(t) moves forward or backward; state() gives the
// barycentric state at the current time (corrected coordinates when the corrector is on).
class NbodyPropagator {
 public:
  NbodyPropagator(const CartesianState& start, double step_days, const NbodyOptions& options = {});
  ~NbodyPropagator();
  NbodyPropagator(const NbodyPropagator&) = delete;
  NbodyPropagator& operator=(const NbodyPropagator&) = delete;

  // Integrates to t (days). For Wisdom–Holman, t is reached by whole steps and a final
  // partial step. Returns kOk, or the first failure (kUnbound, kKeplerFailed, ...).
  NbodyStatus advance_to(double t_days);
  CartesianState state() const;
  double time_days() const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace apsides
