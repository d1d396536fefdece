// Internal: the Wisdom–Holman machinery shared by the observables, the propagator and
// the MEGNO integration. Nothing here allocates; every array has room for
// kMaxNbodyPlanets planets. See include/apsides/nbody.h for the conventions.
#pragma once

#include <cmath>

#include "apsides/nbody.h"

namespace apsides::dynamics {

inline constexpr int kMaxPlanets = kMaxNbodyPlanets;
inline constexpr int kMaxBodies = kMaxPlanets + 1;

// Plain aggregate (no default member initialisers: the hot loops keep arrays of these on
// the stack and must not pay for zeroing them). Write Vec3{} for a zero vector.
struct Vec3 {
  double x, y, z;
};
inline Vec3 operator+(Vec3 a, Vec3 b) { return {a.x + b.x, a.y + b.y, a.z + b.z}; }
inline Vec3 operator-(Vec3 a, Vec3 b) { return {a.x - b.x, a.y - b.y, a.z - b.z}; }
inline Vec3 operator*(double s, Vec3 a) { return {s * a.x, s * a.y, s * a.z}; }
inline Vec3& operator+=(Vec3& a, Vec3 b) { a.x += b.x; a.y += b.y; a.z += b.z; return a; }
inline Vec3& operator-=(Vec3& a, Vec3 b) { a.x -= b.x; a.y -= b.y; a.z -= b.z; return a; }
inline double dot(Vec3 a, Vec3 b) { return a.x * b.x + a.y * b.y + a.z * b.z; }
inline Vec3 cross(Vec3 a, Vec3 b) { return {a.y * b.z - a.z * b.y, a.z * b.x - a.x * b.z, a.x * b.y - a.y * b.x}; }
inline double norm(Vec3 a) { return std::sqrt(dot(a, a)); }

// ---- Kepler drift (kepler_drift.cpp) -------------------------------------------------

enum class DriftResult { kOk = 0, kUnbound = 1, kFailed = 2 };

// Stumpff functions c0..c3 of z (any real z): c0 = cos sqrt z, c1 = sin sqrt z / sqrt z,
// c2 = (1 - cos sqrt z) / z, c3 = (sqrt z - sin sqrt z) / z^(3/2), continued to z <= 0.
void stumpff_c0123(double z, double c[4]);
// c4 = (1/2 - c2) / z and c5 = (1/6 - c3) / z (series for small |z|).
void stumpff_c45(double z, double c2, double c3, double& c4, double& c5);

// Advances (r, v) by dt along the Kepler orbit of gravitational parameter gm (au^3/d^2).
// kUnbound: the orbit is not elliptic (the drift is still done exactly); kFailed: no
// convergence (r, v untouched).
DriftResult kepler_drift(double gm, double dt, Vec3& r, Vec3& v);
// The same with the tangent map: (dr, dv) are carried along by the drift's Jacobian
// (differentiated universal-variable solution, as in Mikkola & Innanen 1999, AJ 118, 1369).
DriftResult kepler_drift_tangent(double gm, double dt, Vec3& r, Vec3& v, Vec3& dr, Vec3& dv);

// ---- Wisdom–Holman map (wisdom_holman.cpp) -------------------------------------------

// Masses and derived constants of a system in Jacobi order (body 0 the star).
struct WhSystem {
  int n = 0;                      // planets
  double gm_star = 0.0;           // G M_star, au^3/d^2
  double mu[kMaxBodies] = {};     // m_k / M_star; mu[0] = 1
  double gm[kMaxBodies] = {};     // G m_k
  double kepler_gm[kMaxBodies] = {};  // G eta_k, eta_k = sum_{j<=k} m_j (Jacobi Kepler problem)
  double eta[kMaxBodies] = {};    // eta_k / M_star = 1 + mu_1 + ... + mu_k
  double inv_eta[kMaxBodies] = {};  // 1 / eta_k
  double frac[kMaxBodies] = {};   // m_k / eta_k
  // Squared close-encounter distance per planet pair (au^2), 0 = no check.
  double encounter_r2[kMaxBodies][kMaxBodies] = {};
};

// Jacobi positions r'_k and velocities v'_k of the planets (index 1..n; [0] unused).
struct WhState {
  Vec3 r[kMaxBodies];
  Vec3 v[kMaxBodies];
};

// Tangent vector in Jacobi coordinates.
struct WhTangent {
  Vec3 dr[kMaxBodies];
  Vec3 dv[kMaxBodies];
};

// Sets the constants from the star mass (M_sun), planet mass ratios (Jacobi order) and the
// encounter threshold in mutual Hill radii with the planets' semi-major axes (au).
void wh_setup(WhSystem& sys, double star_mass_msun, const double* mass_ratio, int n,
              double encounter_hill_radii, const double* a_au);

// Jacobi <-> barycentric (positions or velocities: the transform is the same).
void jacobi_to_barycentric(const WhSystem& sys, const Vec3* jac, Vec3* bary);
void barycentric_to_jacobi(const WhSystem& sys, const Vec3* bary, Vec3* jac);
// Star-centred position (or velocity) of planet k from Jacobi vectors.
inline Vec3 heliocentric(const WhSystem& sys, const Vec3* jac, int k) {
  Vec3 s = jac[k];
  for (int j = 1; j < k; ++j) s += sys.frac[j] * jac[j];
  return s;
}
// Barycentric velocity of the star from Jacobi velocities.
inline Vec3 star_barycentric(const WhSystem& sys, const Vec3* jac) {
  Vec3 s{};
  for (int j = 1; j <= sys.n; ++j) s -= sys.frac[j] * jac[j];
  return s;
}

// Status of a step: drift failures and close encounters.
struct WhFlags {
  DriftResult drift = DriftResult::kOk;
  bool encounter = false;
  int pair_i = 0, pair_j = 0;
  int drift_planet = 0;  // Jacobi index of the first planet whose drift failed or was unbound
  void merge(DriftResult d, int k = 0) {
    if (static_cast<int>(d) > static_cast<int>(drift)) {
      drift = d;
      drift_planet = k;
    }
  }
};

// The interaction acceleration in Jacobi coordinates (the kick's dv/dt) at positions r.
void interaction_acceleration(const WhSystem& sys, const Vec3* r, Vec3* acc, WhFlags& flags);
// Its Jacobian applied to a position variation dr: dacc = (d acc / d r) dr.
void interaction_acceleration_tangent(const WhSystem& sys, const Vec3* r, const Vec3* dr, Vec3* dacc);

// Drift every planet by dt; kick by dt (acceleration recomputed).
void wh_drift(const WhSystem& sys, WhState& s, double dt, WhFlags& flags);
void wh_kick(const WhSystem& sys, WhState& s, double dt, WhFlags& flags);

// The KDK stepper with the acceleration cached between steps.
class WhStepper {
 public:
  // Sets the state; the first step computes the acceleration.
  void reset(const WhSystem* sys, const WhState& s);
  // One step K(h/2) D(h) K(h/2).
  void step(double h, WhFlags& flags);
  // One step with the tangent vector carried along.
  void step_tangent(double h, WhTangent& t, WhFlags& flags);
  WhState& state() { return s_; }
  const WhState& state() const { return s_; }

 private:
  const WhSystem* sys_ = nullptr;
  WhState s_;
  Vec3 acc_[kMaxBodies];
  bool acc_valid_ = false;
};

// One KDK step of size h on a copy (no cached acceleration): partial steps.
void wh_partial_step(const WhSystem& sys, WhState& s, double h, WhFlags& flags);

// ---- Symplectic corrector (corrector.cpp) ----------------------------------------------

// Wisdom, Holman & Touma 1996: the corrector C is a product of X(a, b) = D(a h) K(b h)
// D(-a h); the kernel here is KDK, related to WHT96's DKD kernel by the exact conjugacy
// DKD = Q KDK Q^-1, Q = D(-h/2) K(-h/2) (see corrector.cpp).
// to_mapping: real coordinates -> KDK mapping coordinates; to_real: the inverse.
bool corrector_supported(int order);
void corrector_to_mapping(const WhSystem& sys, WhState& s, double h, int order, WhFlags& flags);
void corrector_to_real(const WhSystem& sys, WhState& s, double h, int order, WhFlags& flags);
// The published-form coefficients (a_k, b_k) of order `order` (for tests):
// C = prod Z(a_k, b_k), count = (order - 1) / 2 pairs.
int corrector_coefficients(int order, double* a, double* b);

// ---- Elements -> Jacobi state (nbody_setup.cpp) -------------------------------------

// The engine's view of a system: Jacobi order and initial Jacobi state.
struct PreparedSystem {
  WhSystem sys;
  WhState initial;        // Jacobi state at the osculating epoch
  int order[kMaxPlanets]; // order[j] = caller's index of the j-th planet (Jacobi order, 0-based)
  double a_au[kMaxPlanets];      // Jacobi semi-major axes (Jacobi order)
  double period[kMaxPlanets];    // osculating periods (Jacobi order)
  double ecc[kMaxPlanets];
};
// Requires a valid system.
void prepare_system(const NbodySystem& system, double encounter_hill_radii, PreparedSystem& out);
// Position and velocity of a Kepler orbit (gravitational parameter gm) from elements.
void elements_to_cartesian(double gm, double period_days, double ecc, double omega_planet, double inc,
                           double node, double mean_anomaly, Vec3& r, Vec3& v);

}  // namespace apsides::dynamics
