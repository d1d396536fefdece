#include "apsides/fit.h"

#include "apsides/activity.h"

#include <fmt/format.h>

#include <Eigen/Dense>
#include <algorithm>
#include <cmath>
#include <limits>
#include <memory>
#include <nlopt.hpp>
#include <functional>
#include <numeric>

#include "apsides/constants.h"
#include "apsides/ephemeris.h"
#include "apsides/error.h"
#include "apsides/kepler.h"
#include "apsides/model_priors.h"
#include "apsides/orbit.h"
#include "apsides/periodogram.h"
#include "apsides/posterior_model.h"
#include "kernels/kernels.h"

namespace apsides {
namespace {
using constants::kPi;
using constants::kTwoPi;
constexpr double kInf = std::numeric_limits<double>::infinity();
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr double kSiderealDayPerDay = 1.0027379093;  // sidereal days per solar day
constexpr double kYearDays = 365.25;

// Everything one evaluation needs: the composed posterior (blocks, priors, terms), and
// which parameters are free nonlinear ones (optimised) or free linear ones (profiled by
// the terms that hold them). Fixed parameters keep their values.
class Objective {
 public:
  Objective(const FitProblem& pb, bool use_prior)
      : model_(make_posterior(pb.data, pb.layout, pb.priors, pb.transits)), use_prior_(use_prior) {
    const ParameterLayout& L = model_.layout();
    free_linear_.assign(L.n_params(), false);
    for (const auto& b : L.blocks())
      for (int s = 0; s < b->size(); ++s) {
        const std::size_t i = b->index(s);
        if (pb.priors.parameter[i].kind == PriorKind::kFixed) continue;
        if (b->info(s).linear) free_linear_[i] = true;
        else nonlinear_.push_back(i);
      }
  }

  const PosteriorModel& model() const { return model_; }
  const ParameterLayout& layout() const { return model_.layout(); }
  const std::vector<std::size_t>& nonlinear() const { return nonlinear_; }
  std::size_t n_transit_points() const { return model_.n_transit_points(); }
  int evaluations() const { return evaluations_; }

  // Evaluates the objective at theta (nonlinear entries as given; linear ones solved and
  // written back). Returns ln L (+ ln prior) minus the blocks' regularisation penalty
  // (a planet's eccentricity beyond its limit is evaluated at the limit and penalised).
  double evaluate(std::vector<double>& theta) {
    ++evaluations_;
    eval_.assign(theta.begin(), theta.end());
    const double penalty = model_.layout().fit_regularise(eval_, model_.priors());
    double lnl = 0.0;
    for (const auto& term : model_.terms()) {
      lnl += term->log_likelihood_profiled(eval_, free_linear_);
      if (!std::isfinite(lnl)) break;
    }
    for (std::size_t i = 0; i < theta.size(); ++i)
      if (free_linear_[i]) theta[i] = eval_[i];
    if (!std::isfinite(lnl)) return -kInf;
    double value = lnl - penalty;
    if (use_prior_) {
      const double lp = model_.layout().fit_log_prior(theta, model_.priors());
      if (!std::isfinite(lp)) return -kInf;
      value += lp;
    }
    return value;
  }

  double transit_log_likelihood(const std::vector<double>& theta) const {
    return model_.transit_log_likelihood(theta);
  }

 private:
  PosteriorModel model_;
  bool use_prior_;
  std::vector<bool> free_linear_;
  std::vector<std::size_t> nonlinear_;
  std::vector<double> eval_;
  int evaluations_ = 0;
};

// One local optimisation over the given parameter indices (the rest held).
struct LocalRun {
  std::vector<double> theta;
  double value = -kInf;
  FitTermination termination = FitTermination::kFailed;
  std::string detail;
};

FitTermination map_result(nlopt::result r) {
  switch (r) {
    case nlopt::SUCCESS:
    case nlopt::STOPVAL_REACHED:
    case nlopt::FTOL_REACHED:
    case nlopt::XTOL_REACHED: return FitTermination::kConverged;
    case nlopt::MAXEVAL_REACHED:
    case nlopt::MAXTIME_REACHED: return FitTermination::kEvaluationLimit;
    case nlopt::ROUNDOFF_LIMITED: return FitTermination::kRoundoffLimited;
    default: return FitTermination::kFailed;
  }
}

std::string result_text(nlopt::result r) {
  switch (r) {
    case nlopt::SUCCESS: return "success";
    case nlopt::STOPVAL_REACHED: return "objective limit reached";
    case nlopt::FTOL_REACHED: return "objective tolerance reached";
    case nlopt::XTOL_REACHED: return "parameter tolerance reached";
    case nlopt::MAXEVAL_REACHED: return "evaluation limit reached";
    case nlopt::MAXTIME_REACHED: return "time limit reached";
    case nlopt::ROUNDOFF_LIMITED: return "round-off limited";
    case nlopt::FORCED_STOP: return "forced stop";
    case nlopt::OUT_OF_MEMORY: return "out of memory";
    case nlopt::INVALID_ARGS: return "invalid arguments";
    default: return "failure";
  }
}

LocalRun optimize(Objective& obj, const FitProblem& pb, const FitOptions& opt, std::vector<double> theta,
                  const std::vector<std::size_t>& which, int max_eval) {
  LocalRun run;
  run.theta = theta;
  const std::size_t d = which.size();
  if (d == 0) {
    run.value = obj.evaluate(run.theta);
    run.termination = std::isfinite(run.value) ? FitTermination::kConverged : FitTermination::kFailed;
    run.detail = "no free nonlinear parameters";
    return run;
  }
  std::vector<double> lo(d), hi(d), x(d), step(d);
  const double baseline = pb.data.baseline_days();
  for (std::size_t a = 0; a < d; ++a) {
    const std::size_t i = which[a];
    const ParameterBlock& block = obj.layout().block_at(i);
    const int slot = static_cast<int>(i - block.first());
    auto [l, h] = block.fit_bounds(slot, theta, pb.priors.parameter[i]);
    lo[a] = l;
    hi[a] = h;
    x[a] = std::clamp(theta[i], l, h);
    step[a] = std::min(block.fit_step(slot, theta, baseline, h - l), 0.25 * (h - l));
    if (!(step[a] > 0.0)) step[a] = 1e-6;
  }
  struct Ctx {
    Objective* obj;
    std::vector<double>* th;
    const std::vector<std::size_t>* which;
  };
  std::vector<double> work = theta;
  Ctx ctx{&obj, &work, &which};
  nlopt::opt o(nlopt::LN_BOBYQA, static_cast<unsigned>(d));
  o.set_lower_bounds(lo);
  o.set_upper_bounds(hi);
  o.set_initial_step(step);
  o.set_maxeval(max_eval);
  o.set_xtol_rel(opt.xtol_rel);
  o.set_ftol_abs(opt.ftol_abs);
  o.set_max_objective(
      [](unsigned n, const double* xx, double*, void* data) -> double {
        Ctx* c = static_cast<Ctx*>(data);
        for (unsigned a = 0; a < n; ++a) (*c->th)[(*c->which)[a]] = xx[a];
        const double v = c->obj->evaluate(*c->th);
        return std::isfinite(v) ? v : -1e300;
      },
      &ctx);
  double best = -kInf;
  nlopt::result r = nlopt::FAILURE;
  try {
    r = o.optimize(x, best);
    run.detail = result_text(r);
  } catch (const nlopt::roundoff_limited&) {
    r = nlopt::ROUNDOFF_LIMITED;
    run.detail = "round-off limited";
  } catch (const nlopt::forced_stop&) {
    r = nlopt::FORCED_STOP;
    run.detail = "forced stop";
  } catch (const std::invalid_argument& e) {
    r = nlopt::INVALID_ARGS;
    run.detail = fmt::format("NLopt rejected the problem: {}", e.what());
  } catch (const std::bad_alloc&) {
    r = nlopt::OUT_OF_MEMORY;
    run.detail = "NLopt ran out of memory";
  } catch (const std::runtime_error& e) {
    r = nlopt::FAILURE;
    run.detail = fmt::format("NLopt failed: {}", e.what());
  }
  // NLopt keeps the best point seen in x even when it throws round-off.
  for (std::size_t a = 0; a < d; ++a) run.theta[which[a]] = x[a];
  run.value = obj.evaluate(run.theta);
  run.termination = std::isfinite(run.value) ? map_result(r) : FitTermination::kFailed;
  if (run.termination == FitTermination::kFailed && std::isfinite(run.value)) run.termination = FitTermination::kRoundoffLimited;
  return run;
}

// ---- Seeds ------------------------------------------------------------------------

struct Seed {
  Planet planet;
  double chi2 = kInf;
};

// Coarse grid over (period, e, mean anomaly at t = 0): for each point the signal is
// A cos(nu) + B sin(nu) (+ a constant the offsets absorb), linear in A, B; solved exactly
// with the offsets and trend by weighted least squares on the residual velocities.
std::vector<Seed> grid_seeds(const VelocityData& d, const std::vector<double>& resid, const std::vector<double>& w,
                             const ModelLayout& L, const std::vector<double>& periods, double emax, bool eccentric,
                             std::size_t keep) {
  const std::size_t n = d.size();
  const int ni = L.n_instruments, nt = L.trend_order();
  const int m = 2 + ni + nt;
  const std::vector<double> eccs = eccentric ? std::vector<double>{0.0, 0.2, 0.4, 0.6, 0.75, 0.85, 0.92}
                                             : std::vector<double>{0.0};
  const int n_phase = 24;
  std::vector<Seed> out;
  std::vector<double> M(n), sE(n), cE(n);
  Eigen::MatrixXd X(static_cast<Eigen::Index>(n), m);
  Eigen::VectorXd sw(static_cast<Eigen::Index>(n)), yw(static_cast<Eigen::Index>(n));
  for (std::size_t i = 0; i < n; ++i) {
    sw(static_cast<Eigen::Index>(i)) = std::sqrt(w[i]);
    yw(static_cast<Eigen::Index>(i)) = resid[i] * sw(static_cast<Eigen::Index>(i));
  }
  for (double P : periods) {
    for (double e0 : eccs) {
      const double e = std::min(e0, std::max(emax - 0.01, 0.0));
      if (e0 > 0.0 && e <= 0.0) continue;
      const int nph = e == 0.0 ? 1 : n_phase;  // circular: the phase is in (A, B)
      for (int ph = 0; ph < nph; ++ph) {
        const double M0 = kTwoPi * ph / nph;
        for (std::size_t i = 0; i < n; ++i) M[i] = kTwoPi * d.time_days[i] / P + M0;
        kernels::kepler_sincos(M.data(), n, e, sE.data(), cE.data());
        const double q = std::sqrt(1.0 - e * e);
        for (std::size_t i = 0; i < n; ++i) {
          const double den = 1.0 - e * cE[i];
          const double cnu = (cE[i] - e) / den, snu = q * sE[i] / den;
          const auto r = static_cast<Eigen::Index>(i);
          const double s = sw(r);
          X(r, 0) = cnu * s;
          X(r, 1) = snu * s;
          for (int k = 0; k < ni; ++k) X(r, 2 + k) = d.instrument[i] == k ? s : 0.0;
          for (int p = 1; p <= nt; ++p) X(r, 1 + ni + p) = std::pow(d.time_days[i], p) * s;
        }
        const Eigen::MatrixXd A = X.transpose() * X;
        const Eigen::VectorXd b = X.transpose() * yw;
        Eigen::LDLT<Eigen::MatrixXd> ldlt(A);
        if (ldlt.info() != Eigen::Success) continue;
        const Eigen::VectorXd c = ldlt.solve(b);
        const double chi2 = (yw - X * c).squaredNorm();
        if (!std::isfinite(chi2)) continue;
        // A cos nu + B sin nu = K cos(nu + w) - K e cos w + ...: A = K cos w, B = -K sin w.
        const double K = std::hypot(c(0), c(1));
        const double om = std::atan2(-c(1), c(0));
        const double tp = -M0 * P / kTwoPi;
        Seed s;
        s.planet = Planet::from_elements(P, K, e, om, time_of_conjunction(P, e, om, tp));
        s.chi2 = chi2;
        out.push_back(s);
      }
    }
  }
  std::stable_sort(out.begin(), out.end(), [](const Seed& a, const Seed& b) { return a.chi2 < b.chi2; });
  // Keep the best of each distinct period first, then fill with the rest.
  std::vector<Seed> kept;
  std::vector<double> seen;
  for (const Seed& s : out) {
    if (kept.size() >= keep) break;
    const bool dup = std::any_of(seen.begin(), seen.end(), [&](double p) {
      return std::fabs(p - s.planet.period_days) < 1e-9 * p;
    });
    if (dup) continue;
    seen.push_back(s.planet.period_days);
    kept.push_back(s);
  }
  for (const Seed& s : out) {
    if (kept.size() >= keep) break;
    if (std::find_if(kept.begin(), kept.end(), [&](const Seed& k) { return &k == &s; }) == kept.end() &&
        std::none_of(kept.begin(), kept.end(), [&](const Seed& k) {
          return k.planet.period_days == s.planet.period_days && k.chi2 == s.chi2;
        }))
      kept.push_back(s);
  }
  return kept;
}

}  // namespace

// ---- Public pieces --------------------------------------------------------------------

std::string to_string(FitTermination t) {
  switch (t) {
    case FitTermination::kNotRun: return "not run";
    case FitTermination::kConverged: return "converged";
    case FitTermination::kEvaluationLimit: return "evaluation limit";
    case FitTermination::kRoundoffLimited: return "round-off limited";
    case FitTermination::kFailed: return "failed";
  }
  return "failed";
}

std::string FitOptions::Validate() const {
  if (max_evaluations < 100) return fmt::format("max_evaluations = {}: must be >= 100", max_evaluations);
  if (!(xtol_rel >= 0.0)) return fmt::format("xtol_rel = {}: must be >= 0", xtol_rel);
  if (!(ftol_abs >= 0.0)) return fmt::format("ftol_abs = {}: must be >= 0", ftol_abs);
  if (n_peaks < 1) return fmt::format("n_peaks = {}: must be >= 1", n_peaks);
  if (joint_starts < 1) return fmt::format("joint_starts = {}: must be >= 1", joint_starts);
  if (!(oversample >= 1.0)) return fmt::format("oversample = {}: must be >= 1", oversample);
  for (double p : seed_periods_days)
    if (!(p > 0.0) || !std::isfinite(p)) return fmt::format("seed_periods_days = {}: must be > 0", p);
  return "";
}

std::string SearchOptions::Validate() const {
  if (max_planets < 0) return fmt::format("max_planets = {}: must be >= 0", max_planets);
  if (!(min_bic_improvement >= 0.0) || !std::isfinite(min_bic_improvement))
    return fmt::format("min_bic_improvement = {}: must be >= 0", min_bic_improvement);
  if (!(max_point_share > 0.0 && max_point_share <= 1.0))
    return fmt::format("max_point_share = {}: must be in (0, 1]", max_point_share);
  if (!(fap_threshold > 0.0 && fap_threshold < 1.0))
    return fmt::format("fap_threshold = {}: must be in (0, 1)", fap_threshold);
  return fit.Validate();
}

bool solve_linear_parameters(const KeplerianModel& model, std::span<double> theta) {
  FitProblem pb;
  pb.data = model.data();
  pb.layout = model.layout();
  pb.priors.parameter.assign(pb.layout.n_params(), Prior::uniform(-1e300, 1e300));
  pb.priors.eccentricity.assign(static_cast<std::size_t>(pb.layout.n_planets), EccentricityPrior{});
  for (auto& e : pb.priors.eccentricity) e.max_ecc = 1.0 - 1e-12;
  Objective obj(pb, false);
  std::vector<double> th(theta.begin(), theta.end());
  const double v = obj.evaluate(th);
  if (!std::isfinite(v)) return false;
  std::copy(th.begin(), th.end(), theta.begin());
  return true;
}

namespace {

struct Residuals {
  std::vector<double> r, sigma;
};

// Residuals of the model at theta, the noise model's correlated part (a GP's conditional
// mean) removed: what the residual periodogram of the search looks at.
Residuals residuals_of(const FitProblem& pb, const std::vector<double>& theta) {
  const PosteriorModel model = make_posterior(pb.data, pb.layout, pb.priors, TransitData{});
  Residuals out;
  model.velocities()->residuals(theta, true, out.r, out.sigma);
  return out;
}

// The share of a new planet's chi-square gain, sum_i (r_prev,i^2 - r_new,i^2) / sigma_i^2
// (sigma with the new fit's jitter), that its kLeveragePoints most improved points give.
constexpr int kLeveragePoints = 3;
double top_point_share(const Residuals& before, const Residuals& after) {
  std::vector<double> gain(after.r.size());
  double total = 0.0;
  for (std::size_t i = 0; i < gain.size(); ++i) {
    gain[i] = (before.r[i] * before.r[i] - after.r[i] * after.r[i]) / (after.sigma[i] * after.sigma[i]);
    total += gain[i];
  }
  if (!(total > 0.0) || gain.size() <= 4 * static_cast<std::size_t>(kLeveragePoints)) return 0.0;
  std::partial_sort(gain.begin(), gain.begin() + kLeveragePoints, gain.end(), std::greater<>());
  return std::accumulate(gain.begin(), gain.begin() + kLeveragePoints, 0.0) / total;
}

struct ResidualScan {
  std::vector<double> peak_periods;  // strongest first
  double best_power = 0.0;
  double best_fap = 1.0;
};

ResidualScan scan_residuals(const VelocityData& d, const Residuals& res, double pmin, double pmax,
                            double oversample, int n_peaks) {
  ResidualScan sc;
  const double T = std::max(d.baseline_days(), 1e-3);
  const double f0 = 1.0 / pmax, f1 = 1.0 / pmin;
  const double df = 1.0 / (oversample * T);
  const auto nf = static_cast<std::size_t>(std::max(3.0, std::floor((f1 - f0) / df) + 1.0));
  const std::vector<double> p = gls_power(d.time_days, res.r, res.sigma, f0, df, nf, PeriodogramMethod::kAuto, 1);
  std::vector<std::size_t> maxima;
  for (std::size_t k = 0; k < p.size(); ++k) {
    const bool left = k == 0 || p[k] >= p[k - 1];
    const bool right = k + 1 == p.size() || p[k] > p[k + 1];
    if (left && right && std::isfinite(p[k])) maxima.push_back(k);
  }
  std::stable_sort(maxima.begin(), maxima.end(), [&](std::size_t a, std::size_t b) { return p[a] > p[b]; });
  for (std::size_t a = 0; a < maxima.size() && static_cast<int>(a) < n_peaks; ++a)
    sc.peak_periods.push_back(1.0 / (f0 + df * static_cast<double>(maxima[a])));
  if (!maxima.empty()) {
    sc.best_power = p[maxima[0]];
    sc.best_fap = baluev_fap(sc.best_power, d.size(), f0 + df * static_cast<double>(nf - 1), d.time_days, res.sigma);
  }
  return sc;
}

// Candidate periods for a new planet: the given peaks, their aliases and (for the
// strongest) twice its period, in [pmin, pmax].
std::vector<double> candidate_periods(const std::vector<double>& peaks, bool aliases, double pmin, double pmax) {
  std::vector<double> out;
  auto add = [&](double P) {
    if (!(P >= pmin && P <= pmax) || !std::isfinite(P)) return;
    for (double q : out)
      if (std::fabs(q - P) < 1e-6 * P) return;
    out.push_back(P);
  };
  for (double P : peaks) add(P);
  if (aliases) {
    for (std::size_t a = 0; a < peaks.size() && a < 2; ++a) {
      const double f = 1.0 / peaks[a];
      for (double fw : {1.0, kSiderealDayPerDay, 1.0 / kYearDays}) {
        add(1.0 / (f + fw));
        add(1.0 / std::fabs(f - fw));
      }
    }
  }
  if (!peaks.empty()) add(2.0 * peaks[0]);
  return out;
}

// Fine periods around a candidate (a peak is 1/T wide in frequency).
std::vector<double> refine_periods(const std::vector<double>& cands, double T, double pmin, double pmax) {
  std::vector<double> out;
  for (double P : cands) {
    const double f = 1.0 / P;
    for (double dfm : {-0.1, 0.0, 0.1}) {
      const double g = f + dfm / T;
      if (g > 0.0) {
        const double Q = 1.0 / g;
        if (Q >= pmin && Q <= pmax) out.push_back(Q);
      }
    }
  }
  return out;
}

void wrap_and_sort(const FitProblem& pb, const ParameterLayout& PL, std::vector<double>& theta) {
  // Planets named by transit times keep their slot; the others are sorted by period
  // into the remaining slots.
  const auto planets = PL.planets();
  std::vector<Planet> ps, free;
  for (const PlanetBlock* b : planets) {
    ps.push_back(b->planet(theta));
    if (!pb.priors.is_label_fixed(b->letter())) free.push_back(ps.back());
  }
  std::stable_sort(free.begin(), free.end(), [](const Planet& a, const Planet& b) { return a.period_days < b.period_days; });
  for (std::size_t j = 0, f = 0; j < planets.size(); ++j)
    if (!pb.priors.is_label_fixed(planets[j]->letter())) ps[j] = free[f++];
  for (std::size_t j = 0; j < planets.size(); ++j) {
    Planet p = ps[j];
    const Prior& tp = pb.priors.parameter[planets[j]->index(PlanetBlock::kTConj)];
    const double mid = std::isfinite(tp.lower()) && std::isfinite(tp.upper()) ? 0.5 * (tp.lower() + tp.upper()) : 0.0;
    p.t_conj_days -= p.period_days * std::round((p.t_conj_days - mid) / p.period_days);
    planets[j]->put(theta, p);
  }
}

std::vector<double> initial_theta(const FitProblem& pb, const ParameterLayout& PL) {
  std::vector<double> th(PL.n_params(), 0.0);
  for (const auto& b : PL.blocks())
    for (int s = 0; s < b->size(); ++s) th[b->index(s)] = b->fit_start(s, pb.priors.parameter[b->index(s)]);
  return th;
}

int count_free(const ModelPriors& priors) {
  int k = 0;
  for (const Prior& p : priors.parameter)
    if (p.kind != PriorKind::kFixed) ++k;
  return k;
}

void finish_result(const FitProblem& pb, Objective& obj, FitResult& res, std::vector<double> theta) {
  wrap_and_sort(pb, obj.layout(), theta);
  Objective plain(pb, false);
  const double lnl = plain.evaluate(theta);  // also solves the linear parameters
  res.theta = theta;
  res.log_likelihood = lnl;
  res.log_likelihood_transits = plain.transit_log_likelihood(theta);
  res.log_prior = obj.model().log_prior(theta);
  res.log_posterior = res.log_likelihood + res.log_prior;
  const KeplerianModel km(pb.data, pb.layout);
  res.chi2 = km.chi_square(theta);
  res.residuals_m_s = km.residuals(theta);
  const std::size_t ni = pb.data.n_instruments();
  res.rms_m_s.assign(ni, 0.0);
  std::vector<std::size_t> cnt(ni, 0);
  for (std::size_t i = 0; i < res.residuals_m_s.size(); ++i) {
    const auto k = static_cast<std::size_t>(pb.data.instrument[i]);
    res.rms_m_s[k] += res.residuals_m_s[i] * res.residuals_m_s[i];
    ++cnt[k];
  }
  for (std::size_t k = 0; k < cnt.size(); ++k) res.rms_m_s[k] = cnt[k] ? std::sqrt(res.rms_m_s[k] / static_cast<double>(cnt[k])) : kNaN;
  const int k = count_free(pb.priors);
  res.n_free = k;
  res.n_points = pb.data.size() + obj.n_transit_points();
  const double n = static_cast<double>(res.n_points);
  res.bic = k * std::log(n) - 2.0 * lnl;
  res.aicc = 2.0 * k - 2.0 * lnl + (n - k - 1.0 > 0.0 ? 2.0 * k * (k + 1.0) / (n - k - 1.0) : kInf);
}

// The problem's input checks: enough data for the free parameters, starts of the right
// size whose nonlinear parameters lie inside the priors.
void check_problem(const FitProblem& pb, const FitOptions& opt, const Objective& obj) {
  const ModelLayout& L = pb.layout;
  const int k = count_free(pb.priors);
  if (static_cast<int>(pb.data.size() + obj.n_transit_points()) <= k)
    throw InputError(fmt::format("{}: {} data points are too few to fit {} free parameters ({} planet(s))",
                                 pb.data.sources(), pb.data.size() + obj.n_transit_points(), k, L.n_planets));
  for (std::size_t s = 0; s < opt.starts.size(); ++s) {
    if (opt.starts[s].size() != obj.layout().n_params())
      throw InputError(fmt::format("fit: start {} has {} values; the model has {} parameters", s + 1,
                                   opt.starts[s].size(), obj.layout().n_params()));
    std::vector<double> th = opt.starts[s];
    // Linear parameters are profiled: only the others must lie inside the priors.
    Objective tmp(pb, false);
    tmp.evaluate(th);
    require_in_support(pb.priors, L, pb.data.instrument_names, th, fmt::format("fit start {}", s + 1));
  }
}

// Fits what is known first: the first n_known planets with the instruments, the trend
// and the jitters, the model's other planets left out. Returns base with the result.
std::vector<double> fit_known(const FitProblem& pb, const ParameterLayout& PL, const FitOptions& opt,
                              std::vector<double> base, int n_known, FitResult& res) {
  FitProblem sub = pb;
  sub.layout.n_planets = n_known;
  const ParameterLayout sub_layout = ParameterLayout::from(sub.layout, pb.data.instrument_names);
  sub.priors = restrict_priors(PL, pb.priors, sub_layout);
  std::vector<double> ts(sub_layout.n_params(), 0.0);
  transfer_parameters(PL, base, sub_layout, ts);
  Objective so(sub, opt.use_prior_density);
  const LocalRun r = optimize(so, sub, opt, ts, so.nonlinear(), opt.max_evaluations);
  res.evaluations += so.evaluations();
  transfer_parameters(sub_layout, r.theta, PL, base);
  return base;
}

// Seeds planet j (the planets after it left out) from candidate periods: the residual
// periodogram's peaks and their aliases, each through the eccentric grid; each seed is
// optimised alone (the other planets held). Returns the runs, best first.
std::vector<LocalRun> seed_planet(const FitProblem& pb, Objective& obj, const FitOptions& opt,
                                  const std::vector<double>& base, std::size_t j) {
  const ParameterLayout& PL = obj.layout();
  const auto planets = PL.planets();
  // Residuals of the model with planets 0..j-1 (this layout, later planets K = 0).
  std::vector<double> th = base;
  for (std::size_t q = j; q < planets.size(); ++q) {
    const Prior& pq = pb.priors.parameter[planets[q]->index(PlanetBlock::kPeriod)];
    planets[q]->put(th, Planet{pq.lower() > 0 ? std::max(pq.lower(), 1.0) : 1.0, 0.0, 0.0, 0.0, 0.0});
  }
  obj.evaluate(th);  // profiles offsets and trend
  const Residuals rs = residuals_of(pb, th);
  const PlanetBlock& pj = *planets[j];
  const Prior& pp = pb.priors.parameter[pj.index(PlanetBlock::kPeriod)];
  double pmin = pp.lower(), pmax = pp.upper();
  if (!std::isfinite(pmax) || !(pmin > 0.0)) {
    pmin = std::max(pmin, pp.a * 0.9);
    pmax = std::isfinite(pmax) ? pmax : pp.a * 1.1;
  }
  const bool fixed_period = pp.kind == PriorKind::kFixed;
  std::vector<double> peaks = opt.seed_periods_days;
  if (fixed_period) peaks = {pp.a};
  if (peaks.empty()) peaks = scan_residuals(pb.data, rs, pmin, pmax, opt.oversample, opt.n_peaks).peak_periods;
  const double T = std::max(pb.data.baseline_days(), 1.0);
  const std::vector<double> cands = fixed_period ? std::vector<double>{pp.a} : candidate_periods(peaks, opt.add_aliases, pmin, pmax);
  const std::vector<double> fine = fixed_period ? cands : refine_periods(cands, T, pmin, pmax);
  std::vector<double> w(rs.sigma.size());
  for (std::size_t i = 0; i < w.size(); ++i) w[i] = 1.0 / (rs.sigma[i] * rs.sigma[i]);
  const EccentricityPrior& ep = pj.eccentricity_prior(pb.priors);
  const bool circ = ep.kind == EccentricityPriorKind::kCircular;
  const auto keep = static_cast<std::size_t>(2 * opt.joint_starts + 2);
  // The grid re-solves offsets and trend on the residuals.
  const std::vector<Seed> seeds =
      grid_seeds(pb.data, rs.r, w, pb.layout, fine, circ ? 0.0 : ep.max_ecc, opt.eccentric_seeds && !circ, keep);
  std::vector<std::size_t> new_only;  // planet j and everything that is not a planet
  for (std::size_t i : obj.nonlinear()) {
    const ParameterBlock& b = PL.block_at(i);
    if (&b == &pj || b.kind() != BlockKind::kPlanet) new_only.push_back(i);
  }
  const Prior& kp = pb.priors.parameter[pj.index(PlanetBlock::kAmplitude)];
  const Prior& tp = pb.priors.parameter[pj.index(PlanetBlock::kTConj)];
  const double mid = std::isfinite(tp.lower()) && std::isfinite(tp.upper()) ? 0.5 * (tp.lower() + tp.upper()) : 0.0;
  std::vector<LocalRun> stage1;
  for (const Seed& s : seeds) {
    std::vector<double> t0 = th;
    Planet p = s.planet;
    p.semi_amplitude_m_s = std::clamp(p.semi_amplitude_m_s, kp.lower(), std::isfinite(kp.upper()) ? kp.upper() : p.semi_amplitude_m_s);
    if (circ) p.sqrt_e_cos_omega = p.sqrt_e_sin_omega = 0.0;
    p.t_conj_days -= p.period_days * std::round((p.t_conj_days - mid) / p.period_days);
    pj.put(t0, p);
    stage1.push_back(optimize(obj, pb, opt, t0, new_only, std::max(100, opt.max_evaluations / 4)));
  }
  std::stable_sort(stage1.begin(), stage1.end(), [](const LocalRun& a, const LocalRun& b) { return a.value > b.value; });
  return stage1;
}

// Without starts: the known planets first, then each remaining planet seeded in turn;
// the best few seeds of the last planet refined jointly with everything, the best polished.
std::vector<LocalRun> fit_from_seeds(const FitProblem& pb, Objective& obj, const FitOptions& opt, FitResult& res) {
  const ParameterLayout& PL = obj.layout();
  const auto planets = PL.planets();
  const std::vector<std::size_t>& all = obj.nonlinear();
  const int max_eval = opt.max_evaluations;
  std::vector<LocalRun> runs;
  std::vector<double> base = initial_theta(pb, PL);
  const std::size_t n_known = std::min(opt.known_planets.size(), planets.size());
  for (std::size_t j = 0; j < n_known; ++j) planets[j]->put(base, opt.known_planets[j]);
  base = fit_known(pb, PL, opt, base, static_cast<int>(n_known), res);
  if (n_known == planets.size()) runs.push_back(optimize(obj, pb, opt, base, all, max_eval));
  for (std::size_t j = n_known; j < planets.size(); ++j) {
    const std::vector<LocalRun> stage1 = seed_planet(pb, obj, opt, base, j);
    if (stage1.empty()) break;
    if (j + 1 < planets.size()) {
      // More planets to seed: continue from the best so far.
      base = optimize(obj, pb, opt, stage1[0].theta, all, max_eval).theta;
      continue;
    }
    const std::size_t nj = std::min<std::size_t>(stage1.size(), static_cast<std::size_t>(opt.joint_starts));
    for (std::size_t a = 0; a < nj; ++a) runs.push_back(optimize(obj, pb, opt, stage1[a].theta, all, max_eval));
  }
  if (!runs.empty()) {
    std::stable_sort(runs.begin(), runs.end(), [](const LocalRun& a, const LocalRun& b) { return a.value > b.value; });
    LocalRun polish = optimize(obj, pb, opt, runs[0].theta, all, max_eval);
    if (polish.value >= runs[0].value) runs[0] = polish;
  }
  return runs;
}

}  // namespace

FitResult fit_map(const FitProblem& pb, const FitOptions& opt) {
  if (const std::string msg = opt.Validate(); !msg.empty()) throw InputError("fit options: " + msg);
  const ModelLayout& L = pb.layout;
  if (pb.priors.parameter.size() != L.n_params() ||
      pb.priors.eccentricity.size() < static_cast<std::size_t>(L.n_planets))
    throw InputError("fit: the priors do not match the model layout");
  FitResult res;
  res.layout = L;
  res.instrument_names = pb.data.instrument_names;
  res.names = L.names(pb.data.instrument_names);
  res.reference_epoch_bjd = pb.data.reference_epoch_bjd;
  Objective obj(pb, opt.use_prior_density);
  check_problem(pb, opt, obj);
  std::vector<LocalRun> runs;
  if (!opt.starts.empty()) {
    for (const auto& s : opt.starts) {
      LocalRun r = optimize(obj, pb, opt, s, obj.nonlinear(), opt.max_evaluations);
      r = optimize(obj, pb, opt, r.theta, obj.nonlinear(), opt.max_evaluations);  // a restart polishes BOBYQA's model
      runs.push_back(std::move(r));
    }
  } else {
    runs = fit_from_seeds(pb, obj, opt, res);
  }
  res.evaluations += obj.evaluations();
  res.starts_tried = static_cast<int>(runs.size());
  if (runs.empty()) {
    res.termination = FitTermination::kFailed;
    res.message = "Fit failed: no start could be made.";
    return res;
  }
  std::stable_sort(runs.begin(), runs.end(), [](const LocalRun& a, const LocalRun& b) { return a.value > b.value; });
  const LocalRun& best = runs[0];
  if (!std::isfinite(best.value)) {
    res.termination = FitTermination::kFailed;
    res.message = fmt::format("Fit failed: no start reached a finite posterior ({}).", best.detail);
    return res;
  }
  res.termination = best.termination;
  finish_result(pb, obj, res, best.theta);
  const std::string bad = first_outside_support(pb.priors, L, pb.data.instrument_names, res.theta);
  res.message = fmt::format("MAP fit with {} planet(s): {} ({}), best of {} start(s), {} evaluations.", L.n_planets,
                            to_string(res.termination), best.detail, res.starts_tried, res.evaluations);
  if (!bad.empty()) res.message += fmt::format(" Note: {} is at or beyond its prior's edge.", bad);
  return res;
}

// ---- Reports ---------------------------------------------------------------------------

std::vector<PlanetSummary> derive_planets(const FitResult& fit, std::optional<double> star_mass_msun) {
  std::vector<PlanetSummary> out;
  const ParameterLayout PL = ParameterLayout::from(fit.layout, fit.instrument_names);
  for (const PlanetBlock* b : PL.planets()) {
    const Planet p = b->planet(fit.theta);
    PlanetSummary s;
    s.label = b->label();
    s.period_d = p.period_days;
    s.K_ms = p.semi_amplitude_m_s;
    s.ecc = p.ecc();
    double w = p.omega_rad() * 180.0 / kPi;
    if (w < 0.0) w += 360.0;
    s.omega_deg = w;
    s.t_conj_bjd = fit.reference_epoch_bjd + p.t_conj_days;
    s.t_peri_bjd = fit.reference_epoch_bjd + time_of_periastron(p.period_days, s.ecc, p.omega_rad(), p.t_conj_days);
    if (star_mass_msun && *star_mass_msun > 0.0) {
      const double m = minimum_mass_msun(p.period_days, std::fabs(p.semi_amplitude_m_s), s.ecc, *star_mass_msun);
      s.msini_mjup = msun_to_mjup(m);
      s.msini_mearth = msun_to_mearth(m);
      s.a_au = semi_major_axis_au(p.period_days, *star_mass_msun, m);
    }
    out.push_back(s);
  }
  return out;
}

std::string FitResult::BriefReport() const {
  return fmt::format("{} planet(s): ln L = {:.3f}, chi2 = {:.2f}, k = {}, n = {}, BIC = {:.2f}, AICc = {:.2f} [{}]",
                     layout.n_planets, log_likelihood, chi2, n_free, n_points, bic, aicc, to_string(termination));
}

std::string FitResult::FullReport() const {
  std::string s = message + "\n";
  for (std::size_t i = 0; i < theta.size() && i < names.size(); ++i) s += fmt::format("  {:<22} {:.10g}\n", names[i], theta[i]);
  s += "  " + BriefReport() + "\n";
  return s;
}

std::string SearchResult::BriefReport() const {
  return fmt::format("Planet search: {} planet(s) selected after {} step(s).", selected_n_planets, steps.size());
}

std::string SearchResult::FullReport() const {
  std::string s = message + "\n";
  s += fmt::format("  {:>3} {:>14} {:>4} {:>12} {:>12} {:>12} {:>14}\n", "N", "ln L", "k", "BIC", "AICc", "FAP", "peak P (d)");
  for (const SearchStep& st : steps) {
    s += fmt::format("  {:>3} {:>14.3f} {:>4} {:>12.2f} {:>12.2f} {:>12} {:>14}\n", st.n_planets, st.log_likelihood,
                     st.n_free, st.bic, st.aicc, std::isfinite(st.admitting_fap) ? fmt::format("{:.3g}", st.admitting_fap) : "-",
                     std::isfinite(st.admitting_period_days) ? fmt::format("{:.5f}", st.admitting_period_days) : "-");
  }
  return s;
}

// ---- Search ---------------------------------------------------------------------------

ModelLayout problem_layout(const SearchProblem& sp, int n_planets) {
  ModelLayout layout;
  layout.n_planets = n_planets;
  layout.n_instruments = static_cast<int>(sp.data.n_instruments());
  layout.trend = sp.model.trend;
  layout.fit_jitter = sp.model.fit_jitter;
  layout.transit_jitter_planets = sp.transit_jitter_planets;
  layout.noise = sp.model.noise;
  return layout;
}

ModelPriors problem_priors(const SearchProblem& sp, const ModelLayout& layout) {
  ModelPriors priors = build_priors(sp.data, layout, sp.search, sp.model, sp.priors,
                                    std::max(layout.n_planets, sp.search.max_planets), &sp.star, &sp.transits);
  priors.label_fixed = sp.transits.planets_with_times(layout.n_planets);
  return priors;
}

std::vector<SignalHint> search_signals(const SearchResult& result) {
  std::vector<SignalHint> out;
  for (const FitResult& f : result.fits) {
    const ParameterLayout blocks = f.parameters();
    for (const PlanetBlock* b : blocks.planets()) {
      const Planet p = b->planet(f.theta);
      out.push_back({p.period_days, p.semi_amplitude_m_s, p.t_conj_days});
    }
  }
  if (std::isfinite(result.final_peak_period_days)) out.push_back({result.final_peak_period_days});
  return out;
}

FitProblem make_fit_problem(const SearchProblem& sp, int n_planets) {
  FitProblem pb;
  pb.data = sp.data;
  pb.transits = sp.transits;
  pb.layout = problem_layout(sp, n_planets);
  pb.priors = problem_priors(sp, pb.layout);
  return pb;
}

namespace {

// BIC of the velocities alone (a transit-time term is in some steps' likelihood and not
// in others, so the steps are compared on the data they all explain).
double velocity_bic(const FitResult& f, std::size_t n_velocities) {
  return f.n_free * std::log(static_cast<double>(n_velocities)) - 2.0 * (f.log_likelihood - f.log_likelihood_transits);
}

// The fitted planet whose window-function alias (|f_j +- f_w|, f_w one sidereal day, one
// solar day, one year) lies within 1/baseline of the frequency 1/P; -1 when none.
// Planets named by transit times are left out: their times decide their period.
int alias_parent(const FitResult& prev, const ModelPriors& priors, double period_days, double baseline_days) {
  const double f = 1.0 / period_days, tol = 1.0 / std::max(baseline_days, 1.0);
  const ParameterLayout blocks = prev.parameters();
  const auto planets = blocks.planets();
  for (std::size_t j = 0; j < planets.size(); ++j) {
    if (priors.is_label_fixed(planets[j]->letter())) continue;
    const double fj = 1.0 / planets[j]->period(prev.theta);
    for (double fw : {kSiderealDayPerDay, 1.0, 1.0 / kYearDays})
      if (std::fabs(f - (fj + fw)) < tol || std::fabs(f - std::fabs(fj - fw)) < tol) return static_cast<int>(j);
  }
  return -1;
}

// The (k-1)-planet model with planet j moved to the alias at `period_days`: the search
// may have taken the wrong alias of a signal, leaving the right one in the residuals.
FitResult alias_alternative(const SearchProblem& sp, const FitOptions& fo, const FitResult& prev, int j,
                            double period_days) {
  FitOptions f = fo;
  const ParameterLayout blocks = prev.parameters();
  const auto planets = blocks.planets();
  for (std::size_t q = 0; q < planets.size(); ++q)
    if (static_cast<int>(q) != j) f.known_planets.push_back(planets[q]->planet(prev.theta));
  f.seed_periods_days = {period_days};
  f.add_aliases = false;
  return fit_map(make_fit_problem(sp, prev.layout.n_planets), f);
}

}  // namespace

SearchResult search_planets(const SearchProblem& sp, const SearchOptions& opt) {
  if (const std::string msg = opt.Validate(); !msg.empty()) throw InputError("search options: " + msg);
  SearchResult out;
  FitOptions fo = opt.fit;
  fo.starts.clear();
  fo.known_planets.clear();
  fo.seed_periods_days.clear();
  const FitResult fit = fit_map(make_fit_problem(sp, 0), fo);
  out.fits.push_back(fit);
  out.steps.push_back({0, fit.log_likelihood, fit.n_free, fit.bic, fit.aicc, kNaN, kNaN});
  if (!fit.success()) {
    out.message = "Planet search stopped: the fit without planets failed: " + fit.message;
    return out;
  }
  const PeriodRange range = default_period_range(sp.data, sp.search);
  const std::size_t n_v = sp.data.size();
  out.message = "Planet search: ";
  bool swapped = false;  // one alias swap per step
  for (int k = 1; k <= opt.max_planets; ++k) {
    const FitResult& prev = out.fits.back();
    const FitProblem prev_pb = make_fit_problem(sp, k - 1);
    const ResidualScan sc = scan_residuals(sp.data, residuals_of(prev_pb, prev.theta), range.min_days, range.max_days,
                                           fo.oversample, fo.n_peaks);
    out.final_peak_fap = sc.best_fap;
    out.final_peak_period_days = sc.peak_periods.empty() ? kNaN : sc.peak_periods[0];
    if (sc.peak_periods.empty() || !(sc.best_fap < opt.fap_threshold)) {
      out.message += fmt::format("stopped at {} planet(s): the strongest residual peak (P = {:.5g} d) has FAP {:.3g} >= {:.3g}.",
                                 k - 1, out.final_peak_period_days, sc.best_fap, opt.fap_threshold);
      break;
    }
    if (const int j = alias_parent(prev, prev_pb.priors, sc.peak_periods[0], sp.data.baseline_days());
        j >= 0 && !swapped && k > 1) {
      swapped = true;
      FitResult alt = alias_alternative(sp, fo, prev, j, sc.peak_periods[0]);
      if (alt.success() && velocity_bic(alt, n_v) < velocity_bic(prev, n_v)) {
        out.message += fmt::format("planet {} moved to its alias at {:.5g} d (BIC lower by {:.1f}); ", planet_label(j),
                                   sc.peak_periods[0], velocity_bic(prev, n_v) - velocity_bic(alt, n_v));
        out.fits.back() = std::move(alt);
        SearchStep& st = out.steps.back();
        st.log_likelihood = out.fits.back().log_likelihood;
        st.bic = out.fits.back().bic;
        st.aicc = out.fits.back().aicc;
        --k;  // scan the new residuals for the same step
        continue;
      }
    }
    FitOptions f = fo;
    const ParameterLayout prev_blocks = prev.parameters();
    for (const PlanetBlock* b : prev_blocks.planets()) f.known_planets.push_back(b->planet(prev.theta));
    f.seed_periods_days = sc.peak_periods;
    FitResult fk = fit_map(make_fit_problem(sp, k), f);
    if (!fk.success()) {
      out.message += fmt::format("stopped: the {}-planet fit failed ({}).", k, fk.message);
      break;
    }
    const double gain = velocity_bic(prev, n_v) - velocity_bic(fk, n_v);
    if (gain < opt.min_bic_improvement) {
      out.message += fmt::format(
          "stopped at {} planet(s): a planet at the residual peak (P = {:.5g} d, FAP {:.3g}) improves the velocities' "
          "BIC by {:.1f} < {:g}.",
          k - 1, sc.peak_periods[0], sc.best_fap, gain, opt.min_bic_improvement);
      break;
    }
    if (const double share = top_point_share(residuals_of(prev_pb, prev.theta), residuals_of(make_fit_problem(sp, k), fk.theta));
        share > opt.max_point_share) {
      out.message += fmt::format(
          "stopped at {} planet(s): a planet at the residual peak (P = {:.5g} d, FAP {:.3g}) takes {:.0f} % of its "
          "chi-square gain from {} points (> {:.0f} %): a few outlying points, not a periodic signal.",
          k - 1, sc.peak_periods[0], sc.best_fap, 100.0 * share, kLeveragePoints, 100.0 * opt.max_point_share);
      out.stopped_by_outliers = true;
      break;
    }
    swapped = false;
    out.fits.push_back(std::move(fk));
    const FitResult& added = out.fits.back();
    out.steps.push_back({k, added.log_likelihood, added.n_free, added.bic, added.aicc, sc.best_fap, sc.peak_periods[0]});
    out.final_peak_fap = kNaN;
    out.final_peak_period_days = kNaN;
    if (k == opt.max_planets) out.message += fmt::format("reached max_planets = {}.", k);
  }
  out.selected_n_planets = static_cast<int>(out.fits.size()) - 1;
  return out;
}

SearchProblem search_problem(const Project& project, const VelocityData& data, const TransitData& transits) {
  SearchProblem sp;
  sp.data = data;
  sp.transits = transits;
  sp.search = project.search;
  sp.model = project.model;
  sp.priors = project.priors;
  sp.star = project.star;
  sp.transit_jitter_planets = project.transit_jitter_planets();
  // A GP's rotation period is sought near the activity indicators' strongest signal
  // (activity.h), unless [noise] rotation_period_d says where.
  if (sp.model.noise.kind == NoiseKind::kGaussianProcess && !std::isfinite(sp.model.rotation_hint_d) &&
      !data.indicators.empty()) {
    PeriodogramOptions po;
    po.min_period_days = project.search.min_period_d.value_or(0.0);
    const PeriodogramResult v = compute_periodogram(data, po);
    const ActivityResult a = analyze_activity(data, v, po, ActivityOptions{});
    if (std::isfinite(a.rotation_hint_days)) {
      sp.model.rotation_hint_d = a.rotation_hint_days;
      sp.model.rotation_hint_source = a.rotation_hint_source;
    }
  }
  return sp;
}

SearchOptions search_options(const Project& project) {
  SearchOptions so;
  so.max_planets = project.search.max_planets;
  so.fap_threshold = project.search.fap_threshold;
  so.min_bic_improvement = project.search.min_bic_improvement;
  return so;
}

}  // namespace apsides
