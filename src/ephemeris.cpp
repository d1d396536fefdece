#include "apsides/ephemeris.h"

#include <fmt/format.h>

#include <Eigen/Dense>
#include <algorithm>
#include <boost/math/tools/minima.hpp>
#include <boost/math/tools/toms748_solve.hpp>
#include <cmath>
#include <numeric>

#include "apsides/error.h"
#include "apsides/periodogram.h"

namespace apsides {

namespace {

constexpr double kTwoPi = 6.283185307179586476925286766559;
constexpr double kMinutesPerDay = 1440.0;
// TT - TAI, exact by definition (IAU 1991 Resolution A4; common practice).
constexpr double kTtMinusTaiSeconds = 32.184;
constexpr double kSecondsPerDay = 86400.0;
constexpr double kDaysPerJulianYear = 365.25;

// Weighted least squares on the whitened design matrix. Returns coefficients and the
// unscaled covariance (X^T W X)^-1, chi2.
struct WlsSolution {
  Eigen::VectorXd beta;
  Eigen::MatrixXd cov;
  double chi2 = 0.0;
  bool ok = false;
};

WlsSolution solve_wls(const Eigen::MatrixXd& x, const Eigen::VectorXd& y, const Eigen::VectorXd& sigma) {
  WlsSolution s;
  const Eigen::MatrixXd a = sigma.cwiseInverse().asDiagonal() * x;
  const Eigen::VectorXd b = y.cwiseQuotient(sigma);
  Eigen::ColPivHouseholderQR<Eigen::MatrixXd> qr(a);
  if (qr.rank() < x.cols()) return s;
  s.beta = qr.solve(b);
  // (A^T A)^-1 = P R^-1 R^-T P^T from the same decomposition (no normal equations).
  const Eigen::Index k = x.cols();
  const Eigen::MatrixXd r = qr.matrixR().topLeftCorner(k, k).triangularView<Eigen::Upper>();
  const Eigen::MatrixXd rinv =
      r.triangularView<Eigen::Upper>().solve(Eigen::MatrixXd::Identity(k, k));
  const Eigen::MatrixXd cov_perm = rinv * rinv.transpose();
  s.cov = qr.colsPermutation() * cov_perm * qr.colsPermutation().transpose();
  s.chi2 = (a * s.beta - b).squaredNorm();
  s.ok = s.beta.allFinite() && s.cov.allFinite();
  return s;
}

PolynomialEphemeris fit_polynomial(const std::vector<double>& m, const std::vector<double>& t,
                                   const std::vector<double>& sigma, int n_coef, bool scale) {
  const auto n = static_cast<Eigen::Index>(m.size());
  Eigen::MatrixXd x(n, n_coef);
  Eigen::VectorXd y(n), s(n);
  for (Eigen::Index i = 0; i < n; ++i) {
    const double mi = m[static_cast<std::size_t>(i)];
    x(i, 0) = 1.0;
    if (n_coef > 1) x(i, 1) = mi;
    if (n_coef > 2) x(i, 2) = 0.5 * mi * mi;
    y(i) = t[static_cast<std::size_t>(i)];
    s(i) = sigma[static_cast<std::size_t>(i)];
  }
  PolynomialEphemeris p;
  const WlsSolution w = solve_wls(x, y, s);
  if (!w.ok) return p;
  p.dof = static_cast<int>(n) - n_coef;
  p.chi2 = w.chi2;
  p.bic = w.chi2 + n_coef * std::log(static_cast<double>(n));
  if (scale && p.dof > 0 && p.chi2 / p.dof > 1.0) p.scale_factor = p.chi2 / p.dof;
  p.coefficients.assign(w.beta.data(), w.beta.data() + n_coef);
  p.covariance.assign(static_cast<std::size_t>(n_coef), std::vector<double>(static_cast<std::size_t>(n_coef)));
  for (int i = 0; i < n_coef; ++i)
    for (int j = 0; j < n_coef; ++j)
      p.covariance[static_cast<std::size_t>(i)][static_cast<std::size_t>(j)] = w.cov(i, j) * p.scale_factor;
  return p;
}

std::vector<double> basis(double m, std::size_t k) {
  std::vector<double> b{1.0, m, 0.5 * m * m};
  b.resize(k);
  return b;
}

// Sinusoid model pieces at offset m from n_ref.
struct SinusoidFit {
  double chi2 = std::numeric_limits<double>::infinity();
  Eigen::VectorXd beta;  // T_ref, P, a, b
};

SinusoidFit fit_sinusoid_at(double nu, const std::vector<double>& m, const std::vector<double>& t,
                            const std::vector<double>& sigma) {
  const auto n = static_cast<Eigen::Index>(m.size());
  Eigen::MatrixXd x(n, 4);
  Eigen::VectorXd y(n), s(n);
  for (Eigen::Index i = 0; i < n; ++i) {
    const double mi = m[static_cast<std::size_t>(i)];
    x(i, 0) = 1.0;
    x(i, 1) = mi;
    x(i, 2) = std::sin(kTwoPi * nu * mi);
    x(i, 3) = std::cos(kTwoPi * nu * mi);
    y(i) = t[static_cast<std::size_t>(i)];
    s(i) = sigma[static_cast<std::size_t>(i)];
  }
  SinusoidFit f;
  const WlsSolution w = solve_wls(x, y, s);
  if (!w.ok) return f;
  f.chi2 = w.chi2;
  f.beta = w.beta;
  return f;
}

// Days since 1970-01-01 of a proleptic Gregorian date (H. Hinnant's civil algorithms).
long long days_from_civil(long long y, unsigned m, unsigned d) {
  y -= m <= 2;
  const long long era = (y >= 0 ? y : y - 399) / 400;
  const auto yoe = static_cast<unsigned>(y - era * 400);
  const unsigned doy = (153 * (m + (m > 2 ? -3 : 9)) + 2) / 5 + d - 1;
  const unsigned doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
  return era * 146097 + static_cast<long long>(doe) - 719468;
}

void civil_from_days(long long z, long long& y, unsigned& m, unsigned& d) {
  z += 719468;
  const long long era = (z >= 0 ? z : z - 146096) / 146097;
  const auto doe = static_cast<unsigned>(z - era * 146097);
  const unsigned yoe = (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;
  y = static_cast<long long>(yoe) + era * 400;
  const unsigned doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
  const unsigned mp = (5 * doy + 2) / 153;
  d = doy - (153 * mp + 2) / 5 + 1;
  m = mp < 10 ? mp + 3 : mp - 9;
  y += m <= 2;
}

constexpr double kJdUnixEpoch = 2440587.5;

std::string fmt_minutes_or_days(double days, bool minutes) {
  return minutes ? fmt::format("{:9.3f}", days * kMinutesPerDay) : fmt::format("{:11.7f}", days);
}

}  // namespace

// ---- enums and options ------------------------------------------------------------------

std::string to_string(EphemerisModel model) {
  switch (model) {
    case EphemerisModel::kAuto: return "auto";
    case EphemerisModel::kLinear: return "linear";
    case EphemerisModel::kQuadratic: return "quadratic";
    case EphemerisModel::kSinusoid: return "sinusoid";
  }
  return "linear";
}

EphemerisModel parse_ephemeris_model(const std::string& text, const std::string& where) {
  if (text == "auto") return EphemerisModel::kAuto;
  if (text == "linear") return EphemerisModel::kLinear;
  if (text == "quadratic") return EphemerisModel::kQuadratic;
  if (text == "sinusoid" || text == "ttv") return EphemerisModel::kSinusoid;
  throw InputError(fmt::format("{} = {}: must be auto, linear, quadratic or sinusoid", where, text));
}

std::string EphemerisOptions::Validate() const {
  if (!(outlier_sigma > 0.0) || !std::isfinite(outlier_sigma))
    return fmt::format("outlier_sigma = {}: must be > 0", outlier_sigma);
  if (!std::isfinite(ttv_min_period_epochs) || (ttv_min_period_epochs > 0.0 && ttv_min_period_epochs < 2.0))
    return fmt::format("ttv_min_period_epochs = {}: must be >= 2 (the Nyquist period of one sample per orbit)",
                       ttv_min_period_epochs);
  if (!std::isfinite(ttv_max_period_epochs) ||
      (ttv_max_period_epochs > 0.0 && ttv_min_period_epochs > 0.0 && ttv_max_period_epochs <= ttv_min_period_epochs))
    return fmt::format("ttv_max_period_epochs = {}: must be > ttv_min_period_epochs", ttv_max_period_epochs);
  if (!(ttv_oversample >= 1.0) || !std::isfinite(ttv_oversample))
    return fmt::format("ttv_oversample = {}: must be >= 1", ttv_oversample);
  if (!(companion_period_days >= 0.0) || !std::isfinite(companion_period_days))
    return fmt::format("companion_period_days = {}: must be >= 0 (0 = none)", companion_period_days);
  if (n_next < 0) return fmt::format("n_next = {}: must be >= 0", n_next);
  if (max_predictions < 1) return fmt::format("max_predictions = {}: must be >= 1", max_predictions);
  if (!(model_delta_bic > 0.0) || !std::isfinite(model_delta_bic))
    return fmt::format("model_delta_bic = {}: must be > 0", model_delta_bic);
  if (std::isinf(from_bjd)) return "from_bjd = inf: must be a finite BJD_TDB";
  if (std::isinf(to_bjd)) return "to_bjd = inf: must be a finite BJD_TDB";
  if (!std::isnan(to_bjd) && std::isnan(from_bjd)) return fmt::format("to_bjd = {}: needs from_bjd as well", to_bjd);
  if (!std::isnan(to_bjd) && !(to_bjd > from_bjd))
    return fmt::format("to_bjd = {:.6f}: must be after from_bjd = {:.6f}", to_bjd, from_bjd);
  return "";
}

// ---- polynomial and sinusoid evaluation -------------------------------------------------

double PolynomialEphemeris::time_at(double n, long long n_ref) const {
  const auto b = basis(n - static_cast<double>(n_ref), coefficients.size());
  double t = 0.0;
  for (std::size_t k = 0; k < b.size(); ++k) t += coefficients[k] * b[k];
  return t;
}

double PolynomialEphemeris::sigma_at(double n, long long n_ref) const {
  const auto b = basis(n - static_cast<double>(n_ref), coefficients.size());
  double v = 0.0;
  for (std::size_t i = 0; i < b.size(); ++i)
    for (std::size_t j = 0; j < b.size(); ++j) v += b[i] * covariance[i][j] * b[j];
  return std::sqrt(std::max(v, 0.0));
}

namespace {
// d/d(T_ref, P, nu, a, b) of T = T_ref + m P + a sin(2 pi nu m) + b cos(2 pi nu m).
std::array<double, 5> sinusoid_gradient(double nu, double a, double b, double m) {
  const double ph = kTwoPi * nu * m;
  const double s = std::sin(ph), c = std::cos(ph);
  return {1.0, m, kTwoPi * m * (a * c - b * s), s, c};
}
std::array<double, 5> sinusoid_gradient(const TtvResult& r, double m) {
  return sinusoid_gradient(r.nu_per_epoch, r.a_days, r.b_days, m);
}
}  // namespace

double TtvResult::sinusoid_time_at(double n, long long n_ref) const {
  const double m = n - static_cast<double>(n_ref);
  const double ph = kTwoPi * nu_per_epoch * m;
  return t_ref_days + m * period_fit_days + a_days * std::sin(ph) + b_days * std::cos(ph);
}

double TtvResult::sinusoid_sigma_at(double n, long long n_ref) const {
  const auto g = sinusoid_gradient(*this, n - static_cast<double>(n_ref));
  double v = 0.0;
  for (int i = 0; i < 5; ++i)
    for (int j = 0; j < 5; ++j) v += g[i] * covariance[i][j] * g[j];
  return std::sqrt(std::max(v, 0.0));
}

// ---- super-periods ----------------------------------------------------------------------

double super_period_days(double p_inner_days, double p_outer_days, int j) {
  return 1.0 / std::fabs(j / p_outer_days - (j - 1) / p_inner_days);
}

std::vector<ResonanceSuperPeriod> near_resonance_super_periods(double transiting_period_days,
                                                               double companion_period_days) {
  std::vector<ResonanceSuperPeriod> out;
  if (!(transiting_period_days > 0.0) || !(companion_period_days > 0.0) ||
      transiting_period_days == companion_period_days)
    return out;
  const double p_in = std::min(transiting_period_days, companion_period_days);
  const double p_out = std::max(transiting_period_days, companion_period_days);
  const double ratio = p_out / p_in;
  // P_out / P_in = j / (j - 1) exactly at resonance: j = ratio / (ratio - 1).
  const double j_exact = ratio / (ratio - 1.0);
  const int j_lo = std::max(2, static_cast<int>(std::floor(j_exact)));
  for (int j : {j_lo, j_lo + 1}) {
    if (j > 1000) break;
    ResonanceSuperPeriod r;
    r.j = j;
    r.delta = ratio * (j - 1.0) / j - 1.0;
    r.super_period_days = super_period_days(p_in, p_out, j);
    r.super_period_epochs = r.super_period_days / transiting_period_days;
    out.push_back(r);
  }
  return out;
}

// ---- time scales ------------------------------------------------------------------------

double tai_minus_utc_seconds(double jd_utc) {
  // IERS Bulletin C: dates (UTC, 0h) from which TAI - UTC takes the value.
  struct Step { int y, m, d; double s; };
  static constexpr Step kSteps[] = {
      {1972, 1, 1, 10}, {1972, 7, 1, 11}, {1973, 1, 1, 12}, {1974, 1, 1, 13}, {1975, 1, 1, 14},
      {1976, 1, 1, 15}, {1977, 1, 1, 16}, {1978, 1, 1, 17}, {1979, 1, 1, 18}, {1980, 1, 1, 19},
      {1981, 7, 1, 20}, {1982, 7, 1, 21}, {1983, 7, 1, 22}, {1985, 7, 1, 23}, {1988, 1, 1, 24},
      {1990, 1, 1, 25}, {1991, 1, 1, 26}, {1992, 7, 1, 27}, {1993, 7, 1, 28}, {1994, 7, 1, 29},
      {1996, 1, 1, 30}, {1997, 7, 1, 31}, {1999, 1, 1, 32}, {2006, 1, 1, 33}, {2009, 1, 1, 34},
      {2012, 7, 1, 35}, {2015, 7, 1, 36}, {2017, 1, 1, 37}};
  double value = 10.0;
  for (const Step& st : kSteps) {
    const double jd = static_cast<double>(days_from_civil(st.y, static_cast<unsigned>(st.m),
                                                          static_cast<unsigned>(st.d))) + kJdUnixEpoch;
    if (jd_utc >= jd) value = st.s;
  }
  return value;
}

std::string bjd_tdb_to_utc_string(long double bjd_tdb) {
  // TDB - TT is periodic with amplitude < 2 ms: neglected.
  const long double jd_tai = bjd_tdb - static_cast<long double>(kTtMinusTaiSeconds / kSecondsPerDay);
  double leap = tai_minus_utc_seconds(static_cast<double>(jd_tai - 37.0L / 86400.0L));
  long double jd_utc = jd_tai - static_cast<long double>(leap / kSecondsPerDay);
  leap = tai_minus_utc_seconds(static_cast<double>(jd_utc));
  jd_utc = jd_tai - static_cast<long double>(leap / kSecondsPerDay);
  const long double unix_days = jd_utc - static_cast<long double>(kJdUnixEpoch);
  long long day = static_cast<long long>(std::floor(unix_days));
  long long secs = std::llround((unix_days - static_cast<long double>(day)) * 86400.0L);
  if (secs >= 86400) {
    secs -= 86400;
    ++day;
  }
  long long y = 0;
  unsigned mo = 0, d = 0;
  civil_from_days(day, y, mo, d);
  return fmt::format("{:04d}-{:02d}-{:02d} {:02d}:{:02d}:{:02d}", y, mo, d, secs / 3600, (secs / 60) % 60, secs % 60);
}

std::string format_bjd(double reference_epoch_bjd, double reduced_days, int decimals) {
  const long double v = static_cast<long double>(reference_epoch_bjd) + static_cast<long double>(reduced_days);
  return fmt::format("{:.{}f}", v, decimals);
}

// ---- the fit ----------------------------------------------------------------------------
// fit_ephemeris runs named steps on one FitContext: polynomial fits, outliers, the linear
// and quadratic numbers, O-C, the timing-variation search, the scores of the timing models
// (which model predicts, whether a period change is favoured), the predictive refit of the
// chosen model, the predictions and the notes.

namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
// A timing variation is "significant" below this false-alarm probability.
constexpr double kTtvSignificantFap = 0.01;

// The transits in the fits, as offsets from n_ref.
struct FitSet {
  std::vector<double> m, t, s;  // epoch - n_ref, time (days after reference_epoch_bjd), stated sigma
  std::size_t size() const { return m.size(); }
};

struct FitContext {
  const TransitData& transits;
  const EphemerisOptions& options;
  EphemerisResult& r;
  std::vector<bool> used;
  std::vector<bool> flagged;
  FitSet fit;
  double final_scale = 1.0;          // sqrt(chi2/dof) of the linear fit under scale_errors, else 1
  double nu_lo = 0.0, nu_hi = 0.0;   // bracket the sinusoid's frequency was refined in
};

void add_note(EphemerisResult& r, std::string note) {
  if (std::find(r.notes.begin(), r.notes.end(), note) == r.notes.end()) r.notes.push_back(std::move(note));
}

// The sinusoid model fitted with nu free in [lo, hi] (profile chi2(nu), linear parameters
// solved exactly at each nu), with the covariance of (T_ref, P, nu, a, b) from the Jacobian.
struct SinusoidSolution {
  bool ok = false;
  double chi2 = std::numeric_limits<double>::infinity();
  std::array<double, 5> p{};  // T_ref, P, nu, a, b
  Eigen::Matrix<double, 5, 5> cov = Eigen::Matrix<double, 5, 5>::Zero();
};

SinusoidSolution refine_sinusoid(const FitSet& f, const std::vector<double>& sigma, double lo, double hi) {
  SinusoidSolution sol;
  auto profile = [&](double nu) { return fit_sinusoid_at(nu, f.m, f.t, sigma).chi2; };
  const double nu = boost::math::tools::brent_find_minima(profile, lo, hi, 40).first;
  const SinusoidFit sf = fit_sinusoid_at(nu, f.m, f.t, sigma);
  if (!std::isfinite(sf.chi2)) return sol;
  sol.chi2 = sf.chi2;
  sol.p = {sf.beta(0), sf.beta(1), nu, sf.beta(2), sf.beta(3)};
  Eigen::MatrixXd j(static_cast<Eigen::Index>(f.size()), 5);
  for (std::size_t i = 0; i < f.size(); ++i) {
    const auto g = sinusoid_gradient(nu, sol.p[3], sol.p[4], f.m[i]);
    for (int k = 0; k < 5; ++k) j(static_cast<Eigen::Index>(i), k) = g[static_cast<std::size_t>(k)] / sigma[i];
  }
  const Eigen::MatrixXd info = j.transpose() * j;
  Eigen::FullPivLU<Eigen::MatrixXd> lu(info);
  if (!lu.isInvertible()) return sol;
  sol.cov = lu.inverse();
  sol.ok = sol.cov.allFinite();
  return sol;
}

// ---- step 1: reference epoch, the transits in the fits, linear and quadratic fits ----
void fit_polynomials(FitContext& c) {
  const std::size_t n_all = c.transits.size();
  c.fit = {};
  double sw = 0.0, swn = 0.0;
  for (std::size_t i = 0; i < n_all; ++i) {
    if (!c.used[i]) continue;
    const double w = 1.0 / (c.transits.uncertainty_days[i] * c.transits.uncertainty_days[i]);
    sw += w;
    swn += w * static_cast<double>(c.transits.epoch[i]);
  }
  // The integer epoch nearest the weighted mean epoch decorrelates T_ref and P.
  c.r.n_ref = std::llround(swn / sw);
  for (std::size_t i = 0; i < n_all; ++i) {
    if (!c.used[i]) continue;
    c.fit.m.push_back(static_cast<double>(c.transits.epoch[i] - c.r.n_ref));
    c.fit.t.push_back(c.transits.time_days[i]);
    c.fit.s.push_back(c.transits.uncertainty_days[i]);
  }
  c.r.n_transits = c.fit.size();
  c.r.linear = fit_polynomial(c.fit.m, c.fit.t, c.fit.s, 2, c.options.scale_errors);
  c.r.quadratic = c.r.n_transits >= 3 ? fit_polynomial(c.fit.m, c.fit.t, c.fit.s, 3, c.options.scale_errors)
                                      : PolynomialEphemeris{};
}

// ---- step 2: outliers against the first linear fit; refit without them when asked ----
// Returns false (with the result's message set) when the linear fit fails.
bool handle_outliers(FitContext& c) {
  EphemerisResult& r = c.r;
  const std::size_t n_all = c.transits.size();
  const double oc_scale = std::sqrt(r.linear.scale_factor);
  c.flagged.assign(n_all, false);
  for (std::size_t i = 0; i < n_all; ++i) {
    const double oc = c.transits.time_days[i] - r.linear.time_at(static_cast<double>(c.transits.epoch[i]), r.n_ref);
    c.flagged[i] = std::fabs(oc / (c.transits.uncertainty_days[i] * oc_scale)) > c.options.outlier_sigma;
  }
  r.n_outliers = static_cast<std::size_t>(std::count(c.flagged.begin(), c.flagged.end(), true));
  if (c.options.drop_outliers && r.n_outliers > 0 && n_all - r.n_outliers >= 2) {
    for (std::size_t i = 0; i < n_all; ++i) c.used[i] = !c.flagged[i];
    fit_polynomials(c);
    if (r.linear.coefficients.empty()) {
      r.termination = "failed";
      r.message = "Linear ephemeris failed after dropping outliers.";
      return false;
    }
    add_note(r, fmt::format("{} transit(s) beyond {} sigma of the first linear fit were dropped from every fit "
                            "(drop_outliers); they are still listed in the O-C table.",
                            r.n_outliers, c.options.outlier_sigma));
  } else if (r.n_outliers > 0) {
    add_note(r, fmt::format("{} transit(s) lie beyond {} sigma of the linear ephemeris (flagged '!' in the O-C "
                            "table); they are kept in the fits. Check them, or use --drop-outliers.",
                            r.n_outliers, c.options.outlier_sigma));
  }
  return true;
}

// ---- step 3: the linear ephemeris' numbers and the notes on the stated errors ----
void describe_linear(FitContext& c) {
  EphemerisResult& r = c.r;
  const auto& lc = r.linear.covariance;
  r.t_ref_days = {r.linear.coefficients[0], std::sqrt(lc[0][0])};
  r.period_days = {r.linear.coefficients[1], std::sqrt(lc[1][1])};
  r.t_ref_period_correlation = lc[0][1] / std::sqrt(lc[0][0] * lc[1][1]);
  const double mu = static_cast<double>(c.options.user_epoch - r.n_ref);
  r.t0_days = {r.linear.time_at(static_cast<double>(c.options.user_epoch), r.n_ref),
               r.linear.sigma_at(static_cast<double>(c.options.user_epoch), r.n_ref)};
  r.t0_period_covariance = lc[0][1] + mu * lc[1][1];
  r.reduced_chi2 = r.linear.dof > 0 ? r.linear.chi2 / r.linear.dof : kNaN;
  r.errors_scaled = r.linear.scale_factor > 1.0;
  c.final_scale = std::sqrt(r.linear.scale_factor);
  if (r.errors_scaled) {
    add_note(r, fmt::format("Uncertainties scaled by sqrt(chi2/dof) = {:.3f} (linear; quadratic {:.3f}) because "
                            "chi2/dof > 1 (--scale-errors).",
                            std::sqrt(r.linear.scale_factor), std::sqrt(r.quadratic.scale_factor)));
  } else if (c.options.scale_errors) {
    add_note(r, "--scale-errors: chi2/dof <= 1, uncertainties left as given.");
  } else if (r.linear.dof > 0 && r.reduced_chi2 > 2.0) {
    add_note(r, fmt::format("chi2/dof = {:.2f} of the linear ephemeris: the stated timing errors look "
                            "underestimated, or the times vary; consider --scale-errors.",
                            r.reduced_chi2));
  }
}

// ---- step 4: the quadratic ephemeris' numbers ----
void describe_quadratic(FitContext& c) {
  EphemerisResult& r = c.r;
  if (r.quadratic.coefficients.empty()) {
    add_note(r, "Quadratic ephemeris skipped: it needs at least 3 transits.");
    return;
  }
  const auto& qc = r.quadratic.covariance;
  const double p = r.quadratic.coefficients[1];
  r.dp_dn_days = {r.quadratic.coefficients[2], std::sqrt(qc[2][2])};
  // dP/dt = (dP/dn)/P; its error propagates both (dP/dn dominates in practice).
  const double dpdt = r.dp_dn_days.value / p;
  const double var = qc[2][2] / (p * p) + dpdt * dpdt * qc[1][1] / (p * p) - 2.0 * dpdt * qc[1][2] / (p * p);
  r.dp_dt = {dpdt, std::sqrt(std::max(var, 0.0))};
  const double ms_per_year = kSecondsPerDay * 1000.0 * kDaysPerJulianYear;
  r.dp_dt_ms_per_year = {r.dp_dt.value * ms_per_year, r.dp_dt.err * ms_per_year};
  r.delta_chi2 = r.linear.chi2 - r.quadratic.chi2;
  r.delta_bic = r.quadratic.bic - r.linear.bic;
}

// ---- step 5: O-C of every transit against the (final) linear ephemeris ----
void fill_o_minus_c(FitContext& c) {
  EphemerisResult& r = c.r;
  for (std::size_t i = 0; i < c.transits.size(); ++i) {
    OminusC o;
    o.epoch = c.transits.epoch[i];
    o.t_days = c.transits.time_days[i];
    o.sigma_days = c.transits.uncertainty_days[i] * c.final_scale;
    o.o_minus_c_days = o.t_days - r.linear.time_at(static_cast<double>(o.epoch), r.n_ref);
    o.normalized = o.o_minus_c_days / o.sigma_days;
    o.outlier = c.flagged[i];
    o.used = c.used[i];
    o.origin = c.transits.origin[i];
    r.o_minus_c.push_back(o);
  }
  std::sort(r.o_minus_c.begin(), r.o_minus_c.end(),
            [](const OminusC& a, const OminusC& b) { return a.epoch < b.epoch; });
}

// Fills the TTV result's sinusoid from a solution of refine_sinusoid.
void store_sinusoid(TtvResult& ttv, const SinusoidSolution& sol, std::size_t n, double linear_chi2) {
  ttv.nu_per_epoch = sol.p[2];
  ttv.t_ref_days = sol.p[0];
  ttv.period_fit_days = sol.p[1];
  ttv.a_days = sol.p[3];
  ttv.b_days = sol.p[4];
  ttv.chi2 = sol.chi2;
  ttv.dof = static_cast<int>(n) - 5;
  ttv.bic = sol.chi2 + 5.0 * std::log(static_cast<double>(n));
  ttv.delta_bic = ttv.bic - (linear_chi2 + 2.0 * std::log(static_cast<double>(n)));
  const auto& cov = sol.cov;
  for (int a = 0; a < 5; ++a)
    for (int b = 0; b < 5; ++b) ttv.covariance[static_cast<std::size_t>(a)][static_cast<std::size_t>(b)] = cov(a, b);
  const double nu = sol.p[2], p = sol.p[1];
  const double var_nu = cov(2, 2);
  ttv.period_epochs = {1.0 / nu, std::sqrt(var_nu) / (nu * nu)};
  const double var_pd = cov(1, 1) / (nu * nu) + p * p * var_nu / std::pow(nu, 4) - 2.0 * p * cov(1, 2) / std::pow(nu, 3);
  ttv.period_days = {p / nu, std::sqrt(std::max(var_pd, 0.0))};
  const double a = ttv.a_days, b = ttv.b_days, amp = std::hypot(a, b);
  const double var_amp = (a * a * cov(3, 3) + b * b * cov(4, 4) + 2 * a * b * cov(3, 4)) / (amp * amp);
  const double var_ph = (b * b * cov(3, 3) + a * a * cov(4, 4) - 2 * a * b * cov(3, 4)) / std::pow(amp, 4);
  ttv.amplitude_days = {amp, std::sqrt(std::max(var_amp, 0.0))};
  ttv.phase_rad = {std::atan2(b, a), std::sqrt(std::max(var_ph, 0.0))};
  ttv.fitted = true;
}

// ---- step 6: timing-variation search on the O-C of the transits in the fit ----
void search_timing_variation(FitContext& c) {
  EphemerisResult& r = c.r;
  TtvResult& ttv = r.ttv;
  const FitSet& f = c.fit;
  if (c.options.companion_period_days > 0.0)
    ttv.resonances = near_resonance_super_periods(r.period_days.value, c.options.companion_period_days);
  const std::size_t n = f.size();
  if (!c.options.search_ttv) {
    ttv.message = "Timing-variation search not requested.";
    return;
  }
  if (n < 6) {
    ttv.message = fmt::format("Timing-variation search skipped: {} transits (it needs at least 6).", n);
    return;
  }
  const double span = *std::max_element(f.m.begin(), f.m.end()) - *std::min_element(f.m.begin(), f.m.end());
  const double pmin = c.options.ttv_min_period_epochs > 0 ? c.options.ttv_min_period_epochs : 2.0;
  const double pmax = c.options.ttv_max_period_epochs > 0 ? c.options.ttv_max_period_epochs : 2.0 * span;
  const double fmin = 1.0 / pmax, fmax = 1.0 / pmin;
  const double df = 1.0 / (c.options.ttv_oversample * span);
  const auto nf = static_cast<std::size_t>(std::floor((fmax - fmin) / df)) + 1;
  if (!(fmax > fmin) || nf < 2) {
    ttv.message = "Timing-variation search skipped: the epochs span too few orbits.";
    return;
  }
  std::vector<double> oc(n), sc(n);
  for (std::size_t i = 0; i < n; ++i) {
    oc[i] = f.t[i] - (r.linear.coefficients[0] + r.linear.coefficients[1] * f.m[i]);
    sc[i] = f.s[i] * c.final_scale;
  }
  ttv.searched = true;
  ttv.power = gls_power(f.m, oc, sc, fmin, df, nf, PeriodogramMethod::kExact, 1);
  ttv.frequency_per_epoch.resize(ttv.power.size());
  for (std::size_t k = 0; k < ttv.power.size(); ++k) ttv.frequency_per_epoch[k] = fmin + df * static_cast<double>(k);
  const auto best =
      static_cast<std::size_t>(std::max_element(ttv.power.begin(), ttv.power.end()) - ttv.power.begin());
  ttv.best_power = ttv.power[best];
  ttv.fap = baluev_fap(ttv.best_power, n, fmax, f.m, sc);
  // Refine the frequency on the profile chi2(nu) within one grid step of the peak.
  const double f_best = ttv.frequency_per_epoch[best];
  c.nu_lo = std::max(fmin, f_best - df);
  c.nu_hi = std::min(fmax, f_best + df);
  const SinusoidSolution sol = refine_sinusoid(f, sc, c.nu_lo, c.nu_hi);
  if (sol.ok) store_sinusoid(ttv, sol, n, r.linear.chi2 / r.linear.scale_factor);
  ttv.message = ttv.fitted
                    ? fmt::format("Best O-C peak at {:.3f} epochs, FAP {:.3g}.", ttv.period_epochs.value, ttv.fap)
                    : "Timing-variation search: the sinusoid fit at the best peak failed.";
}

// ---- step 7: the timing models' scores, the predicting model, the period-change gate ----
// Scores use the same errors for every model: stated, times final_scale under scale_errors
// (the sinusoid is already fitted with those).
void score_timing_models(FitContext& c) {
  EphemerisResult& r = c.r;
  const double n = static_cast<double>(c.fit.size());
  const double scale2 = c.final_scale * c.final_scale;
  auto score = [&](EphemerisModel m, int k, double chi2) {
    TimingModelScore s;
    s.model = m;
    s.n_parameters = k;
    s.chi2 = chi2;
    s.bic = chi2 + k * std::log(n);
    s.candidate = std::isfinite(s.bic);
    return s;
  };
  TimingModelScore lin = score(EphemerisModel::kLinear, 2, r.linear.chi2 / scale2);
  TimingModelScore quad = score(EphemerisModel::kQuadratic, 3, kNaN);
  if (!r.quadratic.coefficients.empty()) quad = score(EphemerisModel::kQuadratic, 3, r.quadratic.chi2 / scale2);
  else quad.why_not = "needs at least 3 transits";
  TimingModelScore sin = score(EphemerisModel::kSinusoid, 5, kNaN);
  if (r.ttv.fitted) {
    sin = score(EphemerisModel::kSinusoid, 5, r.ttv.chi2);
    if (!(r.ttv.fap < kTtvSignificantFap)) {
      sin.candidate = false;
      sin.why_not = fmt::format("its O-C peak is not significant (FAP {:.3g} >= {})", r.ttv.fap, kTtvSignificantFap);
    }
  } else {
    sin.why_not = r.ttv.message;
  }
  for (TimingModelScore* s : {&lin, &quad, &sin}) s->delta_bic_vs_linear = s->bic - lin.bic;
  r.model_scores = {lin, quad, sin};

  // A period change is favoured only when the quadratic beats the linear ephemeris and the
  // timing-variation model alike.
  if (quad.candidate) {
    r.delta_bic_vs_sinusoid = r.ttv.fitted ? quad.bic - sin.bic : kNaN;
    r.delta_bic_vs_best_other = quad.bic - (r.ttv.fitted ? std::min(lin.bic, sin.bic) : lin.bic);
    r.period_change_favoured = r.delta_bic < 0.0 && r.delta_bic_vs_best_other < 0.0;
  }

  PredictionBasis& b = r.prediction;
  b.rule = fmt::format("start from the linear ephemeris; a model with more parameters (quadratic, then sinusoid "
                       "when its O-C peak has FAP < {}) replaces the current choice when its BIC is lower by more "
                       "than {:g} (Kass & Raftery 1995)",
                       kTtvSignificantFap, c.options.model_delta_bic);
  const TimingModelScore* chosen = &lin;
  std::string why = "no model with more parameters lowers BIC by more than the threshold";
  for (const TimingModelScore* s : {&quad, &sin}) {
    if (s->candidate && s->bic < chosen->bic - c.options.model_delta_bic) {
      why = fmt::format("BIC {:.2f} below the {}'s", chosen->bic - s->bic, to_string(chosen->model));
      chosen = s;
    }
  }
  if (c.options.prediction_model == EphemerisModel::kAuto) {
    b.model = chosen->model;
    b.chosen_automatically = true;
    b.reason = fmt::format("{}: {}", to_string(b.model), why);
  } else {
    b.model = c.options.prediction_model;
    b.chosen_automatically = false;
    b.reason = fmt::format("{}: as asked (the rule would choose the {} ephemeris)", to_string(b.model),
                           to_string(chosen->model));
    if (b.model != chosen->model)
      add_note(r, fmt::format("Predictions use the {} ephemeris as asked; the {} ephemeris is better supported "
                              "({}); --model auto uses it.",
                              to_string(b.model), to_string(chosen->model), why));
  }
  r.prediction_model = b.model;
}

// A fitted timing model that predicts mid-transit times (m = n - n_ref): its parameters,
// their covariance and the excess scatter s. An N-body model of the system would be one
// more case in model_time / model_gradient / fit_timing_model.
struct TimingPredictor {
  EphemerisModel model = EphemerisModel::kLinear;
  bool ok = false;
  std::vector<double> p;
  Eigen::MatrixXd cov;
  double scatter = 0.0;
  double chi2 = kNaN;
  int dof = 0;
};

std::vector<double> model_gradient(const TimingPredictor& tp, double m) {
  switch (tp.model) {
    case EphemerisModel::kQuadratic: return {1.0, m, 0.5 * m * m};
    case EphemerisModel::kSinusoid: {
      const auto g = sinusoid_gradient(tp.p[2], tp.p[3], tp.p[4], m);
      return {g.begin(), g.end()};
    }
    default: return {1.0, m};
  }
}

double model_time(const TimingPredictor& tp, double m) {
  if (tp.model == EphemerisModel::kSinusoid) {
    const double ph = kTwoPi * tp.p[2] * m;
    return tp.p[0] + m * tp.p[1] + tp.p[3] * std::sin(ph) + tp.p[4] * std::cos(ph);
  }
  const auto g = model_gradient(tp, m);  // the polynomials are linear in their parameters
  double t = 0.0;
  for (std::size_t k = 0; k < g.size(); ++k) t += g[k] * tp.p[k];
  return t;
}

double model_sigma(const TimingPredictor& tp, double m) {
  const auto g = model_gradient(tp, m);
  const Eigen::Map<const Eigen::VectorXd> gv(g.data(), static_cast<Eigen::Index>(g.size()));
  return std::sqrt(std::max(gv.dot(tp.cov * gv), 0.0) + tp.scatter * tp.scatter);
}

// The model fitted with every sigma_i^2 + s^2.
TimingPredictor fit_timing_model(const FitContext& c, EphemerisModel model, double s) {
  const FitSet& f = c.fit;
  std::vector<double> sigma(f.size());
  for (std::size_t i = 0; i < f.size(); ++i) sigma[i] = std::sqrt(f.s[i] * f.s[i] + s * s);
  TimingPredictor tp;
  tp.model = model;
  tp.scatter = s;
  if (model == EphemerisModel::kSinusoid) {
    const SinusoidSolution sol = refine_sinusoid(f, sigma, c.nu_lo, c.nu_hi);
    if (!sol.ok) return tp;
    tp.p.assign(sol.p.begin(), sol.p.end());
    tp.cov = sol.cov;
    tp.chi2 = sol.chi2;
    tp.dof = static_cast<int>(f.size()) - 5;
  } else {
    const int k = model == EphemerisModel::kQuadratic ? 3 : 2;
    const auto n = static_cast<Eigen::Index>(f.size());
    Eigen::MatrixXd x(n, k);
    Eigen::VectorXd y(n), sv(n);
    for (Eigen::Index i = 0; i < n; ++i) {
      const auto b = basis(f.m[static_cast<std::size_t>(i)], static_cast<std::size_t>(k));
      for (int j = 0; j < k; ++j) x(i, j) = b[static_cast<std::size_t>(j)];
      y(i) = f.t[static_cast<std::size_t>(i)];
      sv(i) = sigma[static_cast<std::size_t>(i)];
    }
    const WlsSolution w = solve_wls(x, y, sv);
    if (!w.ok) return tp;
    tp.p.assign(w.beta.data(), w.beta.data() + k);
    tp.cov = w.cov;
    tp.chi2 = w.chi2;
    tp.dof = static_cast<int>(n) - k;
  }
  tp.ok = true;
  return tp;
}

// ---- step 8: the predicting model refitted with its excess scatter s ----
// s = 0 when chi2/dof <= 1 with the stated errors; else the root of chi2(s) = dof, which is
// decreasing in s and below dof at s_hi = 1.05 sqrt(sum r_i^2 / dof) (r the residuals of the
// fit at s = 0: chi2(s) <= sum r_i^2 / s^2 there).
TimingPredictor predictive_fit(const FitContext& c, EphemerisModel model) {
  const TimingPredictor at0 = fit_timing_model(c, model, 0.0);
  if (!at0.ok || at0.dof <= 0 || at0.chi2 <= at0.dof) return at0;
  double rss = 0.0;
  for (std::size_t i = 0; i < c.fit.size(); ++i) {
    const double res = c.fit.t[i] - model_time(at0, c.fit.m[i]);
    rss += res * res;
  }
  const double dof = at0.dof;
  auto excess = [&](double s) {
    const TimingPredictor tp = fit_timing_model(c, model, s);
    return tp.ok ? tp.chi2 - dof : -dof;
  };
  const double s_hi = 1.05 * std::sqrt(rss / dof);
  boost::uintmax_t iterations = 100;
  const auto root = boost::math::tools::toms748_solve(excess, 0.0, s_hi, at0.chi2 - dof, excess(s_hi),
                                                      boost::math::tools::eps_tolerance<double>(40), iterations);
  return fit_timing_model(c, model, 0.5 * (root.first + root.second));
}

// ---- step 9: the predicted transits ----
void predict_transits(FitContext& c, const TimingPredictor& tp) {
  EphemerisResult& r = c.r;
  const EphemerisOptions& o = c.options;
  auto t_at = [&](long long n) { return model_time(tp, static_cast<double>(n - r.n_ref)); };
  const double ref = r.reference_epoch_bjd;
  long long n_start = 0;
  if (std::isnan(o.from_bjd)) {
    n_start = r.o_minus_c.back().epoch + 1;
  } else {
    const double from = o.from_bjd - ref;
    n_start = r.n_ref + static_cast<long long>(std::ceil((from - r.t_ref_days.value) / r.period_days.value)) - 1;
    while (t_at(n_start) < from) ++n_start;
  }
  const bool range = !std::isnan(o.to_bjd);
  const double to = range ? o.to_bjd - ref : 0.0;
  for (long long n = n_start;; ++n) {
    if (range ? t_at(n) > to : static_cast<int>(r.predictions.size()) >= o.n_next) break;
    if (static_cast<int>(r.predictions.size()) >= o.max_predictions) {
      add_note(r, fmt::format("Predictions stopped at max_predictions = {}.", o.max_predictions));
      break;
    }
    TransitPrediction p;
    p.epoch = n;
    p.t_days = t_at(n);
    p.t_mid_bjd = static_cast<double>(static_cast<long double>(ref) + p.t_days);
    p.err_days = model_sigma(tp, static_cast<double>(n - r.n_ref));
    p.utc = bjd_tdb_to_utc_string(static_cast<long double>(ref) + p.t_days);
    r.predictions.push_back(p);
  }
}

// ---- step 10: notes on the period change, the timing variation and the predictions ----
void add_model_notes(FitContext& c) {
  EphemerisResult& r = c.r;
  const TtvResult& ttv = r.ttv;
  const double s_min = r.prediction.excess_scatter_days * kMinutesPerDay;
  if (!r.quadratic.coefficients.empty() && r.delta_bic < 0.0 && !r.period_change_favoured)
    add_note(r, fmt::format("The quadratic ephemeris beats the linear one (delta BIC {:+.2f}) but not the "
                            "timing-variation sinusoid (delta BIC {:+.2f} against it): its curvature fits the "
                            "variation; no period change is claimed.",
                            r.delta_bic, r.delta_bic_vs_sinusoid));
  const bool quadratic_beats_sinusoid = std::isfinite(r.delta_bic_vs_sinusoid) && r.delta_bic_vs_sinusoid <= 0.0;
  if (ttv.fitted && ttv.fap < kTtvSignificantFap && quadratic_beats_sinusoid)
    add_note(r, fmt::format("The O-C periodogram peaks significantly (FAP {:.2g}) at {:.0f} epochs, but the quadratic "
                            "ephemeris describes the O-C better (BIC {:.2f} lower than the sinusoid's): that variation "
                            "is the curvature.",
                            ttv.fap, ttv.period_epochs.value, -r.delta_bic_vs_sinusoid));
  const bool variation = ttv.fitted && ttv.fap < kTtvSignificantFap && !quadratic_beats_sinusoid;
  if (variation)
    add_note(r, fmt::format("A significant timing variation is present (FAP {:.2g}, amplitude {:.2f} min): "
                            "predictions use the {} ephemeris and their sigma includes {:.2f} min of timing scatter "
                            "about it.",
                            ttv.fap, ttv.amplitude_days.value * kMinutesPerDay, to_string(r.prediction_model), s_min));
  else if (s_min > 0.0)
    add_note(r, fmt::format("The times scatter about the {} ephemeris more than their stated errors allow: the "
                            "predictions' sigma includes {:.2f} min of excess scatter.",
                            to_string(r.prediction_model), s_min));
  if (ttv.searched)
    add_note(r, "TTV periods are aliased: sampling once per orbit, a TTV frequency nu (cycles/epoch) and 1 - nu "
                "(and nu + k) fit equally; only nu <= 0.5 is searched. Predictions at whole epochs do not depend "
                "on which alias is true.");
  if (r.prediction_model == EphemerisModel::kSinusoid && !r.predictions.empty() && ttv.fitted) {
    const long long last = r.o_minus_c.back().epoch;
    const double reach = static_cast<double>(r.predictions.back().epoch - last);
    if (reach > ttv.period_epochs.value)
      add_note(r, fmt::format("Predictions reach {:.0f} epochs past the last transit, more than one TTV period "
                              "({:.1f} epochs): the sinusoid is extrapolated, and real timing variations are rarely "
                              "one pure sinusoid. Refit as new transits arrive.",
                              reach, ttv.period_epochs.value));
  }
}

}  // namespace

EphemerisResult fit_ephemeris(const TransitData& transits, const EphemerisOptions& options) {
  if (const std::string err = options.Validate(); !err.empty()) throw InputError(err);
  const std::size_t n_all = transits.size();
  if (n_all < 2) {
    throw InputError(fmt::format("{}: {} transit time{}; an ephemeris needs at least 2",
                                 n_all ? transits.origin.front() : std::string("transit data"), n_all,
                                 n_all == 1 ? "" : "s"));
  }
  EphemerisResult r;
  r.reference_epoch_bjd = transits.reference_epoch_bjd;
  r.user_epoch = options.user_epoch;
  FitContext c{transits, options, r, std::vector<bool>(n_all, true), {}, {}};

  fit_polynomials(c);
  if (r.linear.coefficients.empty()) {
    r.termination = "failed";
    r.message = "Linear ephemeris failed: the epochs do not determine a period.";
    return r;
  }
  if (!handle_outliers(c)) return r;
  describe_linear(c);
  describe_quadratic(c);
  fill_o_minus_c(c);
  search_timing_variation(c);

  if (options.prediction_model == EphemerisModel::kQuadratic && r.quadratic.coefficients.empty())
    throw InputError("prediction_model = quadratic: needs at least 3 transits");
  if (options.prediction_model == EphemerisModel::kSinusoid && !r.ttv.fitted)
    throw InputError(fmt::format("prediction_model = sinusoid: no timing-variation fit ({})", r.ttv.message));
  score_timing_models(c);
  TimingPredictor tp = predictive_fit(c, r.prediction_model);
  if (!tp.ok && r.prediction_model != EphemerisModel::kLinear) {
    add_note(r, fmt::format("The {} ephemeris could not be refitted with its excess scatter; predictions use the "
                            "linear ephemeris.",
                            to_string(r.prediction_model)));
    r.prediction_model = r.prediction.model = EphemerisModel::kLinear;
    r.prediction.reason = "linear: the chosen model's predictive refit failed";
    tp = predictive_fit(c, EphemerisModel::kLinear);
  }
  if (!tp.ok) {
    r.termination = "failed";
    r.message = fmt::format("The {} ephemeris could not be refitted for the predictions.", to_string(r.prediction_model));
    return r;
  }
  r.prediction.excess_scatter_days = tp.scatter;
  r.prediction.refit_chi2 = tp.chi2;
  r.prediction.refit_dof = tp.dof;
  predict_transits(c, tp);
  add_model_notes(c);

  r.termination = "converged";
  r.message = fmt::format("Linear ephemeris from {} transits: P = {:.8f} +/- {:.8f} d, chi2/dof = {:.2f}.",
                          r.n_transits, r.period_days.value, r.period_days.err, r.reduced_chi2);
  return r;
}

// ---- reports ----------------------------------------------------------------------------

std::string EphemerisResult::BriefReport() const {
  if (termination != "converged") return message;
  return fmt::format("P = {:.8f} +/- {:.8f} d, T0(epoch {}) = {} +/- {:.6f} d BJD_TDB, chi2/dof = {:.2f} ({} dof); "
                     "predictions from the {} ephemeris",
                     period_days.value, period_days.err, user_epoch, format_bjd(reference_epoch_bjd, t0_days.value, 6),
                     t0_days.err, reduced_chi2, linear.dof, to_string(prediction_model));
}

namespace {
std::string quadratic_verdict(const EphemerisResult& r) {
  if (r.period_change_favoured) return "period change favoured";
  if (r.delta_bic < 0.0 && std::isfinite(r.delta_bic_vs_sinusoid))
    return fmt::format("no period change: the timing-variation sinusoid fits better, delta BIC vs it {:+.2f}",
                       r.delta_bic_vs_sinusoid);
  return "no evidence for a period change";
}

std::string model_table(const EphemerisResult& r) {
  std::string s = fmt::format("Model for the predictions (rule: {})\n", r.prediction.rule);
  s += fmt::format("  {:<10} {:>2}  {:>14}  {:>14}  {:>14}\n", "model", "k", "chi2", "BIC", "BIC - linear");
  for (const auto& m : r.model_scores) {
    if (!std::isfinite(m.bic)) {
      s += fmt::format("  {:<10} {:>2}  not fitted: {}\n", to_string(m.model), m.n_parameters, m.why_not);
      continue;
    }
    s += fmt::format("  {:<10} {:>2}  {:>14.3f}  {:>14.3f}  {:>+14.3f}{}\n", to_string(m.model), m.n_parameters,
                     m.chi2, m.bic, m.delta_bic_vs_linear, m.candidate ? "" : "  (not a candidate: " + m.why_not + ")");
  }
  s += fmt::format("  -> {}\n", r.prediction.reason);
  return s;
}
}  // namespace

std::string EphemerisResult::FullReport(bool oc_in_minutes) const {
  if (termination != "converged") return message + "\n";
  const char* unit = oc_in_minutes ? "min" : "d";
  const double to_unit = oc_in_minutes ? kMinutesPerDay : 1.0;
  std::string s;
  s += fmt::format("Linear ephemeris  T_n = T_ref + (n - {}) P   ({} transits in the fit)\n", n_ref, n_transits);
  s += fmt::format("  P                 {:.9f} +/- {:.9f} d\n", period_days.value, period_days.err);
  s += fmt::format("  T_ref (epoch {:>4})  {} +/- {:.6f} d BJD_TDB   corr(T_ref, P) = {:+.3f}\n", n_ref,
                   format_bjd(reference_epoch_bjd, t_ref_days.value, 7), t_ref_days.err, t_ref_period_correlation);
  s += fmt::format("  T0    (epoch {:>4})  {} +/- {:.6f} d BJD_TDB   cov(T0, P) = {:.4e} d^2\n", user_epoch,
                   format_bjd(reference_epoch_bjd, t0_days.value, 7), t0_days.err, t0_period_covariance);
  s += fmt::format("  chi2 = {:.3f}, dof = {}, chi2/dof = {:.3f}{}\n", linear.chi2, linear.dof, reduced_chi2,
                   errors_scaled ? fmt::format(" (errors scaled by {:.3f})", std::sqrt(linear.scale_factor)) : "");
  if (!quadratic.coefficients.empty()) {
    s += "Quadratic ephemeris  T_n = T_ref + m P + m^2/2 dP/dn   (m = n - n_ref)\n";
    s += fmt::format("  dP/dn  {:+.4e} +/- {:.4e} d/orbit   dP/dt = {:+.4e} +/- {:.4e} ({:+.2f} +/- {:.2f} ms/yr)\n",
                     dp_dn_days.value, dp_dn_days.err, dp_dt.value, dp_dt.err, dp_dt_ms_per_year.value,
                     dp_dt_ms_per_year.err);
    s += fmt::format("  P(epoch {}) = {:.9f} d, chi2 = {:.3f} ({} dof); delta chi2 = {:.2f}, delta BIC = {:+.2f} "
                     "({})\n",
                     n_ref, quadratic.coefficients[1], quadratic.chi2, quadratic.dof, delta_chi2, delta_bic,
                     quadratic_verdict(*this));
  }
  s += fmt::format("O-C against the linear ephemeris ({})\n", unit);
  s += fmt::format("  {:>7}  {:>17}  {:>9}  {:>9}  {:>7}\n", "epoch", "T_mid BJD_TDB", "O-C", "sigma", "O-C/sig");
  for (const auto& o : o_minus_c) {
    s += fmt::format("  {:>7}  {:>17}  {}  {}  {:+7.2f}{}{}\n", o.epoch, format_bjd(reference_epoch_bjd, o.t_days, 7),
                     fmt_minutes_or_days(o.o_minus_c_days, oc_in_minutes),
                     fmt_minutes_or_days(o.sigma_days, oc_in_minutes), o.normalized, o.outlier ? " !" : "",
                     o.used ? "" : " (not fitted)");
  }
  s += "Timing variations\n";
  if (ttv.fitted) {
    s += fmt::format("  best O-C periodogram peak: power {:.4f}, FAP {:.3g} (Baluev 2008){}\n", ttv.best_power, ttv.fap,
                     ttv.fap < kTtvSignificantFap ? "  -> significant" : "  -> not significant");
    s += fmt::format("  sinusoid: period {:.3f} +/- {:.3f} epochs = {:.3f} +/- {:.3f} d, amplitude {:.3f} +/- {:.3f} "
                     "{}, phase {:.3f} +/- {:.3f} rad; delta BIC vs linear {:+.2f}\n",
                     ttv.period_epochs.value, ttv.period_epochs.err, ttv.period_days.value, ttv.period_days.err,
                     ttv.amplitude_days.value * to_unit, ttv.amplitude_days.err * to_unit, unit, ttv.phase_rad.value,
                     ttv.phase_rad.err, ttv.delta_bic);
  } else {
    s += "  " + ttv.message + "\n";
  }
  for (const auto& rs : ttv.resonances) {
    s += fmt::format("  near {}:{} resonance (Delta = {:+.4f}): expected super-period {:.2f} d = {:.2f} epochs "
                     "(Lithwick, Xie & Wu 2012){}\n",
                     rs.j, rs.j - 1, rs.delta, rs.super_period_days, rs.super_period_epochs,
                     ttv.fitted ? fmt::format("; best O-C sinusoid {:.2f} +/- {:.2f} d{}", ttv.period_days.value,
                                             ttv.period_days.err, ttv.fap < kTtvSignificantFap ? "" : " (not significant)")
                                : "");
  }
  s += model_table(*this);
  if (!predictions.empty()) {
    s += fmt::format("Predicted transits ({} ephemeris; predictive 1-sigma = its covariance (+) {} {} excess timing "
                     "scatter)\n",
                     to_string(prediction_model),
                     oc_in_minutes ? fmt::format("{:.3f}", prediction.excess_scatter_days * to_unit)
                                   : fmt::format("{:.7f}", prediction.excess_scatter_days),
                     unit);
    s += fmt::format("  {:>7}  {:>17}  {:>9}  {:>19}\n", "epoch", "T_mid BJD_TDB", fmt::format("sigma {}", unit),
                     "UTC");
    for (const auto& p : predictions) {
      s += fmt::format("  {:>7}  {:>17}  {}  {}\n", p.epoch, format_bjd(reference_epoch_bjd, p.t_days, 7),
                       fmt_minutes_or_days(p.err_days, oc_in_minutes), p.utc);
    }
    s += "  UTC = BJD_TDB - 32.184 s (TT - TAI) - TAI-UTC (37 s since 2017-01-01, IERS); TDB - TT (< 2 ms) "
         "neglected.\n  The UTC shown is the barycentric instant: add the light-time to your site (up to "
         "+/- 8.3 min).\n  A window of +/- 3 sigma around T_mid (plus half the transit duration each side) holds the "
         "transit if the model describes the times.\n";
  }
  for (const auto& n : notes) s += "Note: " + n + "\n";
  return s;
}

// ---- joint likelihood term --------------------------------------------------------------

TransitTimingLikelihood::TransitTimingLikelihood(const TransitData& transits, double frame_reference_epoch_bjd) {
  if (transits.size() == 0) return;
  // Both reference epochs are integer days, so their difference is exact.
  const double shift = transits.reference_epoch_bjd - frame_reference_epoch_bjd;
  std::size_t anchor = 0;
  for (std::size_t i = 1; i < transits.size(); ++i)
    if (transits.uncertainty_days[i] < transits.uncertainty_days[anchor]) anchor = i;
  anchor_time_days_ = transits.time_days[anchor] + shift;
  for (std::size_t i = 0; i < transits.size(); ++i) {
    epoch_.push_back(transits.epoch[i]);
    epoch_offset_.push_back(static_cast<double>(transits.epoch[i] - transits.epoch[anchor]));
    time_days_.push_back(transits.time_days[i] + shift);
    variance_.push_back(transits.uncertainty_days[i] * transits.uncertainty_days[i]);
  }
}

double TransitTimingLikelihood::chi_square(double period_days, double t_conj_days, double jitter_days) const {
  if (!(period_days > 0.0) || !(jitter_days >= 0.0) || !std::isfinite(period_days) || !std::isfinite(t_conj_days) ||
      !std::isfinite(jitter_days))
    return std::numeric_limits<double>::infinity();
  const double k = std::round((anchor_time_days_ - t_conj_days) / period_days);
  const double tc = t_conj_days + k * period_days;
  const double j2 = jitter_days * jitter_days;
  double chi2 = 0.0;
  for (std::size_t i = 0; i < time_days_.size(); ++i) {
    const double r = time_days_[i] - (tc + epoch_offset_[i] * period_days);
    chi2 += r * r / (variance_[i] + j2);
  }
  return chi2;
}

double TransitTimingLikelihood::log_likelihood(double period_days, double t_conj_days, double jitter_days) const {
  const double chi2 = chi_square(period_days, t_conj_days, jitter_days);
  if (!std::isfinite(chi2)) return -std::numeric_limits<double>::infinity();
  const double j2 = jitter_days * jitter_days;
  double norm = 0.0;
  for (double v : variance_) norm += std::log(kTwoPi * (v + j2));
  return -0.5 * (chi2 + norm);
}

}  // namespace apsides
