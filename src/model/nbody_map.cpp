// The MAP fit of the N-body posterior (nbody_model.h: fit_nbody_map).
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <limits>
#include <nlopt.hpp>

#include "apsides/error.h"
#include "apsides/nbody_model.h"
#include "apsides/orbit.h"

namespace apsides {
namespace {
constexpr double kInf = std::numeric_limits<double>::infinity();

// ln posterior with the velocity term's linear parameters profiled (written into theta).
double objective(const PosteriorModel& m, std::span<double> theta, const std::vector<bool>& linear) {
  double l = 0.0;
  for (const auto& t : m.terms()) {
    l += t->log_likelihood_profiled(theta, linear);
    if (!std::isfinite(l)) return -kInf;
  }
  const double lp = m.log_prior(theta);
  return std::isfinite(lp) ? l + lp : -kInf;
}

std::vector<bool> linear_flags(const ParameterLayout& L) {
  std::vector<bool> f(L.n_params(), false);
  for (std::size_t i = 0; i < f.size(); ++i) {
    const ParameterBlock& b = L.block_at(i);
    f[i] = b.info(static_cast<int>(i - b.first())).linear;
  }
  return f;
}

struct Run {
  std::vector<double> theta;
  double value = -kInf;
  int evaluations = 0;
  bool converged = false;
};

// BOBYQA over the listed parameters (the linear ones are profiled at every evaluation).
Run optimise(const PosteriorModel& m, std::vector<double> theta, const std::vector<std::size_t>& which, int max_eval,
             double xtol) {
  const std::vector<bool> linear = linear_flags(m.layout());
  const std::size_t d = which.size();
  Run run;
  if (d == 0) {
    run.value = objective(m, theta, linear);
    run.theta = theta;
    return run;
  }
  std::vector<double> lo(d), hi(d), x(d), step(d);
  for (std::size_t a = 0; a < d; ++a) {
    const std::size_t i = which[a];
    const ParameterBlock& b = m.layout().block_at(i);
    const int slot = static_cast<int>(i - b.first());
    auto [l, h] = b.fit_bounds(slot, theta, m.priors().parameter[i]);
    if (b.kind() == BlockKind::kNbodyPlanet && slot == NbodyPlanetBlock::kMass) l = std::max(l, 1e-10);
    lo[a] = l, hi[a] = h;
    x[a] = std::clamp(theta[i], l, h);
    step[a] = std::min(b.fit_step(slot, theta, 0.0, h - l), 0.25 * (h - l));
    if (!(step[a] > 0.0)) step[a] = 1e-8;
  }
  struct Ctx {
    const PosteriorModel* m;
    std::vector<double>* th;
    const std::vector<std::size_t>* which;
    const std::vector<bool>* linear;
    int n = 0;
  } ctx{&m, &theta, &which, &linear};
  nlopt::opt o(nlopt::LN_BOBYQA, static_cast<unsigned>(d));
  o.set_lower_bounds(lo);
  o.set_upper_bounds(hi);
  o.set_initial_step(step);
  o.set_maxeval(max_eval);
  o.set_xtol_rel(xtol);
  o.set_ftol_abs(1e-8);
  o.set_max_objective(
      [](unsigned n, const double* xx, double*, void* data) -> double {
        Ctx* c = static_cast<Ctx*>(data);
        ++c->n;
        for (unsigned a = 0; a < n; ++a) (*c->th)[(*c->which)[a]] = xx[a];
        const double v = objective(*c->m, *c->th, *c->linear);
        return std::isfinite(v) ? v : -1e300;
      },
      &ctx);
  double best = -kInf;
  nlopt::result r = nlopt::FAILURE;
  try {
    r = o.optimize(x, best);
  } catch (const nlopt::roundoff_limited&) {
    r = nlopt::ROUNDOFF_LIMITED;
  } catch (const std::exception&) {
    r = nlopt::FAILURE;
  }
  for (std::size_t a = 0; a < d; ++a) theta[which[a]] = x[a];
  run.value = objective(m, theta, linear);
  run.theta = theta;
  run.evaluations = ctx.n;
  run.converged = r == nlopt::SUCCESS || r == nlopt::FTOL_REACHED || r == nlopt::XTOL_REACHED ||
                  r == nlopt::ROUNDOFF_LIMITED;
  return run;
}

// The free, non-linear parameters; with `only_planets`, those of the listed planet labels
// plus every planet's mass.
std::vector<std::size_t> free_parameters(const PosteriorModel& m, const std::vector<std::string>* only_planets) {
  std::vector<std::size_t> out;
  const std::vector<bool> linear = linear_flags(m.layout());
  for (std::size_t i = 0; i < m.n_params(); ++i) {
    if (linear[i] || m.priors().parameter[i].kind == PriorKind::kFixed) continue;
    const ParameterBlock& b = m.layout().block_at(i);
    if (only_planets != nullptr) {
      if (b.kind() != BlockKind::kNbodyPlanet) continue;
      const bool listed = std::find(only_planets->begin(), only_planets->end(), b.label()) != only_planets->end();
      if (!listed && static_cast<int>(i - b.first()) != NbodyPlanetBlock::kMass) continue;
    }
    out.push_back(i);
  }
  return out;
}

// Perturber period candidates from the TTVs of the transiting planet with most times.
std::vector<double> perturber_candidates(const NbodyProblem& pb) {
  const double dt = pb.transits.reference_epoch_bjd - pb.reference_epoch_bjd;
  std::size_t best_n = 0;
  std::vector<double> out;
  for (const NbodySeed& s : pb.seeds) {
    if (!s.transiting) continue;
    const TransitData td = pb.transits.for_planet(s.label);
    if (td.size() <= best_n) continue;
    std::vector<double> t(td.time_days);
    for (double& x : t) x += dt;
    const double pt = ttv_period_days(td.epoch, t, td.uncertainty_days, s.period_days);
    if (!std::isfinite(pt)) continue;
    best_n = td.size();
    out = super_period_perturber_periods(s.period_days, pt, 4);
  }
  return out;
}

NbodyFitResult make_result(const NbodyProblem& pb, const NbodyPosterior& post, const Run& best) {
  NbodyFitResult r;
  const ParameterLayout& L = post.model.layout();
  r.names = L.names();
  r.units = L.units();
  r.theta = best.theta;
  r.log_posterior = best.value;
  r.log_likelihood = post.model.log_likelihood(best.theta);
  r.star_mass_msun = pb.star_mass_msun;
  r.reference_epoch_bjd = pb.reference_epoch_bjd;
  r.osculating_epoch_bjd = pb.reference_epoch_bjd + pb.osculating_epoch_days;
  for (std::size_t p = 0; p < post.signal->planets().size(); ++p) {
    const NbodyPlanet q = post.signal->planets()[p]->planet(best.theta);
    r.planet_labels.push_back(post.signal->planets()[p]->label());
    r.mass_mearth.push_back(msun_to_mearth(q.mass_ratio * pb.star_mass_msun));
    r.period_days.push_back(q.period_days);
    r.eccentricity.push_back(q.ecc());
    r.transiting.push_back(pb.seeds.at(p).transiting);
  }
  return r;
}
}  // namespace

std::string NbodyFitOptions::Validate() const {
  if (max_evaluations < 100) return fmt::format("max_evaluations = {}: must be >= 100", max_evaluations);
  if (!(xtol_rel > 0.0)) return fmt::format("xtol_rel = {}: must be > 0", xtol_rel);
  if (mass_starts < 1 || mass_starts > 4) return fmt::format("mass_starts = {}: must be 1 .. 4", mass_starts);
  return "";
}

NbodyFitResult fit_nbody_map(const NbodyProblem& problem, const NbodyFitOptions& opt) {
  if (const std::string m = opt.Validate(); !m.empty()) throw InputError(m);
  // Perturbers without a period: one problem per super-period candidate.
  std::vector<std::string> perturbers;
  for (const NbodySeed& s : problem.seeds)
    if (!s.transiting && !(s.period_days > 0.0)) perturbers.push_back(s.label);
  std::vector<double> candidates{0.0};
  if (!perturbers.empty()) {
    candidates = perturber_candidates(problem);
    if (candidates.empty())
      throw InputError(fmt::format("{}.period_d: planet {} has no transit times and the TTVs give no super-period "
                                   "(fewer than 6 times?); give a prior on {}.period_d",
                                   perturbers[0], perturbers[0], perturbers[0]));
  }
  const double mass_starts[] = {1e-5, 1e-4, 3e-6, 3e-4};
  // Stage 1, per candidate: the perturbers' orbits and every mass, transiting planets at
  // their ephemerides, from a grid of phases and masses.
  struct Stage {
    NbodyProblem problem;
    Run run;
  };
  std::vector<Stage> stages;
  int evaluations = 0;
  for (double pc : candidates) {
    NbodyProblem pb = problem;
    for (NbodySeed& s : pb.seeds)
      if (!s.transiting && !(s.period_days > 0.0)) s.period_days = pc, s.t_conj_days = pb.osculating_epoch_days;
    const NbodyPosterior post = make_nbody_posterior(pb);
    Run stage;
    for (int k = 0; k < opt.mass_starts; ++k) {
      for (int ph = 0; ph < (perturbers.empty() ? 1 : 4); ++ph) {
        std::vector<double> th = post.start;
        for (const NbodyPlanetBlock* b : post.signal->planets()) {
          th[b->index(NbodyPlanetBlock::kMass)] = mass_starts[k];
          const bool pert = std::find(perturbers.begin(), perturbers.end(), b->label()) != perturbers.end();
          if (pert) th[b->index(NbodyPlanetBlock::kTConj)] = pb.osculating_epoch_days + (ph / 4.0 - 0.375) * pc;
        }
        Run r = optimise(post.model, th, free_parameters(post.model, &perturbers), opt.max_evaluations / 4, 1e-6);
        evaluations += r.evaluations;
        if (r.value > stage.value) stage = r;
      }
    }
    if (std::isfinite(stage.value)) stages.push_back({pb, stage});
  }
  // Stage 2: the three best candidates with every parameter free, then once more from
  // the optimum (BOBYQA's quadratic models go stale along long valleys).
  std::sort(stages.begin(), stages.end(), [](const Stage& a, const Stage& b) { return a.run.value > b.run.value; });
  if (stages.size() > 3) stages.resize(3);
  Run best;
  NbodyProblem best_problem;
  for (const Stage& st : stages) {
    const NbodyPosterior post = make_nbody_posterior(st.problem);
    Run full = optimise(post.model, st.run.theta, free_parameters(post.model, nullptr), opt.max_evaluations, opt.xtol_rel);
    evaluations += full.evaluations;
    Run again = optimise(post.model, full.theta, free_parameters(post.model, nullptr), opt.max_evaluations, opt.xtol_rel);
    evaluations += again.evaluations;
    if (again.value >= full.value) full = again;
    if (full.value > best.value) best = full, best_problem = st.problem;
  }
  NbodyFitResult r;
  if (!std::isfinite(best.value)) {
    r.message = "no start gave a finite posterior (every evaluation failed: close encounters or unreached epochs?)";
    r.evaluations = evaluations;
    return r;
  }
  const NbodyPosterior post = make_nbody_posterior(best_problem);
  r = make_result(best_problem, post, best);
  r.seed_periods_tried = perturbers.empty() ? std::vector<double>{} : candidates;
  r.evaluations = evaluations;
  r.converged = best.converged;
  r.message = best.converged ? "converged" : "evaluation limit reached (result usable, maybe not optimal)";
  return r;
}

std::string NbodyFitResult::BriefReport() const {
  std::string s = fmt::format("N-body MAP: ln L = {:.3f}, ln posterior = {:.3f} ({}; {} evaluations)\n", log_likelihood,
                              log_posterior, message, evaluations);
  for (std::size_t p = 0; p < planet_labels.size(); ++p)
    s += fmt::format("  {}: m = {:.4g} M_earth, P = {:.6f} d, e = {:.4f}{}\n", planet_labels[p], mass_mearth[p],
                     period_days[p], eccentricity[p], transiting[p] ? " (transiting)" : "");
  return s;
}

std::string NbodyFitResult::FullReport() const {
  std::string s = BriefReport();
  s += fmt::format("Osculating epoch: BJD_TDB {:.6f}; star mass {:.4f} M_sun; times in days after BJD_TDB {:.1f}\n",
                   osculating_epoch_bjd, star_mass_msun, reference_epoch_bjd);
  for (std::size_t i = 0; i < names.size(); ++i)
    s += fmt::format("  {:<24} {:>22.12g} {}\n", names[i], theta[i], units[i]);
  if (!seed_periods_tried.empty()) {
    s += "Perturber periods tried (Lithwick-Xie-Wu super-period candidates):";
    for (double p : seed_periods_tried) s += fmt::format(" {:.4f}", p);
    s += " d\n";
  }
  return s;
}

}  // namespace apsides
