// Hill, AMD and MEGNO stability criteria (see include/apsides/stability.h for the papers).
#include "apsides/stability.h"

#include <boost/math/tools/roots.hpp>
#include <fmt/format.h>

#include <algorithm>
#include <atomic>
#include <cmath>
#include <random>
#include <thread>

#include "dynamics/observables_internal.h"

namespace apsides {

using dynamics::PreparedSystem;
using dynamics::Vec3;

namespace {

constexpr double kTwoSqrt3 = 3.46410161513775458705;
// Numerical constant of the first-order MMR overlap criterion (Petit, Laskar & Boue 2017;
// from memory, checked through the 1.46 eps^(2/7) circular limit in the tests).
constexpr double kMmrR = 0.80199;

PreparedSystem prepared(const NbodySystem& system) {
  PreparedSystem ps;
  dynamics::prepare_system(system, 0.0, ps);
  return ps;
}

}  // namespace

HillReport mutual_hill_separations(const NbodySystem& system) {
  HillReport rep;
  const PreparedSystem ps = prepared(system);
  const int n = ps.sys.n;
  for (int j = 0; j + 1 < n; ++j) {
    HillPair p;
    p.inner = ps.order[j];
    p.outer = ps.order[j + 1];
    const double mu1 = ps.sys.mu[j + 1], mu2 = ps.sys.mu[j + 2];
    const double a1 = ps.a_au[j], a2 = ps.a_au[j + 1];
    p.mutual_hill_radius_au = std::cbrt((mu1 + mu2) / 3.0) * 0.5 * (a1 + a2);
    p.separation_hill = (a2 - a1) / p.mutual_hill_radius_au;
    p.beyond_two_sqrt3 = p.separation_hill > kTwoSqrt3;
    // Gladman 1993, Eq. 21 (coplanar, eccentric).
    const double alpha = mu1 + mu2;
    const double g1 = std::sqrt(1.0 - ps.ecc[j] * ps.ecc[j]), g2 = std::sqrt(1.0 - ps.ecc[j + 1] * ps.ecc[j + 1]);
    const double delta = std::sqrt(a2 / a1);
    const double lhs = std::pow(alpha, -3.0) * (mu1 + mu2 / (delta * delta)) *
                       (mu1 * g1 + mu2 * g2 * delta) * (mu1 * g1 + mu2 * g2 * delta);
    const double rhs = 1.0 + std::pow(3.0, 4.0 / 3.0) * mu1 * mu2 / std::pow(alpha, 4.0 / 3.0);
    p.gladman_ratio = lhs / rhs;
    p.hill_stable = p.gladman_ratio > 1.0;
    rep.min_separation_hill = std::min(rep.min_separation_hill, p.separation_hill);
    rep.all_beyond_two_sqrt3 = rep.all_beyond_two_sqrt3 && p.beyond_two_sqrt3;
    rep.all_hill_stable = rep.all_hill_stable && p.hill_stable;
    rep.pairs.push_back(p);
  }
  return rep;
}

double critical_amd(double alpha, double gamma) {
  // Least AMD (in units of Lambda') for which the orbits can touch: anti-aligned apsides,
  // a(1 + e) = a'(1 - e'), i.e. e' = 1 - alpha - alpha e. Minimising
  // gamma sqrt(alpha) (1 - sqrt(1 - e^2)) + 1 - sqrt(1 - e'^2) along that line gives
  // gamma sqrt(alpha) e / sqrt(1 - e^2) = alpha e' / sqrt(1 - e'^2), i.e.
  // e' = gamma e / sqrt(alpha (1 - e^2) + gamma^2 e^2); with the collision line this is
  // F(e) = alpha e + gamma e / sqrt(alpha (1 - e^2) + gamma^2 e^2) - 1 + alpha = 0
  // (Laskar & Petit 2017), F(0) = alpha - 1 < 0 < F(1) = 2 alpha.
  auto F = [&](double e) {
    return alpha * e + gamma * e / std::sqrt(alpha * (1.0 - e * e) + gamma * gamma * e * e) - 1.0 + alpha;
  };
  std::uintmax_t it = 200;
  const auto root = boost::math::tools::toms748_solve(F, 0.0, 1.0, F(0.0), F(1.0),
                                                      boost::math::tools::eps_tolerance<double>(50), it);
  const double e0 = 0.5 * (root.first + root.second);
  const double e1 = 1.0 - alpha - alpha * e0;
  return gamma * std::sqrt(alpha) * (1.0 - std::sqrt(1.0 - e0 * e0)) + 1.0 - std::sqrt(1.0 - e1 * e1);
}

double mmr_overlap_eccentricity(double alpha, double eps) {
  const double d = 1.0 - alpha;
  return 81.0 * std::pow(d, 5.0) / (512.0 * kMmrR * eps) - 32.0 * kMmrR * eps / (9.0 * d * d);
}

double critical_amd_mmr(double alpha, double gamma, double eps) {
  const double g = mmr_overlap_eccentricity(alpha, eps);
  if (!(g > 0.0)) return 0.0;
  const double gs = gamma * std::sqrt(alpha);
  return g * g * gs / (2.0 * (1.0 + gs));
}

AmdReport amd_stability(const NbodySystem& system) {
  AmdReport rep;
  const PreparedSystem ps = prepared(system);
  const int n = ps.sys.n;
  // Units G M_star = 1, masses in M_star: Lambda_k = mu_k sqrt(a_k).
  double lambda[dynamics::kMaxPlanets] = {};
  double sum_lambda = 0.0;
  Vec3 G{};
  for (int j = 0; j < n; ++j) {
    const NbodyPlanet& p = system.planets[static_cast<std::size_t>(ps.order[j])];
    lambda[j] = ps.sys.mu[j + 1] * std::sqrt(ps.a_au[j]);
    sum_lambda += lambda[j];
    // Orbit normal of the rotation R_z(Omega) R_x(i) R_z(w): (sin Omega sin i, -cos Omega sin i, cos i).
    const Vec3 normal{std::sin(p.node_rad) * std::sin(p.inclination_rad),
                      -std::cos(p.node_rad) * std::sin(p.inclination_rad), std::cos(p.inclination_rad)};
    G += (lambda[j] * std::sqrt(1.0 - ps.ecc[j] * ps.ecc[j])) * normal;
  }
  rep.amd = std::max(0.0, sum_lambda - dynamics::norm(G));
  rep.beta_star = rep.amd / lambda[0];
  rep.max_beta = rep.max_beta_mmr = 0.0;
  for (int j = 0; j + 1 < n; ++j) {
    AmdPair p;
    p.inner = ps.order[j];
    p.outer = ps.order[j + 1];
    p.alpha = ps.a_au[j] / ps.a_au[j + 1];
    p.gamma = ps.sys.mu[j + 1] / ps.sys.mu[j + 2];
    p.relative_amd = rep.amd / lambda[j + 1];
    p.critical_amd = critical_amd(p.alpha, p.gamma);
    p.critical_amd_mmr = critical_amd_mmr(p.alpha, p.gamma, ps.sys.mu[j + 1] + ps.sys.mu[j + 2]);
    p.beta = p.relative_amd / p.critical_amd;
    const double crit = std::min(p.critical_amd, p.critical_amd_mmr);
    p.beta_mmr = crit > 0.0 ? p.relative_amd / crit : std::numeric_limits<double>::infinity();
    rep.max_beta = std::max(rep.max_beta, p.beta);
    rep.max_beta_mmr = std::max(rep.max_beta_mmr, p.beta_mmr);
    rep.pairs.push_back(p);
  }
  rep.amd_stable = rep.beta_star < 1.0 && rep.max_beta < 1.0;
  rep.amd_stable_mmr = rep.beta_star < 1.0 && rep.max_beta_mmr < 1.0;
  return rep;
}

std::string MegnoOptions::Validate() const {
  if (!(std::isfinite(inner_orbits) && inner_orbits > 0.0 && inner_orbits <= 1e9))
    return fmt::format("inner_orbits = {}: must be in (0, 1e9]", inner_orbits);
  if (!(step_fraction > 0.0 && step_fraction <= 0.5))
    return fmt::format("step_fraction = {}: must be in (0, 0.5]", step_fraction);
  if (!(std::isfinite(encounter_hill_radii) && encounter_hill_radii >= 0.0))
    return fmt::format("encounter_hill_radii = {}: must be >= 0", encounter_hill_radii);
  if (!(regular_threshold > 0.0)) return fmt::format("regular_threshold = {}: must be > 0", regular_threshold);
  return "";
}

std::string MegnoResult::BriefReport() const {
  if (status == NbodyStatus::kNotRun || status == NbodyStatus::kInvalidSystem) return "MEGNO: " + message;
  return fmt::format("MEGNO: <Y> = {:.4g} after {:.6g} inner orbits ({:.6g} d); {}{}", mean_megno, inner_orbits_done,
                     time_days, survived ? (regular ? "survived, regular" : "survived, chaotic") : "did not survive: ",
                     survived ? "" : message);
}

MegnoResult megno(const NbodySystem& system, const MegnoOptions& options) {
  MegnoResult res;
  if (std::string why = system.Validate(); !why.empty()) {
    res.status = NbodyStatus::kInvalidSystem;
    res.message = why;
    return res;
  }
  if (std::string why = options.Validate(); !why.empty()) {
    res.status = NbodyStatus::kInvalidSystem;
    res.message = why;
    return res;
  }
  PreparedSystem ps;
  dynamics::prepare_system(system, options.encounter_hill_radii, ps);
  const int n = ps.sys.n;
  NbodyOptions step_options;
  step_options.step_fraction = options.step_fraction;
  const double h = nbody_step_days(system, step_options);
  const double p_in = ps.period[0];
  const auto nsteps = static_cast<long long>(std::ceil(options.inner_orbits * p_in / h));

  // Random initial direction (fixed seed: the result is reproducible).
  dynamics::WhTangent tan;
  std::mt19937_64 rng(options.seed);
  std::normal_distribution<double> normal(0.0, 1.0);
  double s2 = 0.0;
  for (int k = 1; k <= n; ++k) {
    tan.dr[k] = {normal(rng), normal(rng), normal(rng)};
    tan.dv[k] = {normal(rng), normal(rng), normal(rng)};
    s2 += dot(tan.dr[k], tan.dr[k]) + dot(tan.dv[k], tan.dv[k]);
  }
  double scale = 1.0 / std::sqrt(s2);
  for (int k = 1; k <= n; ++k) {
    tan.dr[k] = scale * tan.dr[k];
    tan.dv[k] = scale * tan.dv[k];
  }

  dynamics::WhStepper stepper;
  stepper.reset(&ps.sys, ps.initial);
  dynamics::WhFlags flags;
  double y = 0.0, mean_y = 0.0;
  res.status = NbodyStatus::kOk;
  res.survived = true;
  long long i = 1;
  for (; i <= nsteps; ++i) {
    stepper.step_tangent(h, tan, flags);
    if (flags.drift != dynamics::DriftResult::kOk || flags.encounter) {
      res.status = flags.drift == dynamics::DriftResult::kFailed ? NbodyStatus::kKeplerFailed
                   : flags.drift == dynamics::DriftResult::kUnbound ? NbodyStatus::kUnbound
                                                                    : NbodyStatus::kCloseEncounter;
      res.message = dynamics::failure_message(res.status, ps, flags, system.osculating_epoch_days + i * h);
      res.survived = false;
      break;
    }
    double norm2 = 0.0;
    for (int k = 1; k <= n; ++k) norm2 += dot(tan.dr[k], tan.dr[k]) + dot(tan.dv[k], tan.dv[k]);
    const double growth = 0.5 * std::log(norm2);  // ln(|delta_i| / |delta_{i-1}|), |delta_{i-1}| = 1
    scale = 1.0 / std::sqrt(norm2);
    for (int k = 1; k <= n; ++k) {
      tan.dr[k] = scale * tan.dr[k];
      tan.dv[k] = scale * tan.dv[k];
    }
    // Y_i = (2 / t_i) sum_k t_{k-1/2} ln(|delta_k| / |delta_{k-1}|), t_k = k h;
    // <Y>_i = (1 / i) sum_k Y_k.
    const double di = static_cast<double>(i);
    y = (di - 1.0) / di * y + 2.0 * (di - 0.5) / di * growth;
    mean_y = ((di - 1.0) * mean_y + y) / di;
    if (!std::isfinite(mean_y)) {
      res.status = NbodyStatus::kIntegratorFailed;
      res.message = "the tangent vector overflowed";
      res.survived = false;
      break;
    }
  }
  const long long done = std::min(i, nsteps);
  res.time_days = static_cast<double>(done) * h;
  res.inner_orbits_done = res.time_days / p_in;
  res.mean_megno = mean_y;
  res.regular = res.survived && mean_y < options.regular_threshold;
  if (res.survived) res.message.clear();
  return res;
}

std::string StabilityOptions::Validate() const {
  if (threads < 0) return fmt::format("threads = {}: must be >= 0", threads);
  return megno.Validate();
}

namespace {

DrawStability assess_one(const NbodySystem& system, const StabilityOptions& options, std::size_t index) {
  DrawStability d;
  if (!system.Validate().empty()) return d;
  d.valid = true;
  if (options.hill) {
    if (system.planets.size() < 2) {
      d.hill_two_sqrt3 = d.hill_gladman = true;
    } else {
      const HillReport h = mutual_hill_separations(system);
      d.hill_two_sqrt3 = h.all_beyond_two_sqrt3;
      d.hill_gladman = h.all_hill_stable;
      d.min_separation_hill = h.min_separation_hill;
    }
  }
  if (options.amd) {
    const AmdReport a = amd_stability(system);
    d.amd = a.amd_stable;
    d.amd_mmr = a.amd_stable_mmr;
    d.max_amd_beta = std::max(a.max_beta, a.beta_star);
  }
  if (options.nbody) {
    MegnoOptions mo = options.megno;
    mo.seed = options.megno.seed + index;  // a different, reproducible direction per draw
    const MegnoResult m = megno(system, mo);
    d.survived = m.survived;
    d.megno_regular = m.regular;
    d.mean_megno = m.mean_megno;
  }
  return d;
}

}  // namespace

StabilitySummary assess_stability(std::span<const NbodySystem> draws, const StabilityOptions& options) {
  StabilitySummary s;
  if (std::string why = options.Validate(); !why.empty()) {
    s.message = why;
    return s;
  }
  s.draws = draws.size();
  s.per_draw.assign(draws.size(), DrawStability{});
  unsigned threads = options.threads == 0 ? std::max(1u, std::thread::hardware_concurrency())
                                          : static_cast<unsigned>(options.threads);
  threads = static_cast<unsigned>(std::min<std::size_t>(threads, std::max<std::size_t>(1, draws.size())));
  std::atomic<std::size_t> next{0};
  auto worker = [&]() {
    for (std::size_t i = next++; i < draws.size(); i = next++) s.per_draw[i] = assess_one(draws[i], options, i);
  };
  if (threads <= 1) {
    worker();
  } else {
    std::vector<std::thread> pool;
    for (unsigned t = 0; t < threads; ++t) pool.emplace_back(worker);
    for (auto& t : pool) t.join();
  }
  if (draws.empty()) {
    s.message = "no draws";
    return s;
  }
  std::size_t n2 = 0, ng = 0, na = 0, nm = 0, ns = 0, nr = 0;
  for (const DrawStability& d : s.per_draw) {
    if (!d.valid) ++s.invalid_draws;
    n2 += d.hill_two_sqrt3;
    ng += d.hill_gladman;
    na += d.amd;
    nm += d.amd_mmr;
    ns += d.survived;
    nr += d.megno_regular;
  }
  const double N = static_cast<double>(draws.size());
  if (options.hill) {
    s.fraction_hill_two_sqrt3 = static_cast<double>(n2) / N;
    s.fraction_hill_gladman = static_cast<double>(ng) / N;
  }
  if (options.amd) {
    s.fraction_amd = static_cast<double>(na) / N;
    s.fraction_amd_mmr = static_cast<double>(nm) / N;
  }
  if (options.nbody) {
    s.fraction_survived = static_cast<double>(ns) / N;
    s.fraction_megno_regular = static_cast<double>(nr) / N;
  }
  s.message.clear();
  return s;
}

std::string StabilitySummary::BriefReport() const {
  if (!message.empty()) return "stability: " + message;
  auto pct = [](double f) { return std::isnan(f) ? std::string("-") : fmt::format("{:.1f}%", 100.0 * f); };
  return fmt::format("stability of {} draws: Hill 2sqrt3 {}, Gladman {}, AMD {}, AMD+MMR {}, survived {}, MEGNO regular {}",
                     draws, pct(fraction_hill_two_sqrt3), pct(fraction_hill_gladman), pct(fraction_amd),
                     pct(fraction_amd_mmr), pct(fraction_survived), pct(fraction_megno_regular));
}

std::string StabilitySummary::FullReport() const {
  std::string out = BriefReport() + "\n";
  if (invalid_draws > 0) out += fmt::format("  {} invalid draws counted as unstable\n", invalid_draws);
  out += "  A stable-looking result is not proof of stability: the criteria are necessary conditions\n"
         "  (Hill, AMD) or finite-time tests (survival, MEGNO).\n";
  return out;
}

}  // namespace apsides
