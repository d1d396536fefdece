// The Wisdom–Holman map in Jacobi coordinates (Wisdom & Holman 1991, AJ 102, 1528).
//
// Splitting. With Jacobi positions r'_k = x_k - R_{k-1} (R_{k-1} the centre of mass of
// the star and planets 1..k-1), Jacobi masses m'_k = m_k eta_{k-1} / eta_k and
// eta_k = M_star + m_1 + ... + m_k, the Hamiltonian is H = H_Kepler + H_interaction with
//   H_Kepler = sum_k [ p'_k^2 / (2 m'_k) - G m'_k eta_k / r'_k ]
//   H_interaction = sum_k G m'_k eta_k / r'_k - sum_{a<b} G m_a m_b / r_ab.
// Each Jacobi "planet" then drifts on a Kepler orbit of gravitational parameter G eta_k
// (the interior-mass choice; nbody.h states why the elements use it), and the kick is
//   dv'_k/dt = a'_k(Newton) + G eta_k r'_k / r'_k^3,
//   a'_k(Newton) = g_k - (1/eta_{k-1}) sum_{j<k} m_j g_j,
// g the barycentric Newtonian accelerations. For k = 1 the star–planet-1 pull and the
// Kepler term cancel exactly (r'_1 = x_1 - x_0, eta_1 = M_star + m_1), so that pair is
// left out of g and no Kepler term is added: a single planet is then an exact Kepler
// orbit (the kick vanishes identically). The pair also drops out of every a'_k with
// k >= 2, as internal forces of the inner group cancel in its centre-of-mass acceleration.
#include <algorithm>
#include <cmath>

#include "apsides/constants.h"
#include "dynamics/wh_core.h"

namespace apsides::dynamics {

void wh_setup(WhSystem& sys, double star_mass_msun, const double* mass_ratio, int n,
              double encounter_hill_radii, const double* a_au) {
  const double G = gravitational_constant_au_msun_day();
  sys = WhSystem{};
  sys.n = n;
  sys.gm_star = G * star_mass_msun;
  sys.mu[0] = 1.0;
  sys.eta[0] = 1.0;
  sys.inv_eta[0] = 1.0;
  sys.gm[0] = sys.gm_star;
  for (int k = 1; k <= n; ++k) {
    sys.mu[k] = mass_ratio[k - 1];
    sys.eta[k] = sys.eta[k - 1] + sys.mu[k];
    sys.inv_eta[k] = 1.0 / sys.eta[k];
    sys.gm[k] = sys.gm_star * sys.mu[k];
    sys.kepler_gm[k] = sys.gm_star * sys.eta[k];
    sys.frac[k] = sys.mu[k] / sys.eta[k];
  }
  if (encounter_hill_radii > 0.0 && a_au != nullptr) {
    for (int i = 1; i <= n; ++i)
      for (int j = i + 1; j <= n; ++j) {
        // Mutual Hill radius (Gladman 1993): ((m_i + m_j) / 3 M_star)^(1/3) (a_i + a_j) / 2.
        const double rh = std::cbrt((sys.mu[i] + sys.mu[j]) / 3.0) * 0.5 * (a_au[i - 1] + a_au[j - 1]);
        const double d = encounter_hill_radii * rh;
        sys.encounter_r2[i][j] = sys.encounter_r2[j][i] = d * d;
      }
  }
}

void jacobi_to_barycentric(const WhSystem& sys, const Vec3* jac, Vec3* bary) {
  // R_N = 0 (barycentre); R_{k-1} = R_k - (m_k / eta_k) r'_k; x_k = R_{k-1} + r'_k.
  Vec3 R{};
  for (int k = sys.n; k >= 1; --k) {
    R -= sys.frac[k] * jac[k];
    bary[k] = R + jac[k];
  }
  bary[0] = R;
}

void barycentric_to_jacobi(const WhSystem& sys, const Vec3* bary, Vec3* jac) {
  Vec3 R = bary[0];
  for (int k = 1; k <= sys.n; ++k) {
    jac[k] = bary[k] - R;
    R += sys.frac[k] * jac[k];
  }
}

void interaction_acceleration(const WhSystem& sys, const Vec3* r, Vec3* acc, WhFlags& flags) {
  const int n = sys.n;
  Vec3 x[kMaxBodies];
  Vec3 g[kMaxBodies];
  jacobi_to_barycentric(sys, r, x);
  // Star with planets 2..n (the star–planet-1 pair is left out, see above).
  g[0] = Vec3{};
  g[1] = Vec3{};
  for (int b = 2; b <= n; ++b) {
    const Vec3 d = x[b] - x[0];
    const double r2 = dot(d, d);
    const double inv3 = 1.0 / (r2 * std::sqrt(r2));
    g[0] += (sys.gm[b] * inv3) * d;
    g[b] = (-sys.gm[0] * inv3) * d;
  }
  // Planet pairs, with the close-encounter test.
  for (int a = 1; a < n; ++a) {
    for (int b = a + 1; b <= n; ++b) {
      const Vec3 d = x[b] - x[a];
      const double r2 = dot(d, d);
      const double inv3 = 1.0 / (r2 * std::sqrt(r2));
      g[a] += (sys.gm[b] * inv3) * d;
      g[b] -= (sys.gm[a] * inv3) * d;
      if (r2 < sys.encounter_r2[a][b] && !flags.encounter) {
        flags.encounter = true;
        flags.pair_i = a;
        flags.pair_j = b;
      }
    }
  }
  Vec3 S = g[0];  // sum_{j<k} mu_j g_j (mu_0 = 1)
  acc[1] = g[1] - S;
  S += sys.mu[1] * g[1];
  for (int k = 2; k <= n; ++k) {
    const double r2 = dot(r[k], r[k]);
    acc[k] = g[k] - sys.inv_eta[k - 1] * S + (sys.kepler_gm[k] / (r2 * std::sqrt(r2))) * r[k];
    S += sys.mu[k] * g[k];
  }
}

void interaction_acceleration_tangent(const WhSystem& sys, const Vec3* r, const Vec3* dr, Vec3* dacc) {
  const int n = sys.n;
  Vec3 x[kMaxBodies], dx[kMaxBodies], dg[kMaxBodies];
  jacobi_to_barycentric(sys, r, x);
  jacobi_to_barycentric(sys, dr, dx);
  for (int a = 0; a <= n; ++a) dg[a] = Vec3{};
  for (int a = 0; a <= n; ++a) {
    for (int b = a + 1; b <= n; ++b) {
      if (a == 0 && b == 1) continue;
      const Vec3 d = x[b] - x[a];
      const Vec3 dd = dx[b] - dx[a];
      const double r2 = dot(d, d);
      const double inv3 = 1.0 / (r2 * std::sqrt(r2));
      const double inv5 = inv3 / r2;
      // d/dd of d / |d|^3 applied to dd: dd / r^3 - 3 d (d . dd) / r^5.
      const Vec3 t = inv3 * dd - (3.0 * inv5 * dot(d, dd)) * d;
      dg[a] += sys.gm[b] * t;
      dg[b] -= sys.gm[a] * t;
    }
  }
  Vec3 S = dg[0];
  for (int k = 1; k <= n; ++k) {
    dacc[k] = dg[k] - sys.inv_eta[k - 1] * S;
    S += sys.mu[k] * dg[k];
    if (k >= 2) {
      const double r2 = dot(r[k], r[k]);
      const double inv3 = 1.0 / (r2 * std::sqrt(r2));
      const double inv5 = inv3 / r2;
      dacc[k] += sys.kepler_gm[k] * (inv3 * dr[k] - (3.0 * inv5 * dot(r[k], dr[k])) * r[k]);
    }
  }
}

void wh_drift(const WhSystem& sys, WhState& s, double dt, WhFlags& flags) {
  for (int k = 1; k <= sys.n; ++k) flags.merge(kepler_drift(sys.kepler_gm[k], dt, s.r[k], s.v[k]), k);
}

void wh_kick(const WhSystem& sys, WhState& s, double dt, WhFlags& flags) {
  Vec3 acc[kMaxBodies];
  interaction_acceleration(sys, s.r, acc, flags);
  for (int k = 1; k <= sys.n; ++k) s.v[k] += dt * acc[k];
}

void WhStepper::reset(const WhSystem* sys, const WhState& s) {
  sys_ = sys;
  s_ = s;
  acc_valid_ = false;
}

void WhStepper::step(double h, WhFlags& flags) {
  const int n = sys_->n;
  if (!acc_valid_) interaction_acceleration(*sys_, s_.r, acc_, flags);
  const double half = 0.5 * h;
  for (int k = 1; k <= n; ++k) s_.v[k] += half * acc_[k];
  wh_drift(*sys_, s_, h, flags);
  interaction_acceleration(*sys_, s_.r, acc_, flags);
  for (int k = 1; k <= n; ++k) s_.v[k] += half * acc_[k];
  acc_valid_ = true;
}

void WhStepper::step_tangent(double h, WhTangent& t, WhFlags& flags) {
  const int n = sys_->n;
  Vec3 dacc[kMaxBodies];
  const double half = 0.5 * h;
  if (!acc_valid_) interaction_acceleration(*sys_, s_.r, acc_, flags);
  interaction_acceleration_tangent(*sys_, s_.r, t.dr, dacc);
  for (int k = 1; k <= n; ++k) {
    s_.v[k] += half * acc_[k];
    t.dv[k] += half * dacc[k];
  }
  for (int k = 1; k <= n; ++k)
    flags.merge(kepler_drift_tangent(sys_->kepler_gm[k], h, s_.r[k], s_.v[k], t.dr[k], t.dv[k]), k);
  interaction_acceleration(*sys_, s_.r, acc_, flags);
  interaction_acceleration_tangent(*sys_, s_.r, t.dr, dacc);
  for (int k = 1; k <= n; ++k) {
    s_.v[k] += half * acc_[k];
    t.dv[k] += half * dacc[k];
  }
  acc_valid_ = true;
}

void wh_partial_step(const WhSystem& sys, WhState& s, double h, WhFlags& flags) {
  if (h == 0.0) return;
  wh_kick(sys, s, 0.5 * h, flags);
  wh_drift(sys, s, h, flags);
  wh_kick(sys, s, 0.5 * h, flags);
}

double gravitational_constant_au_msun_day_impl() {
  using namespace constants;
  return kGMSun * kDay * kDay / (kAu * kAu * kAu);
}

}  // namespace apsides::dynamics

namespace apsides {
double gravitational_constant_au_msun_day() { return dynamics::gravitational_constant_au_msun_day_impl(); }
}  // namespace apsides
