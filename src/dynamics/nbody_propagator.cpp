// NbodyPropagator: a Cartesian state carried in time by the WH map or the reference
// integrator (for checks: Kepler orbits, conservation laws, figures).
#include <boost/numeric/odeint.hpp>

#include <cmath>
#include <vector>

#include "apsides/nbody.h"
#include "dynamics/wh_core.h"

namespace apsides {

using dynamics::Vec3;

struct NbodyPropagator::Impl {
  NbodyOptions options;
  dynamics::WhSystem sys;
  dynamics::WhStepper stepper;
  dynamics::WhState current;  // real Jacobi state at t_cur (WH)
  double star_mass = 1.0;
  double t0 = 0.0, h = 0.0, t_cur = 0.0;
  long long grid = 0;  // WH mapping state index
  Vec3 com_r{}, com_v{};
  int n = 0;
  bool reference = false;
  std::vector<double> y;  // reference: barycentric positions then velocities
  NbodyStatus status = NbodyStatus::kOk;

  void newton(const std::vector<double>& s, std::vector<double>& d) const {
    const int nb = n + 1;
    const std::size_t vo = static_cast<std::size_t>(3 * nb);
    for (std::size_t i = 0; i < vo; ++i) {
      d[i] = s[vo + i];
      d[vo + i] = 0.0;
    }
    for (int a = 0; a < nb; ++a)
      for (int b = a + 1; b < nb; ++b) {
        const auto ia = static_cast<std::size_t>(3 * a), ib = static_cast<std::size_t>(3 * b);
        double dx[3], r2 = 0.0;
        for (int c = 0; c < 3; ++c) {
          dx[c] = s[ib + static_cast<std::size_t>(c)] - s[ia + static_cast<std::size_t>(c)];
          r2 += dx[c] * dx[c];
        }
        const double inv3 = 1.0 / (r2 * std::sqrt(r2));
        for (int c = 0; c < 3; ++c) {
          d[vo + ia + static_cast<std::size_t>(c)] += sys.gm[b] * inv3 * dx[c];
          d[vo + ib + static_cast<std::size_t>(c)] -= sys.gm[a] * inv3 * dx[c];
        }
      }
  }
};

NbodyPropagator::NbodyPropagator(const CartesianState& start, double step_days, const NbodyOptions& options)
    : impl_(std::make_unique<Impl>()) {
  Impl& m = *impl_;
  m.options = options;
  m.n = static_cast<int>(start.mass_msun.size()) - 1;
  m.star_mass = start.mass_msun[0];
  m.t0 = m.t_cur = start.time_days;
  m.h = step_days;
  m.reference = options.integrator == NbodyIntegrator::kReference;
  double mu[dynamics::kMaxPlanets], a[dynamics::kMaxPlanets];
  double mtot = 0.0;
  Vec3 x[dynamics::kMaxBodies], v[dynamics::kMaxBodies];
  for (int b = 0; b <= m.n; ++b) {
    const auto i = static_cast<std::size_t>(b);
    x[b] = {start.position_au[i][0], start.position_au[i][1], start.position_au[i][2]};
    v[b] = {start.velocity_au_per_day[i][0], start.velocity_au_per_day[i][1], start.velocity_au_per_day[i][2]};
    m.com_r += start.mass_msun[i] * x[b];
    m.com_v += start.mass_msun[i] * v[b];
    mtot += start.mass_msun[i];
    if (b > 0) mu[b - 1] = start.mass_msun[i] / m.star_mass;
  }
  m.com_r = (1.0 / mtot) * m.com_r;
  m.com_v = (1.0 / mtot) * m.com_v;
  for (int b = 0; b <= m.n; ++b) {
    x[b] -= m.com_r;
    v[b] -= m.com_v;
  }
  dynamics::wh_setup(m.sys, m.star_mass, mu, m.n, 0.0, nullptr);
  dynamics::barycentric_to_jacobi(m.sys, x, m.current.r);
  dynamics::barycentric_to_jacobi(m.sys, v, m.current.v);
  for (int k = 1; k <= m.n; ++k)
    a[k - 1] = 1.0 / (2.0 / norm(m.current.r[k]) - dot(m.current.v[k], m.current.v[k]) / m.sys.kepler_gm[k]);
  dynamics::wh_setup(m.sys, m.star_mass, mu, m.n, options.encounter_hill_radii, a);
  if (m.reference) {
    m.y.assign(static_cast<std::size_t>(6 * (m.n + 1)), 0.0);
    for (int b = 0; b <= m.n; ++b) {
      const auto o = static_cast<std::size_t>(3 * b), vo = static_cast<std::size_t>(3 * (m.n + 1) + 3 * b);
      m.y[o] = x[b].x;
      m.y[o + 1] = x[b].y;
      m.y[o + 2] = x[b].z;
      m.y[vo] = v[b].x;
      m.y[vo + 1] = v[b].y;
      m.y[vo + 2] = v[b].z;
    }
    return;
  }
  dynamics::WhState y = m.current;
  dynamics::WhFlags flags;
  if (options.corrector_order != 0) dynamics::corrector_to_mapping(m.sys, y, m.h, options.corrector_order, flags);
  m.stepper.reset(&m.sys, y);
}

NbodyPropagator::~NbodyPropagator() = default;

double NbodyPropagator::time_days() const { return impl_->t_cur; }

NbodyStatus NbodyPropagator::advance_to(double t_days) {
  Impl& m = *impl_;
  if (m.status != NbodyStatus::kOk) return m.status;
  if (m.reference) {
    namespace odeint = boost::numeric::odeint;
    odeint::bulirsch_stoer<std::vector<double>> stepper(m.options.reference_abs_tol, m.options.reference_rel_tol);
    // Integrate in s = |t - t_cur| (dy/ds = direction f): odeint's Bulirsch–Stoer picks its
    // order badly for negative steps (see nbody_reference.cpp).
    const double direction = t_days >= m.t_cur ? 1.0 : -1.0;
    auto rhs = [&m, direction](const std::vector<double>& s, std::vector<double>& d, double) {
      m.newton(s, d);
      for (double& x : d) x *= direction;
    };
    if (t_days != m.t_cur)
      odeint::integrate_adaptive(stepper, rhs, m.y, 0.0, std::fabs(t_days - m.t_cur), 0.1 * m.h);
    m.t_cur = t_days;
    return m.status;
  }
  const long long target = std::llround((t_days - m.t0) / m.h);
  dynamics::WhFlags flags;
  while (m.grid < target) {
    m.stepper.step(m.h, flags);
    ++m.grid;
  }
  while (m.grid > target) {
    m.stepper.step(-m.h, flags);
    --m.grid;
  }
  dynamics::WhState real = m.stepper.state();
  if (m.options.corrector_order != 0) dynamics::corrector_to_real(m.sys, real, m.h, m.options.corrector_order, flags);
  dynamics::wh_partial_step(m.sys, real, t_days - (m.t0 + static_cast<double>(m.grid) * m.h), flags);
  m.current = real;
  m.t_cur = t_days;
  if (flags.drift == dynamics::DriftResult::kFailed) m.status = NbodyStatus::kKeplerFailed;
  else if (flags.drift == dynamics::DriftResult::kUnbound) m.status = NbodyStatus::kUnbound;
  else if (flags.encounter) m.status = NbodyStatus::kCloseEncounter;
  return m.status;
}

CartesianState NbodyPropagator::state() const {
  const Impl& m = *impl_;
  CartesianState s;
  s.time_days = m.t_cur;
  const int nb = m.n + 1;
  s.mass_msun.resize(static_cast<std::size_t>(nb));
  s.position_au.resize(static_cast<std::size_t>(nb));
  s.velocity_au_per_day.resize(static_cast<std::size_t>(nb));
  Vec3 x[dynamics::kMaxBodies], v[dynamics::kMaxBodies];
  if (m.reference) {
    for (int b = 0; b < nb; ++b) {
      const auto o = static_cast<std::size_t>(3 * b), vo = static_cast<std::size_t>(3 * nb + 3 * b);
      x[b] = {m.y[o], m.y[o + 1], m.y[o + 2]};
      v[b] = {m.y[vo], m.y[vo + 1], m.y[vo + 2]};
    }
  } else {
    dynamics::jacobi_to_barycentric(m.sys, m.current.r, x);
    dynamics::jacobi_to_barycentric(m.sys, m.current.v, v);
  }
  const double dt = m.t_cur - m.t0;
  for (int b = 0; b < nb; ++b) {
    const auto i = static_cast<std::size_t>(b);
    s.mass_msun[i] = m.star_mass * m.sys.mu[b];
    const Vec3 xr = x[b] + m.com_r + dt * m.com_v, vr = v[b] + m.com_v;
    s.position_au[i] = {xr.x, xr.y, xr.z};
    s.velocity_au_per_day[i] = {vr.x, vr.y, vr.z};
  }
  return s;
}

}  // namespace apsides
