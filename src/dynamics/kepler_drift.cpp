// The Kepler drift of the Wisdom–Holman map: the exact two-body motion over a time dt by
// Gauss's f and g functions written with universal variables (Stumpff 1959; Danby 1988,
// "Fundamentals of Celestial Mechanics", 2nd ed., §6.9). With the G-functions
// G_k(beta, X) = X^k c_k(beta X^2) and beta = 2 gm / r0 - v0^2 (= gm / a),
//   t(X) = r0 X + eta0 G2 + zeta0 G3,     eta0 = r0 . v0,  zeta0 = gm - beta r0,
//   r(X) = dt/dX = r0 + eta0 G1 + zeta0 G2,
//   f = 1 - gm G2 / r0,  g = t - gm G3,  fdot = -gm G1 / (r r0),  gdot = 1 - gm G2 / r.
// zeta0 = gm e cos E0 and eta0 = sqrt(gm a) e sin E0 vanish for a circular orbit, so the
// equation is nearly linear there and the Halley iteration below converges in one step.
#include <cmath>
#include <limits>

#include "dynamics/wh_core.h"

namespace apsides::dynamics {

namespace {
// Taylor coefficients (-1)^n / (2n+2)! and (-1)^n / (2n+3)!, n = 0..7: with |z| <= 0.1 the
// truncation is below 1e-20 relative. Multiplications only (no divisions in the chain).
constexpr double kC2[8] = {1.0 / 2.0,       -1.0 / 24.0,        1.0 / 720.0,         -1.0 / 40320.0,
                           1.0 / 3628800.0, -1.0 / 479001600.0, 1.0 / 87178291200.0, -1.0 / 20922789888000.0};
constexpr double kC3[8] = {1.0 / 6.0,        -1.0 / 120.0,        1.0 / 5040.0,          -1.0 / 362880.0,
                           1.0 / 39916800.0, -1.0 / 6227020800.0, 1.0 / 1307674368000.0, -1.0 / 355687428096000.0};
}  // namespace

namespace {
[[gnu::always_inline]] inline void stumpff_core(double z, double c[4]) {
  if (!(std::fabs(z) < 1e300)) [[unlikely]] {
    c[0] = c[1] = c[2] = c[3] = std::numeric_limits<double>::quiet_NaN();
    return;
  }
  // Reduce |z| below 0.1 by quarters, sum the series there, then undo with the
  // duplication formulas (Stumpff; Danby 1988 §6.9): c0(4z) = 2 c0^2 - 1,
  // c1(4z) = c0 c1, c2(4z) = c1^2 / 2, c3(4z) = (c2 + c0 c3) / 4. A step of P/30 or
  // less gives z < 0.05 for the innermost orbit, so the loop is normally skipped.
  int k = 0;
  while (std::fabs(z) > 0.1) [[unlikely]] {
    z *= 0.25;
    ++k;
  }
  // Estrin's scheme: short, independent chains of multiply-adds.
  const double z2 = z * z;
  const double c2 = (kC2[0] + z * kC2[1]) +
                    z2 * ((kC2[2] + z * kC2[3]) + z2 * ((kC2[4] + z * kC2[5]) + z2 * (kC2[6] + z * kC2[7])));
  const double c3 = (kC3[0] + z * kC3[1]) +
                    z2 * ((kC3[2] + z * kC3[3]) + z2 * ((kC3[4] + z * kC3[5]) + z2 * (kC3[6] + z * kC3[7])));
  double d2 = c2, d3 = c3;
  double d1 = 1.0 - z * c3;
  double d0 = 1.0 - z * c2;
  for (; k > 0; --k) {
    d3 = 0.25 * (d2 + d0 * d3);
    d2 = 0.5 * d1 * d1;
    d1 = d0 * d1;
    d0 = 2.0 * d0 * d0 - 1.0;
  }
  c[0] = d0;
  c[1] = d1;
  c[2] = d2;
  c[3] = d3;
}
}  // namespace

void stumpff_c0123(double z, double c[4]) { stumpff_core(z, c); }

void stumpff_c45(double z, double c2, double c3, double& c4, double& c5) {
  if (std::fabs(z) < 0.5) {
    // c4 = sum (-z)^n / (2n+4)!, c5 = sum (-z)^n / (2n+5)!.
    c4 = 1.0 / 24.0 *
         (1.0 - z / 30.0 *
                    (1.0 - z / 56.0 *
                               (1.0 - z / 90.0 *
                                          (1.0 - z / 132.0 *
                                                     (1.0 - z / 182.0 *
                                                                (1.0 - z / 240.0 *
                                                                           (1.0 - z / 306.0 * (1.0 - z / 380.0))))))));
    c5 = 1.0 / 120.0 *
         (1.0 - z / 42.0 *
                    (1.0 - z / 72.0 *
                               (1.0 - z / 110.0 *
                                          (1.0 - z / 156.0 *
                                                     (1.0 - z / 210.0 *
                                                                (1.0 - z / 272.0 *
                                                                           (1.0 - z / 342.0 * (1.0 - z / 420.0))))))));
  } else {
    c4 = (0.5 - c2) / z;
    c5 = (1.0 / 6.0 - c3) / z;
  }
}

namespace {

struct Universal {
  double r0, ir, eta0, beta, zeta0, dt;  // ir = 1 / r0
};

// G0..G3 at X; F = t(X) - dt and its first two derivatives.
[[gnu::always_inline]] inline void evaluate(const Universal& u, double X, double G[4], double& F, double& Fp, double& Fpp) {
  double c[4];
  stumpff_core(u.beta * X * X, c);
  G[0] = c[0];
  G[1] = X * c[1];
  G[2] = X * X * c[2];
  G[3] = X * X * X * c[3];
  F = u.r0 * X + u.eta0 * G[2] + u.zeta0 * G[3] - u.dt;
  Fp = u.r0 + u.eta0 * G[1] + u.zeta0 * G[2];
  Fpp = u.eta0 * G[0] + u.zeta0 * G[1];
}

// Fallback: F is strictly increasing (F' = r > 0), so bracket the root by doubling from
// X = 0 (F(0) = -dt) and run Newton steps that fall back to bisection whenever they
// leave the bracket (Press et al., Numerical Recipes, "rtsafe").
[[gnu::noinline]] bool solve_bracketed(const Universal& u, double& X, double G[4]) {
  double F, Fp, Fpp;
  double lo = 0.0, hi = 0.0;
  const double sign = u.dt > 0.0 ? 1.0 : -1.0;
  double probe = sign * std::fmax(std::fabs(u.dt) / u.r0, 1e-300);
  for (int it = 0; it < 2000; ++it) {
    evaluate(u, probe, G, F, Fp, Fpp);
    if (!std::isfinite(F)) return false;
    if (sign * F >= 0.0) break;
    probe *= 2.0;
    if (it == 1999) return false;
  }
  if (sign > 0.0) {
    lo = 0.0;
    hi = probe;
  } else {
    lo = probe;
    hi = 0.0;
  }
  X = 0.5 * (lo + hi);
  for (int it = 0; it < 400; ++it) {
    evaluate(u, X, G, F, Fp, Fpp);
    if (F < 0.0) lo = X;
    else hi = X;
    double next = X - F / Fp;
    if (!(next > lo && next < hi)) next = 0.5 * (lo + hi);
    const double step = next - X;
    X = next;
    if (std::fabs(step) <= 4e-16 * std::fabs(X) || hi - lo <= 4e-16 * std::fabs(X)) {
      evaluate(u, X, G, F, Fp, Fpp);
      return std::isfinite(G[3]);
    }
  }
  return false;
}

// Solves t(X) = dt. On success G holds G0..G3 at the root and *irr = 1 / r(X).
[[gnu::always_inline]] inline bool solve_universal(const Universal& u, double& X, double G[4], double* irr) {
  if (u.dt == 0.0) {
    X = 0.0;
    G[0] = 1.0;
    G[1] = G[2] = G[3] = 0.0;
    *irr = u.ir;
    return true;
  }
  // Fourth-order Taylor guess of X(t), from dX/dt = 1/r, dr/dt = eta/r, deta/dt = zeta/r
  // and dzeta/dt = -beta eta/r: the derivatives of X at t = 0 are 1/r, -eta/r^3,
  // 3 eta^2/r^5 - zeta/r^4 and 10 eta zeta/r^6 - 15 eta^3/r^7 + beta eta/r^5. Exact for a
  // circular orbit; otherwise off by ~ e (n dt)^5 / 120, so one Halley step usually
  // converges.
  const double ir = u.ir;
  const double ir2 = ir * ir, ir3 = ir2 * ir;
  const double e0 = u.eta0, z0 = u.zeta0;
  const double d2 = -e0 * ir3;
  const double d3 = (3.0 * e0 * e0 * ir2 - z0 * ir) * ir3;
  const double d4 = (10.0 * e0 * z0 * ir3 - 15.0 * e0 * e0 * e0 * ir2 * ir2 + u.beta * e0 * ir2) * ir3;
  const double dt = u.dt;
  X = dt * (ir + dt * (0.5 * d2 + dt * (d3 / 6.0 + dt * d4 / 24.0)));
  double F, Fp, Fpp;
  for (int it = 0; it < 8; ++it) {
    evaluate(u, X, G, F, Fp, Fpp);
    // Halley: dX = F / (Fp - Fpp F / (2 Fp)). Near convergence |F / Fp| << |X| and the
    // denominator is expanded, dX = (F / Fp) (1 + Fpp F / (2 Fp^2)) (relative error
    // ~ (Fpp F / Fp^2)^2, far below round-off once the step is accepted), which leaves a
    // single division on the critical path; the same 1/Fp then gives 1/r (see irr).
    const double ifp = 1.0 / Fp;
    const double newton = F * ifp;
    const double dX = newton * (1.0 + 0.5 * Fpp * newton * ifp);
    if (!std::isfinite(dX)) break;
    X -= dX;
    if (std::fabs(dX) <= 1e-6 * std::fabs(X)) {
      // Cubic convergence: the remaining error is ~ (dX / X)^3 X, below round-off. Move the
      // G-functions to the new X by their Taylor series (second order, error ~ dX^3).
      const double d = -dX, h2 = 0.5 * d * d;
      const double g0 = G[0], g1 = G[1], g2 = G[2];
      G[0] = g0 - u.beta * (g1 * d + g0 * h2);
      G[1] = g1 + g0 * d - u.beta * g1 * h2;
      G[2] = g2 + g1 * d + g0 * h2;
      G[3] = G[3] + g2 * d + g1 * h2;
      // 1/r at the root from 1/Fp at the last iterate: r = Fp + Fpp d + O(d^2), so with
      // q = (r - Fp) / Fp, 1/r = (1/Fp)(1 - q + q^2) to O(q^3) ~ 1e-18.
      const double q = (u.eta0 * G[1] + u.zeta0 * G[2] + u.r0 - Fp) * ifp;
      *irr = ifp * (1.0 - q + q * q);
      return true;
    }
  }
  if (!solve_bracketed(u, X, G)) return false;
  *irr = 1.0 / (u.r0 + u.eta0 * G[1] + u.zeta0 * G[2]);
  return true;
}

inline Universal universal_of(double gm, double dt, const Vec3& r, const Vec3& v) {
  Universal u;
  u.r0 = norm(r);
  u.ir = 1.0 / u.r0;
  u.eta0 = dot(r, v);
  u.beta = 2.0 * gm * u.ir - dot(v, v);
  u.zeta0 = gm - u.beta * u.r0;
  u.dt = dt;
  return u;
}

}  // namespace

DriftResult kepler_drift(double gm, double dt, Vec3& r, Vec3& v) {
  const Universal u = universal_of(gm, dt, r, v);
  double X, G[4], irr;
  if (!(u.r0 > 0.0) || !solve_universal(u, X, G, &irr)) return DriftResult::kFailed;
  // f - 1 and gdot - 1 are formed directly: adding small corrections to r and v keeps
  // the round-off of a long run small (cf. Wisdom & Hernandez 2015, MNRAS 453, 3015).
  const double fm1 = -gm * G[2] * u.ir;
  const double g = dt - gm * G[3];
  const double fdot = -gm * G[1] * u.ir * irr;
  const double gdm1 = -gm * G[2] * irr;
  const Vec3 r0 = r, v0 = v;
  r = r0 + (fm1 * r0 + g * v0);
  v = v0 + (fdot * r0 + gdm1 * v0);
  return u.beta > 0.0 ? DriftResult::kOk : DriftResult::kUnbound;
}

DriftResult kepler_drift_tangent(double gm, double dt, Vec3& r, Vec3& v, Vec3& dr, Vec3& dv) {
  const Universal u = universal_of(gm, dt, r, v);
  double X, G[4], irr_unused;
  if (!(u.r0 > 0.0) || !solve_universal(u, X, G, &irr_unused)) return DriftResult::kFailed;
  // Exact c-functions at the root for the derivatives (G4, G5 enter d G_k / d beta).
  double c[4], c4, c5;
  const double z = u.beta * X * X;
  stumpff_c0123(z, c);
  stumpff_c45(z, c[2], c[3], c4, c5);
  const double X2 = X * X;
  G[0] = c[0];
  G[1] = X * c[1];
  G[2] = X2 * c[2];
  G[3] = X2 * X * c[3];
  const double G4 = X2 * X2 * c4, G5 = X2 * X2 * X * c5;
  const double rr = u.r0 + u.eta0 * G[1] + u.zeta0 * G[2];
  const double fm1 = -gm * G[2] / u.r0;
  const double g = dt - gm * G[3];
  const double fdot = -gm * G[1] / (rr * u.r0);
  const double gdm1 = -gm * G[2] / rr;

  // Variations of the scalars.
  const double d_r0 = dot(r, dr) / u.r0;
  const double d_eta0 = dot(dr, v) + dot(r, dv);
  const double d_beta = -2.0 * gm * d_r0 / (u.r0 * u.r0) - 2.0 * dot(v, dv);
  const double d_zeta0 = -u.beta * d_r0 - u.r0 * d_beta;
  // dG_k/dbeta = (k G_{k+2} - X G_{k+1}) / 2 (term-by-term from the series).
  const double gb1 = 0.5 * (G[3] - X * G[2]);
  const double gb2 = 0.5 * (2.0 * G4 - X * G[3]);
  const double gb3 = 0.5 * (3.0 * G5 - X * G4);
  // Implicit differentiation of t(X; r0, eta0, zeta0, beta) = dt (dt fixed).
  const double dX = -(X * d_r0 + G[2] * d_eta0 + G[3] * d_zeta0 + (u.eta0 * gb2 + u.zeta0 * gb3) * d_beta) / rr;
  const double dG1 = G[0] * dX + gb1 * d_beta;
  const double dG2 = G[1] * dX + gb2 * d_beta;
  const double dG3 = G[2] * dX + gb3 * d_beta;
  const double d_rr = d_r0 + d_eta0 * G[1] + u.eta0 * dG1 + d_zeta0 * G[2] + u.zeta0 * dG2;
  const double d_f = -gm * dG2 / u.r0 + gm * G[2] * d_r0 / (u.r0 * u.r0);
  const double d_g = -gm * dG3;
  const double d_fdot = -gm * dG1 / (rr * u.r0) + gm * G[1] / (rr * u.r0) * (d_rr / rr + d_r0 / u.r0);
  const double d_gdot = -gm * dG2 / rr + gm * G[2] * d_rr / (rr * rr);

  const Vec3 r0 = r, v0 = v, dr0 = dr, dv0 = dv;
  const double f = 1.0 + fm1, gdot = 1.0 + gdm1;
  dr = d_f * r0 + f * dr0 + d_g * v0 + g * dv0;
  dv = d_fdot * r0 + fdot * dr0 + d_gdot * v0 + gdot * dv0;
  r = r0 + (fm1 * r0 + g * v0);
  v = v0 + (fdot * r0 + gdm1 * v0);
  return u.beta > 0.0 ? DriftResult::kOk : DriftResult::kUnbound;
}

}  // namespace apsides::dynamics
