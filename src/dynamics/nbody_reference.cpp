// The reference integrator: Newton's equations for the star and planets in barycentric
// Cartesian coordinates, integrated by Boost.Odeint's Bulirsch–Stoer with dense output
// (Deuflhard's extrapolation with the 2, 6, 10, ... sequence that allows interpolation;
// interpolation error controlled too) or by Dormand–Prince 5(4) with its dense output,
// at tight tolerance. Velocities come from the dense output; conjunctions are detected at
// step ends and solved by TOMS 748 on the dense output.
#include <boost/math/tools/roots.hpp>
#include <boost/numeric/odeint.hpp>
#include <fmt/format.h>

#include <cmath>
#include <cstdint>
#include <vector>

#include "dynamics/observables_internal.h"

namespace apsides::dynamics {

namespace {

using State = std::vector<double>;
namespace odeint = boost::numeric::odeint;

// Layout: positions of bodies 0..n (3 each), then velocities. The integration variable is
// s = direction * (t - t0), always increasing: odeint's Bulirsch–Stoer chooses its order
// from cost / step, which goes wrong for negative steps (Boost 1.74), so a backward pass
// integrates dy/ds = -f(y) forward in s instead.
struct Newton {
  const WhSystem* sys;
  int bodies;
  double direction;
  void operator()(const State& y, State& dy, double /*s*/) const {
    const int nb = bodies;
    const std::size_t vo = static_cast<std::size_t>(3 * nb);
    for (std::size_t i = 0; i < vo; ++i) {
      dy[i] = direction * y[vo + i];
      dy[vo + i] = 0.0;
    }
    for (int a = 0; a < nb; ++a) {
      for (int b = a + 1; b < nb; ++b) {
        const auto ia = static_cast<std::size_t>(3 * a), ib = static_cast<std::size_t>(3 * b);
        const double dx = y[ib] - y[ia], dyy = y[ib + 1] - y[ia + 1], dz = y[ib + 2] - y[ia + 2];
        const double r2 = dx * dx + dyy * dyy + dz * dz;
        const double inv3 = 1.0 / (r2 * std::sqrt(r2));
        const double fa = direction * sys->gm[b] * inv3, fb = direction * sys->gm[a] * inv3;
        dy[vo + ia] += fa * dx;
        dy[vo + ia + 1] += fa * dyy;
        dy[vo + ia + 2] += fa * dz;
        dy[vo + ib] -= fb * dx;
        dy[vo + ib + 1] -= fb * dyy;
        dy[vo + ib + 2] -= fb * dz;
      }
    }
  }
};

inline Vec3 body(const State& y, int a, bool velocity, int bodies) {
  const std::size_t o = static_cast<std::size_t>(3 * a + (velocity ? 3 * bodies : 0));
  return {y[o], y[o + 1], y[o + 2]};
}

// The caller's planet k (Jacobi index) is body k in the barycentric vector.
inline void sky_motion(const State& y, int k, int bodies, double& g, double& z) {
  const Vec3 r = body(y, k, false, bodies) - body(y, 0, false, bodies);
  const Vec3 v = body(y, k, true, bodies) - body(y, 0, true, bodies);
  g = r.x * v.x + r.y * v.y;
  z = r.z;
}

// Close encounters and unbound Jacobi orbits at a step end (same tests as the WH map).
NbodyStatus check_state(const WhSystem& sys, const State& y, int bodies, WhFlags& flags) {
  Vec3 x[kMaxBodies], v[kMaxBodies], rj[kMaxBodies], vj[kMaxBodies];
  for (int a = 0; a < bodies; ++a) {
    x[a] = body(y, a, false, bodies);
    v[a] = body(y, a, true, bodies);
  }
  for (int a = 1; a < bodies; ++a)
    for (int b = a + 1; b < bodies; ++b) {
      const Vec3 d = x[b] - x[a];
      if (dot(d, d) < sys.encounter_r2[a][b]) {
        flags.encounter = true;
        flags.pair_i = a;
        flags.pair_j = b;
        return NbodyStatus::kCloseEncounter;
      }
    }
  barycentric_to_jacobi(sys, x, rj);
  barycentric_to_jacobi(sys, v, vj);
  for (int k = 1; k < bodies; ++k)
    if (2.0 * sys.kepler_gm[k] / norm(rj[k]) - dot(vj[k], vj[k]) <= 0.0) {
      flags.merge(DriftResult::kUnbound, k);
      return NbodyStatus::kUnbound;
    }
  return NbodyStatus::kOk;
}

template <class Stepper>
PassResult run(Stepper& stepper, const PassRequest& rq) {
  const PreparedSystem& ps = *rq.ps;
  const WhSystem& sys = ps.sys;
  const int n = sys.n, nb = n + 1;
  const double dir = rq.direction;
  const Newton rhs{&sys, nb, dir};
  PassResult res;

  Vec3 x[kMaxBodies], v[kMaxBodies];
  jacobi_to_barycentric(sys, ps.initial.r, x);
  jacobi_to_barycentric(sys, ps.initial.v, v);
  State y(static_cast<std::size_t>(6 * nb)), tmp(y.size());
  for (int a = 0; a < nb; ++a) {
    const auto o = static_cast<std::size_t>(3 * a), vo = static_cast<std::size_t>(3 * nb + 3 * a);
    y[o] = x[a].x;
    y[o + 1] = x[a].y;
    y[o + 2] = x[a].z;
    y[vo] = v[a].x;
    y[vo + 1] = v[a].y;
    y[vo + 2] = v[a].z;
  }
  double g_prev[kMaxPlanets] = {}, z_prev[kMaxPlanets] = {};
  for (int j = 0; j < n; ++j)
    if (rq.wants_transits[j]) sky_motion(y, j + 1, nb, g_prev[j], z_prev[j]);

  stepper.initialize(y, 0.0, 0.1 * rq.h);
  std::size_t next_rv = 0;
  while (true) {
    const std::pair<double, double> span = stepper.do_step(rhs);
    ++res.steps;
    if (res.steps > rq.options->max_steps) {
      res.status = NbodyStatus::kTooManySteps;
      res.message = fmt::format("the reference integrator needed more than max_steps = {} steps", rq.options->max_steps);
      return res;
    }
    const double ta = span.first, tb = span.second;  // s = direction * (t - t0)
    const State& yb = stepper.current_state();
    for (int a = 0; a < 6 * nb; ++a)
      if (!std::isfinite(yb[static_cast<std::size_t>(a)])) {
        res.status = NbodyStatus::kIntegratorFailed;
        res.message = fmt::format("the reference integrator failed near t = {:.6g}", rq.t0 + dir * tb);
        return res;
      }
    WhFlags flags;
    if (const NbodyStatus st = check_state(sys, yb, nb, flags); st != NbodyStatus::kOk) {
      res.status = st;
      res.message = failure_message(st, ps, flags, rq.t0 + dir * tb);
      return res;
    }
    while (next_rv < rq.rv_count) {
      const std::size_t idx = rq.rv_index[next_rv];
      const double srel = dir * (rq.rv_times[idx] - rq.t0);
      if (srel > tb) break;
      stepper.calc_state(srel, tmp);
      rq.rv_out[idx] = body(tmp, 0, true, nb).z * kMetresPerSecondPerAuPerDay;
      ++next_rv;
    }
    for (int j = 0; j < n; ++j) {
      if (!rq.wants_transits[j]) continue;
      double g, z;
      sky_motion(yb, j + 1, nb, g, z);
      const bool crossed = dir > 0 ? (g_prev[j] < 0.0 && g >= 0.0) : (g < 0.0 && g_prev[j] >= 0.0);
      if (crossed && (z < 0.0 || z_prev[j] < 0.0)) {
        auto gfun = [&](double t) {
          double gg, zz;
          stepper.calc_state(t, tmp);
          sky_motion(tmp, j + 1, nb, gg, zz);
          return gg;
        };
        std::uintmax_t iters = 200;
        const auto root = boost::math::tools::toms748_solve(
            gfun, ta, tb, [](double a, double b) { return std::fabs(b - a) <= 1e-11; }, iters);
        const double tc = 0.5 * (root.first + root.second);
        double gg, zc;
        stepper.calc_state(tc, tmp);
        sky_motion(tmp, j + 1, nb, gg, zc);
        if (zc < 0.0) rq.transits[j].push_back(rq.t0 + dir * tc);
      }
      g_prev[j] = g;
      z_prev[j] = z;
    }
    if (tb >= rq.span && next_rv >= rq.rv_count) break;
  }
  return res;
}

}  // namespace

PassResult reference_pass(const PassRequest& rq) {
  const NbodyOptions& opt = *rq.options;
  // Steps at most P_in / 10 (three WH steps): conjunctions are detected at step ends.
  const double max_dt = 3.0 * rq.h;
  try {
    if (opt.reference_method == ReferenceMethod::kBulirschStoer) {
      odeint::bulirsch_stoer_dense_out<State> stepper(opt.reference_abs_tol, opt.reference_rel_tol, 1.0, 1.0, max_dt,
                                                      true);
      return run(stepper, rq);
    }
    auto stepper = odeint::make_dense_output(opt.reference_abs_tol, opt.reference_rel_tol, max_dt,
                                             odeint::runge_kutta_dopri5<State>());
    return run(stepper, rq);
  } catch (const std::exception& e) {
    PassResult res;
    res.status = NbodyStatus::kIntegratorFailed;
    res.message = fmt::format("the reference integrator failed: {}", e.what());
    return res;
  }
}

}  // namespace apsides::dynamics
