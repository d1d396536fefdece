// compute_observables: star velocities and mid-transit times from the Wisdom–Holman map
// (or the reference integrator), with the epoch rule of nbody.h.
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <limits>

#include "dynamics/observables_internal.h"

namespace apsides {
namespace dynamics {

namespace {

inline void copy_state(WhState& dst, const WhState& src, int n) {
  for (int k = 1; k <= n; ++k) {
    dst.r[k] = src.r[k];
    dst.v[k] = src.v[k];
  }
}

// Partial KDK step of size tau from `start` (acceleration there given) into `out`.
inline void partial_from(const WhSystem& sys, const WhState& start, const Vec3* acc_start, double tau, WhState& out,
                         WhFlags& flags) {
  copy_state(out, start, sys.n);
  if (tau == 0.0) return;
  for (int k = 1; k <= sys.n; ++k) out.v[k] += (0.5 * tau) * acc_start[k];
  wh_drift(sys, out, tau, flags);
  wh_kick(sys, out, 0.5 * tau, flags);
}

// g = x vx + y vy of planet k's star-centred sky-plane motion, and z (> 0 behind the star).
inline void sky_motion(const WhSystem& sys, const WhState& s, int k, double& g, double& z) {
  const Vec3 r = heliocentric(sys, s.r, k);
  const Vec3 v = heliocentric(sys, s.v, k);
  g = r.x * v.x + r.y * v.y;
  z = r.z;
}

// The same for every planet at once (running sums of the Jacobi-to-star transform).
inline void sky_motion_all(const WhSystem& sys, const WhState& s, double* g, double* z) {
  Vec3 sr{}, sv{};
  for (int k = 1; k <= sys.n; ++k) {
    const Vec3 r = s.r[k] + sr, v = s.v[k] + sv;
    g[k - 1] = r.x * v.x + r.y * v.y;
    z[k - 1] = r.z;
    sr += sys.frac[k] * s.r[k];
    sv += sys.frac[k] * s.v[k];
  }
}

// First guess of the crossing in [lo, hi] (g changes sign between x1 and x0): the root of
// the parabola through the last three labelled values of g when it has one in the bracket
// (error ~ h^3 g''', so Newton then needs one or two evaluations), else linear
// interpolation between the last two.
double first_guess(double x2, double g2, double x1, double g1, double x0, double g0, double lo, double hi) {
  const double linear = x1 + (x0 - x1) * g1 / (g1 - g0);
  if (!std::isfinite(x2)) return linear;
  // Newton form: g(x) = g0 + d1 (x - x0) + d2 (x - x0)(x - x1).
  const double d1 = (g0 - g1) / (x0 - x1);
  const double d2 = (d1 - (g1 - g2) / (x1 - x2)) / (x0 - x2);
  // Solve g0 + d1 u + d2 u (u + x0 - x1) = 0 for u = x - x0 by Newton from the linear guess.
  double u = linear - x0;
  for (int it = 0; it < 4; ++it) {
    const double f = g0 + d1 * u + d2 * u * (u + x0 - x1);
    const double fp = d1 + d2 * (2.0 * u + x0 - x1);
    if (!(std::fabs(fp) > 0.0)) return linear;
    u -= f / fp;
  }
  const double x = x0 + u;
  return (x >= lo && x <= hi && std::isfinite(x)) ? x : linear;
}

// Newton's method on g(tau) = 0, each evaluation a partial step from the real state at
// the grid point; g' = vx^2 + vy^2 + x ax + y ay with the two-body acceleration (the
// planets' pull changes g' by a fraction ~ m/M, which only slows convergence from
// quadratic to a ratio ~ m/M per iteration). Falls back to bisection on [lo, hi] (the
// detection bracket) if Newton wanders off.
bool refine_conjunction(const WhSystem& sys, const WhState& real, const Vec3* acc_real, int k, double tau0, double lo,
                        double hi, double tol, double& tau, double& z, WhFlags& flags) {
  WhState w;
  const double gm_rel = sys.gm_star * (1.0 + sys.mu[k]);
  tau = tau0;
  for (int it = 0; it < 30; ++it) {
    partial_from(sys, real, acc_real, tau, w, flags);
    const Vec3 r = heliocentric(sys, w.r, k);
    const Vec3 v = heliocentric(sys, w.v, k);
    const double g = r.x * v.x + r.y * v.y;
    const double rn = norm(r);
    const double s = -gm_rel / (rn * rn * rn);
    const double gp = v.x * v.x + v.y * v.y + s * (r.x * r.x + r.y * r.y);
    z = r.z;
    if (!(gp > 0.0)) break;
    const double dtau = g / gp;
    tau -= dtau;
    // After an update d the error left is ~ K d^2 + delta d, with K = g''/(2 g') <~ 4/day
    // (n of a 1.5-day orbit) and delta <~ 1e-3 the relative error of the two-body g'; so
    // |d| <= sqrt(1e-2 tol) (1e-5 d for the default tol) leaves less than tol.
    if (std::fabs(dtau) <= std::max(tol, std::sqrt(1e-2 * tol))) return true;
    if (!(tau > lo - (hi - lo) && tau < hi + (hi - lo))) break;
  }
  // Bisection on the bracket (g(lo) < 0 <= g(hi) by detection, up to the label shift).
  double a = lo, b = hi;
  for (int it = 0; it < 200 && b - a > tol; ++it) {
    const double m = 0.5 * (a + b);
    double g;
    partial_from(sys, real, acc_real, m, w, flags);
    sky_motion(sys, w, k, g, z);
    if (g < 0.0) a = m;
    else b = m;
  }
  tau = 0.5 * (a + b);
  partial_from(sys, real, acc_real, tau, w, flags);
  double g;
  sky_motion(sys, w, k, g, z);
  return std::isfinite(tau);
}

NbodyStatus status_of(const WhFlags& flags) {
  if (flags.drift == DriftResult::kFailed) return NbodyStatus::kKeplerFailed;
  if (flags.drift == DriftResult::kUnbound) return NbodyStatus::kUnbound;
  if (flags.encounter) return NbodyStatus::kCloseEncounter;
  return NbodyStatus::kOk;
}

}  // namespace

std::string failure_message(NbodyStatus status, const PreparedSystem& ps, const WhFlags& flags, double t_days) {
  switch (status) {
    case NbodyStatus::kUnbound:
      if (flags.drift_planet > 0)
        return fmt::format("planet {}'s Jacobi orbit became unbound (hyperbolic: ejection or a close encounter) by t = {:.6g}",
                           ps.order[flags.drift_planet - 1], t_days);
      return fmt::format("a planet's Jacobi orbit became unbound (hyperbolic) by t = {:.6g}", t_days);
    case NbodyStatus::kKeplerFailed:
      return fmt::format("the universal Kepler equation did not converge at t = {:.6g}", t_days);
    case NbodyStatus::kCloseEncounter:
      return fmt::format("planets {} and {} came within {} mutual Hill radii at t = {:.6g}",
                         ps.order[flags.pair_i - 1], ps.order[flags.pair_j - 1],
                         std::sqrt(ps.sys.encounter_r2[flags.pair_i][flags.pair_j]) /
                             (std::cbrt((ps.sys.mu[flags.pair_i] + ps.sys.mu[flags.pair_j]) / 3.0) * 0.5 *
                              (ps.a_au[flags.pair_i - 1] + ps.a_au[flags.pair_j - 1])),
                         t_days);
    default: return fmt::format("integration failed at t = {:.6g}", t_days);
  }
}

PassResult wisdom_holman_pass(const PassRequest& rq) {
  const PreparedSystem& ps = *rq.ps;
  const WhSystem& sys = ps.sys;
  const NbodyOptions& opt = *rq.options;
  const int n = sys.n;
  const int corrector = opt.corrector_order;
  const double h = rq.h;
  const double hs = rq.direction * h;
  PassResult res;

  long long nsteps = static_cast<long long>(std::ceil(rq.span / h));
  if (rq.rv_count > 0 || rq.span > 0.0) nsteps = std::max(nsteps, 1LL);
  if (nsteps == 0) return res;

  WhFlags flags;
  WhState y;
  copy_state(y, ps.initial, n);
  // One mapping (that of step +h) serves both directions: KDK(-h) is KDK(h)^-1.
  if (corrector != 0) corrector_to_mapping(sys, y, h, corrector, flags);
  // With the corrector, mapping state i stands for the time t_i + h/2 (Q^-1 is a half
  // drift and a half kick); detection brackets use these labels.
  const double label_offset = corrector != 0 ? 0.5 * h : 0.0;
  WhStepper stepper;
  stepper.reset(&sys, y);

  double g_prev[kMaxPlanets], z_prev[kMaxPlanets], g_now[kMaxPlanets], z_now[kMaxPlanets];
  double g_prev2[kMaxPlanets] = {};  // g two labels back, for a quadratic first guess
  bool any_transits = false;
  for (int j = 0; j < n; ++j) any_transits = any_transits || rq.wants_transits[j];
  sky_motion_all(sys, ps.initial, g_prev, z_prev);
  double label_prev = 0.0;  // the epoch itself (real state)
  double label_prev2 = std::numeric_limits<double>::quiet_NaN();

  std::size_t next_rv = 0;
  WhState real, w;
  Vec3 acc_real[kMaxBodies];
  for (long long i = 1; i <= nsteps; ++i) {
    stepper.step(hs, flags);
    ++res.steps;
    const double tn = static_cast<double>(i) * hs;  // relative to t0
    if (const NbodyStatus st = status_of(flags); st != NbodyStatus::kOk) {
      res.status = st;
      res.message = failure_message(st, ps, flags, rq.t0 + tn);
      return res;
    }
    const double label = tn + label_offset;
    bool real_ready = false;
    auto need_real = [&]() {
      if (real_ready) return;
      copy_state(real, stepper.state(), n);
      if (corrector != 0) corrector_to_real(sys, real, h, corrector, flags);
      interaction_acceleration(sys, real.r, acc_real, flags);
      real_ready = true;
    };
    // Velocities in (t_{i-1}, t_i] (forward) or [t_i, t_{i-1}) (backward), from t_i.
    while (next_rv < rq.rv_count) {
      const std::size_t idx = rq.rv_index[next_rv];
      const double trel = rq.rv_times[idx] - rq.t0;
      if (rq.direction > 0 ? trel > tn : trel < tn) break;
      need_real();
      partial_from(sys, real, acc_real, trel - tn, w, flags);
      rq.rv_out[idx] = star_barycentric(sys, w.v).z * kMetresPerSecondPerAuPerDay;
      ++next_rv;
    }
    if (any_transits) sky_motion_all(sys, stepper.state(), g_now, z_now);
    for (int j = 0; any_transits && j < n; ++j) {
      if (!rq.wants_transits[j]) continue;
      const double g = g_now[j], z = z_now[j];
      const bool crossed = rq.direction > 0 ? (g_prev[j] < 0.0 && g >= 0.0) : (g < 0.0 && g_prev[j] >= 0.0);
      if (crossed && (z < 0.0 || z_prev[j] < 0.0)) {
        Detection d;
        d.tn = tn;
        d.lo = std::min(label_prev, label) - tn;
        d.hi = std::max(label_prev, label) - tn;
        d.guess = first_guess(label_prev2 - tn, g_prev2[j], label_prev - tn, g_prev[j], label - tn, g, d.lo, d.hi);
        d.approx_time = rq.t0 + (tn + d.guess);
        d.state = rq.state_pool->size();
        const WhState& st = stepper.state();
        rq.state_pool->insert(rq.state_pool->end(), st.r + 1, st.r + n + 1);
        rq.state_pool->insert(rq.state_pool->end(), st.v + 1, st.v + n + 1);
        rq.detections[j].push_back(d);
      }
      g_prev2[j] = g_prev[j];
      g_prev[j] = g;
      z_prev[j] = z;
    }
    if (real_ready) {
      if (const NbodyStatus st = status_of(flags); st != NbodyStatus::kOk) {
        res.status = st;
        res.message = failure_message(st, ps, flags, rq.t0 + tn);
        return res;
      }
    }
    label_prev2 = label_prev;
    label_prev = label;
  }
  return res;
}

bool refine_detection(const PreparedSystem& ps, const NbodyOptions& options, double h, int j, const Detection& d,
                      const std::vector<Vec3>& pool, double t0, double& t_out, WhFlags& flags) {
  const WhSystem& sys = ps.sys;
  const int n = sys.n;
  WhState real;
  for (int k = 1; k <= n; ++k) {
    real.r[k] = pool[d.state + static_cast<std::size_t>(k - 1)];
    real.v[k] = pool[d.state + static_cast<std::size_t>(n + k - 1)];
  }
  if (options.corrector_order != 0) corrector_to_real(sys, real, h, options.corrector_order, flags);
  Vec3 acc[kMaxBodies];
  interaction_acceleration(sys, real.r, acc, flags);
  double tau, z;
  if (!refine_conjunction(sys, real, acc, j + 1, d.guess, d.lo, d.hi, options.transit_tolerance_days, tau, z, flags) ||
      !(z < 0.0))
    return false;
  t_out = t0 + (d.tn + tau);
  return true;
}

}  // namespace dynamics

namespace {

using dynamics::kMaxPlanets;

struct Scratch {
  std::vector<std::size_t> order, forward_rv, backward_rv, index;
  std::vector<double> forward[kMaxPlanets], backward[kMaxPlanets], merged;
  std::vector<dynamics::Detection> forward_det[kMaxPlanets], backward_det[kMaxPlanets], merged_det;
  std::vector<dynamics::Vec3> pool;
};

Scratch& scratch() {
  thread_local Scratch s;
  return s;
}

void fail(NbodyObservables& out, NbodyStatus status, std::string message) {
  out.status = status;
  out.message = std::move(message);
  std::fill(out.star_velocity_m_s.begin(), out.star_velocity_m_s.end(), std::numeric_limits<double>::quiet_NaN());
  for (auto& v : out.transit_times_days) std::fill(v.begin(), v.end(), std::numeric_limits<double>::quiet_NaN());
}

// Matches the conjunctions of one planet (times in order, approximate are fine) to its
// requested epochs (nbody.h): index[k] is the conjunction of epochs[k].
bool match_epochs(const std::vector<double>& all, double t_conj, double period, const std::vector<long long>& epochs,
                  std::vector<std::size_t>& index, std::string& message, int planet) {
  if (all.empty()) {
    message = fmt::format("planet {}: no transit (sky-plane conjunction) found in the integrated span", planet);
    return false;
  }
  std::size_t i0 = 0;
  for (std::size_t i = 1; i < all.size(); ++i)
    if (std::fabs(all[i] - t_conj) < std::fabs(all[i0] - t_conj)) i0 = i;
  long long emin = 0, emax = 0;
  for (long long e : epochs) {
    emin = std::min(emin, e);
    emax = std::max(emax, e);
  }
  const long long first = -static_cast<long long>(i0);
  const long long last = static_cast<long long>(all.size()) - 1 - static_cast<long long>(i0);
  if (emin < first || emax > last) {
    message = fmt::format("planet {}: transit epoch {} was not reached (the integration found epochs {} to {})", planet,
                          emin < first ? emin : emax, first, last);
    return false;
  }
  const auto lo = static_cast<std::size_t>(static_cast<long long>(i0) + emin);
  const auto hi = static_cast<std::size_t>(static_cast<long long>(i0) + emax);
  for (std::size_t i = lo; i < hi; ++i) {
    const double gap = all[i + 1] - all[i];
    if (!(gap > 0.5 * period && gap < 1.5 * period)) {
      message = fmt::format("planet {}: transits at {:.6f} and {:.6f} are {:.4g} periods apart (a conjunction missed "
                            "or doubled); epochs cannot be counted",
                            planet, all[i], all[i + 1], gap / period);
      return false;
    }
  }
  index.resize(epochs.size());
  for (std::size_t k = 0; k < epochs.size(); ++k)
    index[k] = static_cast<std::size_t>(static_cast<long long>(i0) + epochs[k]);
  return true;
}

// Time span to cover: the velocities, and each requested epoch's linear prediction and
// T_conj (epoch 0 is found there) with one period to spare; which planets need transits.
void plan_span(const NbodySystem& system, const dynamics::PreparedSystem& ps, std::span<const double> rv_times,
               const std::vector<std::vector<long long>>& transit_epochs, double& t_lo, double& t_hi, bool* wants) {
  for (double t : rv_times) {
    t_lo = std::min(t_lo, t);
    t_hi = std::max(t_hi, t);
  }
  for (int j = 0; j < ps.sys.n; ++j) {
    const auto p = static_cast<std::size_t>(ps.order[j]);
    wants[j] = false;
    if (p >= transit_epochs.size() || transit_epochs[p].empty()) continue;
    wants[j] = true;
    const NbodyPlanet& pl = system.planets[p];
    long long emin = 0, emax = 0;
    for (long long e : transit_epochs[p]) {
      emin = std::min(emin, e);
      emax = std::max(emax, e);
    }
    t_lo = std::min(t_lo, pl.t_conj_days + static_cast<double>(emin - 1) * pl.period_days);
    t_hi = std::max(t_hi, pl.t_conj_days + static_cast<double>(emax + 1) * pl.period_days);
  }
}

// Transit times of the requested epochs of every planet from the passes' conjunctions:
// counted and matched (match_epochs), then (WH) refined. "" or the failure message.
std::string fill_transits(const NbodySystem& system, const dynamics::PreparedSystem& ps, const NbodyOptions& options,
                          double h, const std::vector<std::vector<long long>>& transit_epochs, const bool* wants,
                          Scratch& sc, NbodyObservables& out) {
  const bool reference = options.integrator == NbodyIntegrator::kReference;
  const double t0 = system.osculating_epoch_days;
  for (int j = 0; j < ps.sys.n; ++j) {
    if (!wants[j]) continue;
    const auto p = static_cast<std::size_t>(ps.order[j]);
    // Conjunctions in time order: the backward pass's reversed, then the forward pass's.
    if (reference) {
      sc.merged.assign(sc.backward[j].rbegin(), sc.backward[j].rend());
      sc.merged.insert(sc.merged.end(), sc.forward[j].begin(), sc.forward[j].end());
    } else {
      sc.merged_det.assign(sc.backward_det[j].rbegin(), sc.backward_det[j].rend());
      sc.merged_det.insert(sc.merged_det.end(), sc.forward_det[j].begin(), sc.forward_det[j].end());
      sc.merged.clear();
      for (const dynamics::Detection& d : sc.merged_det) sc.merged.push_back(d.approx_time);
    }
    std::string message;
    if (!match_epochs(sc.merged, system.planets[p].t_conj_days, system.planets[p].period_days, transit_epochs[p],
                      sc.index, message, static_cast<int>(p)))
      return message;
    for (std::size_t k = 0; k < sc.index.size(); ++k) {
      if (reference) {
        out.transit_times_days[p][k] = sc.merged[sc.index[k]];
        continue;
      }
      dynamics::WhFlags flags;
      double t;
      if (!dynamics::refine_detection(ps, options, h, j, sc.merged_det[sc.index[k]], sc.pool, t0, t, flags))
        return fmt::format("planet {}: the conjunction of epoch {} near t = {:.6f} is not a transit (planet behind the "
                           "star) or could not be refined",
                           p, transit_epochs[p][k], sc.merged_det[sc.index[k]].approx_time);
      out.transit_times_days[p][k] = t;
    }
  }
  return "";
}

}  // namespace

NbodyObservables compute_observables(const NbodySystem& system, std::span<const double> rv_times_days,
                                     const std::vector<std::vector<long long>>& transit_epochs,
                                     const NbodyOptions& options) {
  NbodyObservables out;
  compute_observables(system, rv_times_days, transit_epochs, options, out);
  return out;
}

void compute_observables(const NbodySystem& system, std::span<const double> rv_times_days,
                         const std::vector<std::vector<long long>>& transit_epochs, const NbodyOptions& options,
                         NbodyObservables& out) {
  const std::size_t np = system.planets.size();
  out.star_velocity_m_s.assign(rv_times_days.size(), std::numeric_limits<double>::quiet_NaN());
  out.transit_times_days.resize(np);
  for (std::size_t p = 0; p < np; ++p)
    out.transit_times_days[p].assign(p < transit_epochs.size() ? transit_epochs[p].size() : 0,
                                     std::numeric_limits<double>::quiet_NaN());
  out.steps = 0;
  out.step_days = std::numeric_limits<double>::quiet_NaN();
  if (std::string why = system.Validate(); !why.empty()) return fail(out, NbodyStatus::kInvalidSystem, why);
  if (std::string why = options.Validate(); !why.empty()) return fail(out, NbodyStatus::kInvalidSystem, why);
  if (transit_epochs.size() > np)
    return fail(out, NbodyStatus::kInvalidSystem,
                fmt::format("transit_epochs: {} lists for {} planets", transit_epochs.size(), np));
  for (double t : rv_times_days)
    if (!std::isfinite(t)) return fail(out, NbodyStatus::kInvalidSystem, "rv_times_days: a time is not finite");

  dynamics::PreparedSystem ps;
  dynamics::prepare_system(system, options.encounter_hill_radii, ps);
  const int n = ps.sys.n;
  const double t0 = system.osculating_epoch_days;
  const double h = nbody_step_days(system, options);
  out.step_days = h;
  const double p_in = *std::min_element(ps.period, ps.period + n);
  if (!(h <= 0.5 * p_in))
    return fail(out, NbodyStatus::kInvalidSystem,
                fmt::format("step_days = {:.6g}: must be at most half the innermost period ({:.6g} d)", h, p_in));

  double t_lo = t0, t_hi = t0;
  bool wants[kMaxPlanets] = {};
  plan_span(system, ps, rv_times_days, transit_epochs, t_lo, t_hi, wants);
  const double total_steps = std::ceil((t_hi - t0) / h) + std::ceil((t0 - t_lo) / h);
  if (!(total_steps <= static_cast<double>(options.max_steps)))
    return fail(out, NbodyStatus::kTooManySteps,
                fmt::format("the span {:.6g} to {:.6g} needs {:.3g} steps of {:.4g} d; max_steps = {}", t_lo, t_hi,
                            total_steps, h, options.max_steps));

  Scratch& sc = scratch();
  sc.order.resize(rv_times_days.size());
  for (std::size_t i = 0; i < sc.order.size(); ++i) sc.order[i] = i;
  std::sort(sc.order.begin(), sc.order.end(),
            [&](std::size_t a, std::size_t b) { return rv_times_days[a] < rv_times_days[b]; });
  sc.forward_rv.clear();
  sc.backward_rv.clear();
  for (std::size_t i : sc.order)
    if (rv_times_days[i] >= t0) sc.forward_rv.push_back(i);
  for (auto it = sc.order.rbegin(); it != sc.order.rend(); ++it)
    if (rv_times_days[*it] < t0) sc.backward_rv.push_back(*it);
  for (int j = 0; j < n; ++j) {
    sc.forward[j].clear();
    sc.backward[j].clear();
    sc.forward_det[j].clear();
    sc.backward_det[j].clear();
  }
  sc.pool.clear();

  dynamics::PassRequest rq;
  rq.ps = &ps;
  rq.options = &options;
  rq.t0 = t0;
  rq.h = h;
  rq.wants_transits = wants;
  rq.rv_times = rv_times_days;
  rq.rv_out = out.star_velocity_m_s.data();
  const bool reference = options.integrator == NbodyIntegrator::kReference;
  for (int dir : {+1, -1}) {
    rq.direction = dir;
    rq.span = dir > 0 ? t_hi - t0 : t0 - t_lo;
    rq.rv_index = dir > 0 ? sc.forward_rv.data() : sc.backward_rv.data();
    rq.rv_count = dir > 0 ? sc.forward_rv.size() : sc.backward_rv.size();
    rq.transits = dir > 0 ? sc.forward : sc.backward;
    rq.detections = dir > 0 ? sc.forward_det : sc.backward_det;
    rq.state_pool = &sc.pool;
    if (rq.span <= 0.0 && rq.rv_count == 0) continue;
    const dynamics::PassResult r = reference ? dynamics::reference_pass(rq) : dynamics::wisdom_holman_pass(rq);
    out.steps += r.steps;
    if (r.status != NbodyStatus::kOk) return fail(out, r.status, r.message);
  }

  if (std::string why = fill_transits(system, ps, options, h, transit_epochs, wants, sc, out); !why.empty())
    return fail(out, NbodyStatus::kEpochNotReached, why);
  out.status = NbodyStatus::kOk;
  out.message.clear();
}

}  // namespace apsides
