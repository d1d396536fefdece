#include "apsides/fit.h"

#include <fmt/format.h>

#include <Eigen/Dense>
#include <algorithm>
#include <cmath>
#include <limits>
#include <memory>
#include <nlopt.hpp>
#include <numeric>

#include "apsides/constants.h"
#include "apsides/ephemeris.h"
#include "apsides/error.h"
#include "apsides/kepler.h"
#include "apsides/model_priors.h"
#include "apsides/orbit.h"
#include "apsides/periodogram.h"
#include "kernels/kernels.h"

namespace apsides {
namespace {
using constants::kPi;
using constants::kTwoPi;
constexpr double kInf = std::numeric_limits<double>::infinity();
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr double kSiderealDayPerDay = 1.0027379093;  // sidereal days per solar day
constexpr double kYearDays = 365.25;

bool is_hk(const ModelLayout& L, std::size_t i) {
  return i < static_cast<std::size_t>(5 * L.n_planets) && (i % 5 == 2 || i % 5 == 3);
}

// Everything one evaluation needs: the data in plain arrays, which parameters are free,
// linear (profiled) or fixed, and the transit terms.
class Objective {
 public:
  Objective(const FitProblem& pb, bool use_prior)
      : pb_(pb), L_(pb.layout), use_prior_(use_prior), n_(pb.data.size()) {
    const std::size_t np = L_.n_params();
    for (std::size_t i = 0; i < np; ++i) {
      const bool fixed = pb.priors.parameter[i].kind == PriorKind::kFixed;
      const bool linear = is_linear(i);
      if (linear && !fixed) linear_.push_back(i);
      if (!linear && !fixed) nonlinear_.push_back(i);
    }
    for (int j = 0; j < L_.n_planets; ++j) {
      const TransitData td = pb.transits.size() > 0 ? pb.transits.for_planet(planet_label(j)) : TransitData{};
      if (td.size() > 0) transit_terms_.push_back({j, std::make_unique<TransitTimingLikelihood>(td, pb.data.reference_epoch_bjd)});
    }
    model_.resize(n_);
    scratch_.resize(2 * n_);
    w_.resize(n_);
  }

  bool is_linear(std::size_t i) const {
    for (int k = 0; k < L_.n_instruments; ++k)
      if (i == L_.offset_index(k)) return true;
    for (int p = 1; p <= L_.trend_order(); ++p)
      if (i == L_.trend_index(p)) return true;
    return false;
  }

  const std::vector<std::size_t>& nonlinear() const { return nonlinear_; }
  std::size_t n_transit_points() const {
    std::size_t s = 0;
    for (const auto& t : transit_terms_) s += t.second->size();
    return s;
  }
  int evaluations() const { return evaluations_; }

  // Evaluates the objective at theta (nonlinear entries as given; linear ones solved and
  // written back). Returns ln L (+ ln prior) minus the eccentricity penalty.
  double evaluate(std::vector<double>& theta) {
    ++evaluations_;
    double penalty = 0.0;
    // Planets (eccentricity kept inside the prior's limit; the excess is penalised).
    std::fill(model_.begin(), model_.end(), 0.0);
    const double* t = pb_.data.time_days.data();
    for (int j = 0; j < L_.n_planets; ++j) {
      const std::size_t k = L_.planet_index(j);
      double h = theta[k + 2], kk = theta[k + 3];
      const double emax = pb_.priors.eccentricity[static_cast<std::size_t>(j)].kind == EccentricityPriorKind::kCircular
                              ? 0.0
                              : std::clamp(std::min(pb_.priors.eccentricity[static_cast<std::size_t>(j)].max_ecc,
                                                    pb_.priors.periastron_max_eccentricity(theta[k]) - 1e-9),
                                           0.0, 1.0);
      double e = h * h + kk * kk;
      if (e >= emax && e > 0.0) {
        const double lim = std::max(emax - 1e-9, 0.0);
        penalty += 1e4 * (e - lim) * (e - lim) + 1e2 * (e - lim);
        const double s = std::sqrt(lim / e);
        h *= s;
        kk *= s;
        e = h * h + kk * kk;
      }
      const double P = theta[k], K = theta[k + 1], tc = theta[k + 4];
      if (!(P > 0.0) || !std::isfinite(P) || !std::isfinite(K) || !std::isfinite(tc)) return -kInf;
      const double w = (h == 0.0 && kk == 0.0) ? 0.0 : std::atan2(kk, h);
      const double M0 = mean_anomaly_at_conjunction(e, w) - kTwoPi * tc / P;
      const kernels::KeplerTerm term{kTwoPi / P, M0, K, e, w};
      kernels::add_keplerians(t, n_, &term, 1, model_.data());
    }
    // Weights.
    for (std::size_t i = 0; i < n_; ++i) {
      const double s = pb_.data.uncertainty_m_s[i];
      double j = 0.0;
      if (L_.fit_jitter) j = theta[L_.jitter_index(pb_.data.instrument[i])];
      if (!(j >= 0.0) || !std::isfinite(j)) return -kInf;
      w_[i] = 1.0 / (s * s + j * j);
    }
    // Linear parameters by weighted least squares on y - planets - fixed linear terms.
    if (!solve_linear(theta)) return -kInf;
    double lnl = 0.0;
    for (std::size_t i = 0; i < n_; ++i) {
      const double r = pb_.data.velocity_m_s[i] - model_[i] - linear_value(theta, i);
      lnl += r * r * w_[i] - std::log(w_[i]);
    }
    lnl = -0.5 * (lnl + static_cast<double>(n_) * std::log(kTwoPi));
    for (const auto& [j, term] : transit_terms_) {
      const std::size_t k = L_.planet_index(j);
      lnl += term->log_likelihood(theta[k], theta[k + 4], transit_jitter(theta, j));
    }
    if (!std::isfinite(lnl)) return -kInf;
    double value = lnl - penalty;
    if (use_prior_) {
      const double lp = prior_density(theta);
      if (!std::isfinite(lp)) return -kInf;
      value += lp;
    }
    return value;
  }

  // Log prior density with the eccentricity taken at its (clamped) value and no
  // ordering constraint (planets are sorted after the fit).
  double prior_density(const std::vector<double>& theta) const {
    double lp = 0.0;
    for (std::size_t i = 0; i < theta.size(); ++i) {
      if (is_hk(L_, i)) continue;
      const Prior& p = pb_.priors.parameter[i];
      if (p.kind == PriorKind::kFixed) continue;
      double x = std::clamp(theta[i], p.lower(), p.upper());
      lp += p.log_density(x);
    }
    for (int j = 0; j < L_.n_planets; ++j) {
      const std::size_t k = L_.planet_index(j);
      const auto& ep = pb_.priors.eccentricity[static_cast<std::size_t>(j)];
      if (ep.kind == EccentricityPriorKind::kCircular) continue;
      double h = theta[k + 2], kk = theta[k + 3];
      const double e = h * h + kk * kk;
      const double emax = std::min(ep.max_ecc, pb_.priors.periastron_max_eccentricity(theta[k]));
      if (e >= emax && e > 0.0) {
        const double s = std::sqrt(std::max(emax - 1e-9, 0.0) / e);
        h *= s;
        kk *= s;
      }
      lp += ep.log_density_hk(h, kk);
    }
    return lp;
  }

  double transit_log_likelihood(const std::vector<double>& theta) const {
    double s = 0.0;
    for (const auto& [j, term] : transit_terms_) {
      const std::size_t k = L_.planet_index(j);
      s += term->log_likelihood(theta[k], theta[k + 4], transit_jitter(theta, j));
    }
    return s;
  }
  double transit_jitter(const std::vector<double>& theta, int planet) const {
    const long i = L_.transit_jitter_index(planet);
    return i >= 0 ? theta[static_cast<std::size_t>(i)] : 0.0;
  }

 private:
  double linear_value(const std::vector<double>& theta, std::size_t i) const {
    double v = theta[L_.offset_index(pb_.data.instrument[i])];
    const double ti = pb_.data.time_days[i];
    if (L_.trend_order() >= 1) v += theta[L_.trend_index(1)] * ti;
    if (L_.trend_order() >= 2) v += theta[L_.trend_index(2)] * ti * ti;
    return v;
  }
  double column(std::size_t param, std::size_t i) const {
    for (int k = 0; k < L_.n_instruments; ++k)
      if (param == L_.offset_index(k)) return pb_.data.instrument[i] == k ? 1.0 : 0.0;
    const double ti = pb_.data.time_days[i];
    if (L_.trend_order() >= 1 && param == L_.trend_index(1)) return ti;
    return ti * ti;
  }
  bool solve_linear(std::vector<double>& theta) {
    const std::size_t m = linear_.size();
    if (m == 0) return true;
    // Fixed linear parameters stay in the model; free ones are zeroed and solved for.
    for (std::size_t c : linear_) theta[c] = 0.0;
    Eigen::MatrixXd A = Eigen::MatrixXd::Zero(static_cast<Eigen::Index>(m), static_cast<Eigen::Index>(m));
    Eigen::VectorXd b = Eigen::VectorXd::Zero(static_cast<Eigen::Index>(m));
    std::vector<double> x(m);
    for (std::size_t i = 0; i < n_; ++i) {
      const double y = pb_.data.velocity_m_s[i] - model_[i] - linear_value(theta, i);
      for (std::size_t a = 0; a < m; ++a) x[a] = column(linear_[a], i);
      for (std::size_t a = 0; a < m; ++a) {
        if (x[a] == 0.0) continue;
        const double wa = w_[i] * x[a];
        b(static_cast<Eigen::Index>(a)) += wa * y;
        for (std::size_t c = 0; c < m; ++c) A(static_cast<Eigen::Index>(a), static_cast<Eigen::Index>(c)) += wa * x[c];
      }
    }
    Eigen::LDLT<Eigen::MatrixXd> ldlt(A);
    if (ldlt.info() != Eigen::Success || !(ldlt.vectorD().minCoeff() > 1e-14 * ldlt.vectorD().maxCoeff())) return false;
    const Eigen::VectorXd sol = ldlt.solve(b);
    for (std::size_t a = 0; a < m; ++a) {
      if (!std::isfinite(sol(static_cast<Eigen::Index>(a)))) return false;
      theta[linear_[a]] = sol(static_cast<Eigen::Index>(a));
    }
    return true;
  }

  const FitProblem& pb_;
  ModelLayout L_;
  bool use_prior_;
  std::size_t n_;
  std::vector<std::size_t> linear_, nonlinear_;
  std::vector<std::pair<int, std::unique_ptr<TransitTimingLikelihood>>> transit_terms_;
  std::vector<double> model_, scratch_, w_;
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

// Bounds of parameter i for a run starting at theta: the prior support, finite; t_conj
// kept within one period of its start (the likelihood repeats every period).
std::pair<double, double> bounds_for(const FitProblem& pb, const std::vector<double>& theta, std::size_t i) {
  const ModelLayout& L = pb.layout;
  const Prior& p = pb.priors.parameter[i];
  double lo = p.lower(), hi = p.upper();
  if (is_hk(L, i)) return {-1.0, 1.0};
  if (i < static_cast<std::size_t>(5 * L.n_planets) && i % 5 == 4) {
    const double P = theta[i - 4];
    lo = std::max(lo, theta[i] - P);
    hi = std::min(hi, theta[i] + P);
  }
  if (!std::isfinite(lo)) lo = p.kind == PriorKind::kNormal ? p.a - 20.0 * p.b : -1e12;
  if (!std::isfinite(hi)) {
    if (p.kind == PriorKind::kHalfNormal) hi = 8.0 * p.a;
    else if (p.kind == PriorKind::kNormal) hi = p.a + 20.0 * p.b;
    else hi = 1e12;
  }
  return {lo, hi};
}

double initial_step(const FitProblem& pb, const std::vector<double>& theta, std::size_t i, double width) {
  const ModelLayout& L = pb.layout;
  const double T = std::max(pb.data.baseline_days(), 1.0);
  if (i < static_cast<std::size_t>(5 * L.n_planets)) {
    const std::size_t slot = i % 5;
    const double P = theta[i - slot];
    switch (slot) {
      case 0: return 0.1 * P * P / T;               // a tenth of a peak width
      case 1: return std::max(0.1 * std::fabs(theta[i]), 0.2);
      case 2:
      case 3: return 0.1;
      default: return 0.05 * P;
    }
  }
  for (int j : L.transit_jitter_planets)
    if (static_cast<long>(i) == L.transit_jitter_index(j)) return 0.3 * std::max(width / 8.0, 1e-6);
  return std::max(0.1 * std::fabs(theta[i]), 0.2 * std::max(width * 1e-3, 0.1));
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
  for (std::size_t a = 0; a < d; ++a) {
    const std::size_t i = which[a];
    auto [l, h] = bounds_for(pb, theta, i);
    lo[a] = l;
    hi[a] = h;
    x[a] = std::clamp(theta[i], l, h);
    step[a] = std::min(initial_step(pb, theta, i, h - l), 0.25 * (h - l));
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

Residuals residuals_of(const FitProblem& pb, const std::vector<double>& theta) {
  KeplerianModel km(pb.data, pb.layout);
  Residuals out;
  out.r = km.residuals(theta);
  out.sigma.resize(out.r.size());
  for (std::size_t i = 0; i < out.r.size(); ++i) {
    const double s = pb.data.uncertainty_m_s[i];
    const double j = pb.layout.fit_jitter ? theta[pb.layout.jitter_index(pb.data.instrument[i])] : 0.0;
    out.sigma[i] = std::sqrt(s * s + j * j);
  }
  return out;
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

void wrap_and_sort(const FitProblem& pb, std::vector<double>& theta) {
  const ModelLayout& L = pb.layout;
  // Planets named by transit times keep their slot; the others are sorted by period
  // into the remaining slots.
  std::vector<Planet> ps, free;
  for (int j = 0; j < L.n_planets; ++j) {
    ps.push_back(planet_from(theta, L, j));
    if (!pb.priors.is_label_fixed(j)) free.push_back(ps.back());
  }
  std::stable_sort(free.begin(), free.end(), [](const Planet& a, const Planet& b) { return a.period_days < b.period_days; });
  for (int j = 0, f = 0; j < L.n_planets; ++j)
    if (!pb.priors.is_label_fixed(j)) ps[static_cast<std::size_t>(j)] = free[static_cast<std::size_t>(f++)];
  for (int j = 0; j < L.n_planets; ++j) {
    Planet p = ps[static_cast<std::size_t>(j)];
    const Prior& tp = pb.priors.parameter[L.planet_index(j) + 4];
    const double mid = std::isfinite(tp.lower()) && std::isfinite(tp.upper()) ? 0.5 * (tp.lower() + tp.upper()) : 0.0;
    p.t_conj_days -= p.period_days * std::round((p.t_conj_days - mid) / p.period_days);
    put_planet(theta, L, j, p);
  }
}

std::vector<double> initial_theta(const FitProblem& pb) {
  const ModelLayout& L = pb.layout;
  std::vector<double> th(L.n_params(), 0.0);
  for (std::size_t i = 0; i < th.size(); ++i) {
    const Prior& p = pb.priors.parameter[i];
    if (p.kind == PriorKind::kFixed) th[i] = p.a;
  }
  if (L.fit_jitter) {
    for (int k = 0; k < L.n_instruments; ++k) {
      const Prior& p = pb.priors.parameter[L.jitter_index(k)];
      if (p.kind != PriorKind::kFixed) th[L.jitter_index(k)] = std::clamp(1.0, p.lower(), std::isfinite(p.upper()) ? p.upper() : 1.0);
    }
  }
  return th;
}

void finish_result(const FitProblem& pb, Objective& obj, FitResult& res, std::vector<double> theta) {
  const ModelLayout& L = pb.layout;
  wrap_and_sort(pb, theta);
  Objective plain(pb, false);
  const double lnl = plain.evaluate(theta);  // also solves the linear parameters
  res.theta = theta;
  res.log_likelihood = lnl;
  res.log_likelihood_transits = plain.transit_log_likelihood(theta);
  res.log_prior = pb.priors.log_density(theta, L.n_planets);
  res.log_posterior = res.log_likelihood + res.log_prior;
  KeplerianModel km(pb.data, L);
  res.chi2 = km.chi_square(theta);
  res.residuals_m_s = km.residuals(theta);
  res.rms_m_s.assign(static_cast<std::size_t>(L.n_instruments), 0.0);
  std::vector<std::size_t> cnt(static_cast<std::size_t>(L.n_instruments), 0);
  for (std::size_t i = 0; i < res.residuals_m_s.size(); ++i) {
    const auto k = static_cast<std::size_t>(pb.data.instrument[i]);
    res.rms_m_s[k] += res.residuals_m_s[i] * res.residuals_m_s[i];
    ++cnt[k];
  }
  for (std::size_t k = 0; k < cnt.size(); ++k) res.rms_m_s[k] = cnt[k] ? std::sqrt(res.rms_m_s[k] / static_cast<double>(cnt[k])) : kNaN;
  int k = 0;
  for (const Prior& p : pb.priors.parameter)
    if (p.kind != PriorKind::kFixed) ++k;
  res.n_free = k;
  res.n_points = pb.data.size() + obj.n_transit_points();
  const double n = static_cast<double>(res.n_points);
  res.bic = k * std::log(n) - 2.0 * lnl;
  res.aicc = 2.0 * k - 2.0 * lnl + (n - k - 1.0 > 0.0 ? 2.0 * k * (k + 1.0) / (n - k - 1.0) : kInf);
}

}  // namespace

FitResult fit_map(const FitProblem& pb, const FitOptions& opt) {
  if (const std::string msg = opt.Validate(); !msg.empty()) throw InputError("fit options: " + msg);
  const ModelLayout& L = pb.layout;
  if (pb.priors.parameter.size() != L.n_params() ||
      pb.priors.eccentricity.size() != static_cast<std::size_t>(L.n_planets))
    throw InputError("fit: the priors do not match the model layout");
  FitResult res;
  res.layout = L;
  res.instrument_names = pb.data.instrument_names;
  res.names = L.names(pb.data.instrument_names);
  res.reference_epoch_bjd = pb.data.reference_epoch_bjd;
  Objective obj(pb, opt.use_prior_density);
  {
    int k = 0;
    for (const Prior& p : pb.priors.parameter)
      if (p.kind != PriorKind::kFixed) ++k;
    if (static_cast<int>(pb.data.size() + obj.n_transit_points()) <= k)
      throw InputError(fmt::format("{}: {} data points are too few to fit {} free parameters ({} planet(s))",
                                   pb.data.sources(), pb.data.size() + obj.n_transit_points(), k, L.n_planets));
  }
  for (std::size_t s = 0; s < opt.starts.size(); ++s) {
    if (opt.starts[s].size() != L.n_params())
      throw InputError(fmt::format("fit: start {} has {} values; the model has {} parameters", s + 1,
                                   opt.starts[s].size(), L.n_params()));
    std::vector<double> th = opt.starts[s];
    // Linear parameters are profiled: only the others must lie inside the priors.
    Objective tmp(pb, false);
    tmp.evaluate(th);
    require_in_support(pb.priors, L, pb.data.instrument_names, th, fmt::format("fit start {}", s + 1));
  }

  const std::vector<std::size_t>& all = obj.nonlinear();
  std::vector<LocalRun> runs;
  const int max_eval = opt.max_evaluations;
  if (!opt.starts.empty()) {
    for (const auto& s : opt.starts) {
      LocalRun r = optimize(obj, pb, opt, s, all, max_eval);
      r = optimize(obj, pb, opt, r.theta, all, max_eval);  // a restart polishes BOBYQA's model
      runs.push_back(std::move(r));
    }
  } else {
    std::vector<double> base = initial_theta(pb);
    const int n_known = std::min(static_cast<int>(opt.known_planets.size()), L.n_planets);
    for (int j = 0; j < n_known; ++j) put_planet(base, L, j, opt.known_planets[static_cast<std::size_t>(j)]);
    std::vector<std::size_t> not_planets;
    for (std::size_t i : all)
      if (i >= static_cast<std::size_t>(5 * L.n_planets)) not_planets.push_back(i);
    // Fit what is known first (jitters with the known planets).
    {
      FitProblem sub = pb;
      sub.layout.n_planets = n_known;
      // Build the sub-problem's theta: known planets + instruments + trend.
      std::vector<double> ts;
      for (int j = 0; j < n_known; ++j)
        for (int q = 0; q < 5; ++q) ts.push_back(base[L.planet_index(j) + static_cast<std::size_t>(q)]);
      for (std::size_t i = static_cast<std::size_t>(5 * L.n_planets); i < base.size(); ++i) ts.push_back(base[i]);
      sub.priors.parameter.clear();
      for (int j = 0; j < n_known; ++j)
        for (int q = 0; q < 5; ++q) sub.priors.parameter.push_back(pb.priors.parameter[L.planet_index(j) + static_cast<std::size_t>(q)]);
      for (std::size_t i = static_cast<std::size_t>(5 * L.n_planets); i < base.size(); ++i) sub.priors.parameter.push_back(pb.priors.parameter[i]);
      sub.priors.eccentricity.assign(pb.priors.eccentricity.begin(), pb.priors.eccentricity.begin() + n_known);
      Objective so(sub, opt.use_prior_density);
      LocalRun r = optimize(so, sub, opt, ts, so.nonlinear(), max_eval);
      res.evaluations += so.evaluations();
      for (int j = 0; j < n_known; ++j)
        for (int q = 0; q < 5; ++q) base[L.planet_index(j) + static_cast<std::size_t>(q)] = r.theta[static_cast<std::size_t>(5 * j + q)];
      for (std::size_t i = static_cast<std::size_t>(5 * L.n_planets); i < base.size(); ++i)
        base[i] = r.theta[i - static_cast<std::size_t>(5 * (L.n_planets - n_known))];
      if (n_known == L.n_planets) runs.push_back(optimize(obj, pb, opt, base, all, max_eval));
    }
    // Seed the remaining planets one at a time.
    for (int j = n_known; j < L.n_planets; ++j) {
      // Residuals of the model with planets 0..j-1 (this layout, later planets K = 0).
      std::vector<double> th = base;
      for (int q = j; q < L.n_planets; ++q) {
        const std::size_t k = L.planet_index(q);
        th[k] = pb.priors.parameter[k].lower() > 0 ? std::max(pb.priors.parameter[k].lower(), 1.0) : 1.0;
        th[k + 1] = 0.0;
        th[k + 2] = th[k + 3] = 0.0;
        th[k + 4] = 0.0;
      }
      obj.evaluate(th);  // profiles offsets and trend
      const Residuals rs = residuals_of(pb, th);
      const std::size_t kj = L.planet_index(j);
      const Prior& pp = pb.priors.parameter[kj];
      double pmin = pp.lower(), pmax = pp.upper();
      if (!std::isfinite(pmax) || !(pmin > 0.0)) {
        const double c = pp.kind == PriorKind::kFixed ? pp.a : pp.a;
        pmin = std::max(pmin, c * 0.9);
        pmax = std::isfinite(pmax) ? pmax : c * 1.1;
      }
      std::vector<double> peaks = opt.seed_periods_days;
      if (pp.kind == PriorKind::kFixed) peaks = {pp.a};
      if (peaks.empty()) peaks = scan_residuals(pb.data, rs, pmin, pmax, opt.oversample, opt.n_peaks).peak_periods;
      const double T = std::max(pb.data.baseline_days(), 1.0);
      std::vector<double> cands = candidate_periods(peaks, opt.add_aliases, pmin, pmax);
      if (pp.kind == PriorKind::kFixed) cands = {pp.a};
      const std::vector<double> fine = pp.kind == PriorKind::kFixed ? cands : refine_periods(cands, T, pmin, pmax);
      std::vector<double> w(rs.sigma.size());
      for (std::size_t i = 0; i < w.size(); ++i) w[i] = 1.0 / (rs.sigma[i] * rs.sigma[i]);
      const auto& ep = pb.priors.eccentricity[static_cast<std::size_t>(j)];
      const bool circ = ep.kind == EccentricityPriorKind::kCircular;
      // Residuals with the linear terms added back: the grid re-solves offsets and trend.
      std::vector<double> rr = rs.r;
      const std::size_t keep = static_cast<std::size_t>(2 * opt.joint_starts + 2);
      std::vector<Seed> seeds = grid_seeds(pb.data, rr, w, L, fine, circ ? 0.0 : ep.max_ecc, opt.eccentric_seeds && !circ, keep);
      // Stage 1: the new planet alone (with jitters), from each seed.
      std::vector<std::size_t> new_only;
      for (std::size_t i : all)
        if ((i >= kj && i < kj + 5) || i >= static_cast<std::size_t>(5 * L.n_planets)) new_only.push_back(i);
      std::vector<LocalRun> stage1;
      for (const Seed& s : seeds) {
        std::vector<double> t0 = th;
        Planet p = s.planet;
        const Prior& kp = pb.priors.parameter[kj + 1];
        p.semi_amplitude_m_s = std::clamp(p.semi_amplitude_m_s, kp.lower(), std::isfinite(kp.upper()) ? kp.upper() : p.semi_amplitude_m_s);
        if (circ) p.sqrt_e_cos_omega = p.sqrt_e_sin_omega = 0.0;
        const Prior& tp = pb.priors.parameter[kj + 4];
        const double mid = std::isfinite(tp.lower()) && std::isfinite(tp.upper()) ? 0.5 * (tp.lower() + tp.upper()) : 0.0;
        p.t_conj_days -= p.period_days * std::round((p.t_conj_days - mid) / p.period_days);
        put_planet(t0, L, j, p);
        stage1.push_back(optimize(obj, pb, opt, t0, new_only, std::max(100, max_eval / 4)));
      }
      std::stable_sort(stage1.begin(), stage1.end(), [](const LocalRun& a, const LocalRun& b) { return a.value > b.value; });
      if (stage1.empty()) break;
      if (j + 1 < L.n_planets) {
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
  for (int j = 0; j < fit.layout.n_planets; ++j) {
    const Planet p = planet_from(fit.theta, fit.layout, j);
    PlanetSummary s;
    s.label = planet_label(j);
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
  for (const FitResult& f : result.fits)
    for (int j = 0; j < f.layout.n_planets; ++j) {
      const Planet p = planet_from(f.theta, f.layout, j);
      out.push_back({p.period_days, p.semi_amplitude_m_s, p.t_conj_days});
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

SearchResult search_planets(const SearchProblem& sp, const SearchOptions& opt) {
  if (const std::string msg = opt.Validate(); !msg.empty()) throw InputError("search options: " + msg);
  SearchResult out;
  FitOptions fo = opt.fit;
  fo.starts.clear();
  fo.known_planets.clear();
  fo.seed_periods_days.clear();
  FitProblem pb0 = make_fit_problem(sp, 0);
  FitResult fit = fit_map(pb0, fo);
  if (!fit.success()) {
    out.message = "Planet search stopped: the fit without planets failed: " + fit.message;
    out.fits.push_back(fit);
    out.steps.push_back({0, fit.log_likelihood, fit.n_free, fit.bic, fit.aicc, kNaN, kNaN});
    return out;
  }
  out.fits.push_back(fit);
  out.steps.push_back({0, fit.log_likelihood, fit.n_free, fit.bic, fit.aicc, kNaN, kNaN});
  const PeriodRange range = default_period_range(sp.data, sp.search);
  out.message = "Planet search: ";
  for (int k = 1; k <= opt.max_planets; ++k) {
    const FitResult& prev = out.fits.back();
    FitProblem prev_pb = make_fit_problem(sp, k - 1);
    const Residuals rs = residuals_of(prev_pb, prev.theta);
    const ResidualScan sc = scan_residuals(sp.data, rs, range.min_days, range.max_days, fo.oversample, fo.n_peaks);
    out.final_peak_fap = sc.best_fap;
    out.final_peak_period_days = sc.peak_periods.empty() ? kNaN : sc.peak_periods[0];
    if (sc.peak_periods.empty() || !(sc.best_fap < opt.fap_threshold)) {
      out.message += fmt::format("stopped at {} planet(s): the strongest residual peak (P = {:.5g} d) has FAP {:.3g} >= {:.3g}.",
                                 k - 1, out.final_peak_period_days, sc.best_fap, opt.fap_threshold);
      break;
    }
    FitProblem pb = make_fit_problem(sp, k);
    FitOptions f = fo;
    for (int j = 0; j < k - 1; ++j) f.known_planets.push_back(planet_from(prev.theta, prev.layout, j));
    f.seed_periods_days = sc.peak_periods;
    FitResult fk = fit_map(pb, f);
    if (!fk.success()) {
      out.message += fmt::format("stopped: the {}-planet fit failed ({}).", k, fk.message);
      break;
    }
    out.fits.push_back(fk);
    out.steps.push_back({k, fk.log_likelihood, fk.n_free, fk.bic, fk.aicc, sc.best_fap, sc.peak_periods[0]});
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
  return sp;
}

SearchOptions search_options(const Project& project) {
  SearchOptions so;
  so.max_planets = project.search.max_planets;
  so.fap_threshold = project.search.fap_threshold;
  return so;
}

}  // namespace apsides
