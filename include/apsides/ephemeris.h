// Transit ephemerides: linear and quadratic fits to mid-transit times, O-C, a search
// for sinusoidal timing variations, predictions of future transits, and the transit-time
// term of a joint RV + transit likelihood.
//
// Models (n the integer transit epoch, m = n - n_ref, n_ref the reference epoch):
//   linear     T_n = T_ref + m P
//   quadratic  T_n = T_ref + m P + 1/2 m^2 dP/dn       (P is the period at n_ref;
//              dP/dt = (dP/dn) / P, dimensionless; orbital decay or apparent change)
//   sinusoid   T_n = T_ref + m P + a sin(2 pi nu m) + b cos(2 pi nu m)
//              (nu in cycles per epoch; amplitude A = sqrt(a^2 + b^2), phase
//              phi = atan2(b, a) at n_ref, so the TTV is A sin(2 pi nu m + phi))
// All fits are weighted least squares (weights 1/sigma_i^2) solved by a column-pivoting
// QR decomposition of the whitened design matrix; covariances are (X^T W X)^-1.
// The reference epoch n_ref is the integer epoch nearest the weighted mean epoch, which
// makes the T_ref-P correlation (nearly) zero; T0 is also reported at a user epoch
// (epoch 0 of the file's numbering by default), with its covariance.
//
// Times: BJD_TDB days. As in data.h, fits run on times relative to the data's integer
// `reference_epoch_bjd`; every T in a result is relative to that epoch unless its name
// ends in `_bjd`. Add the epoch back only for display (see `format_bjd`).
//
// Timing variations: the O-C of the linear ephemeris is searched with the generalised
// Lomb-Scargle periodogram (periodogram.h) in cycles per epoch, up to the Nyquist
// frequency 0.5 cycle/epoch (transits sample a TTV once per orbit: a TTV frequency nu and
// 1 - nu are indistinguishable), with the Baluev (2008) false-alarm probability. The best
// peak is refined by a least-squares fit of the sinusoid model above (nu free), whose
// covariance gives the uncertainties. For near-resonant pairs the expected super-period
// is P_super = 1 / |j / P_out - (j - 1) / P_in| (Lithwick, Xie & Wu 2012, ApJ 761, 122).
//
// Which model predicts (EphemerisModel::kAuto, the default). Each candidate model gets
// BIC = chi2 + k ln N (k parameters: linear 2, quadratic 3, sinusoid 5; chi2 with the
// stated errors, times sqrt(chi2/dof) of the linear fit under scale_errors). The sinusoid
// is a candidate only when its O-C periodogram peak is significant (FAP < 0.01: the BIC
// penalty alone does not pay for searching many frequencies). Starting from the linear
// ephemeris, each candidate with more parameters (quadratic, then sinusoid) replaces the
// current choice when it lowers BIC by more than `model_delta_bic` = 10 ("very strong",
// Kass & Raftery 1995, JASA 90, 773). An N-body model of the transit times (later) is one
// more candidate in that list: an EphemerisModel value, a TimingModelScore and a
// predictor (see `timing_models` in src/ephemeris.cpp); nothing else changes.
//
// Predictive spread (what an observer scheduling a transit needs: the interval that holds
// the next mid-transit time, not the error of the mean ephemeris). For the predicting
// model, s is the excess timing scatter about it: 0 when the stated errors explain the
// residuals (chi2/dof <= 1), else the value that makes chi2/dof = 1 when s^2 is added to
// every sigma_i^2 (the model is refitted with those weights; for the sinusoid, nu too).
// A predicted time is that refit's value, with
//   sigma_pred(n)^2 = g(n)^T C g(n) + s^2,
// g the gradient of the model's time at epoch n with respect to its parameters and C their
// covariance in the refit (linearised; for the sinusoid the uncertainty of its frequency
// makes sigma grow with the distance from the data). With a timing variation the linear
// model's s is the variation's own scatter, so its predictions carry it too; the sinusoid,
// when chosen, carries what it leaves unexplained. sigma_pred is for the mid-transit time;
// a window of +/- 3 sigma_pred (plus half the transit duration each side) holds the
// transit if the model's Gaussian description of the residuals holds. Far beyond the
// observed epochs a sinusoid is an extrapolation: real timing variations are rarely one
// pure sinusoid (a note says when predictions reach further than the span of the data).
#pragma once

#include <array>
#include <cstddef>
#include <limits>
#include <string>
#include <vector>

#include "apsides/data.h"

namespace apsides {

// Which model predictions use; kAuto picks by the BIC rule above. (kNbody will follow.)
enum class EphemerisModel { kAuto, kLinear, kQuadratic, kSinusoid };
std::string to_string(EphemerisModel model);
// Accepts "auto", "linear", "quadratic", "sinusoid" (alias "ttv"); throws InputError otherwise.
EphemerisModel parse_ephemeris_model(const std::string& text, const std::string& where);

struct EphemerisOptions {
  // T0 is also reported at this epoch (the file's numbering). Default 0.
  long long user_epoch = 0;
  // Multiply the covariances by chi2/dof when chi2/dof > 1 (each model by its own), and
  // the O-C errors by sqrt(chi2/dof) of the linear fit. Stated in the results.
  bool scale_errors = false;
  // |O-C| / sigma above which a transit is flagged as an outlier (> 0). Flagged
  // transits stay in the fits unless `drop_outliers` is set.
  double outlier_sigma = 5.0;
  // Refit once without the transits flagged by the first linear fit (stated in results).
  bool drop_outliers = false;

  // Timing-variation search. Periods in epochs (transit numbers); <= 0 picks defaults:
  // min 2 epochs (Nyquist), max 2 x the epoch span.
  bool search_ttv = true;
  double ttv_min_period_epochs = 0.0;
  double ttv_max_period_epochs = 0.0;
  double ttv_oversample = 10.0;     // grid points per 1/span (>= 1)
  // Period (days) of a second planet; > 0 prints the expected near-resonant
  // super-periods for the nearest first-order resonances. 0 = none.
  double companion_period_days = 0.0;

  // Predictions: either the next `n_next` transits after `from_bjd` (NaN: after the last
  // observed transit), or, when `to_bjd` is set, every transit in [from_bjd, to_bjd].
  int n_next = 10;
  double from_bjd = std::numeric_limits<double>::quiet_NaN();
  double to_bjd = std::numeric_limits<double>::quiet_NaN();
  int max_predictions = 10000;      // cap on a date range
  // kAuto: the best supported model (rule above); a named model is used as asked (it
  // still gets its own excess scatter s in sigma_pred).
  EphemerisModel prediction_model = EphemerisModel::kAuto;
  // BIC drop a model with more parameters needs to replace a simpler one (> 0).
  double model_delta_bic = 10.0;

  std::string Validate() const;
};

// A value with its 1-sigma uncertainty.
struct Estimate {
  double value = std::numeric_limits<double>::quiet_NaN();
  double err = std::numeric_limits<double>::quiet_NaN();
};

// A weighted least-squares polynomial fit T = c_0 + c_1 m + c_2 m^2 / 2 (m = n - n_ref):
// c_0 = T_ref (days after reference_epoch_bjd), c_1 = P at n_ref, c_2 = dP/dn.
struct PolynomialEphemeris {
  std::vector<double> coefficients;            // c_0, c_1[, c_2]
  std::vector<std::vector<double>> covariance; // of the coefficients (scaled if stated)
  double chi2 = std::numeric_limits<double>::quiet_NaN();
  int dof = 0;
  double bic = std::numeric_limits<double>::quiet_NaN();  // chi2 + k ln N
  double scale_factor = 1.0;                   // covariance multiplier applied (>= 1)
  // T at epoch n and its 1-sigma uncertainty from the full covariance.
  double time_at(double n, long long n_ref) const;
  double sigma_at(double n, long long n_ref) const;
};

struct OminusC {
  long long epoch = 0;
  double t_days = 0.0;        // observed, relative to the reference epoch
  double sigma_days = 0.0;    // as given (times sqrt(chi2/dof) when scaled)
  double o_minus_c_days = 0.0;  // observed minus linear ephemeris
  double normalized = 0.0;    // O-C / sigma
  bool outlier = false;       // |O-C| / sigma > outlier_sigma
  bool used = true;           // in the fits (false only with drop_outliers)
  std::string origin;         // file:line
};

struct ResonanceSuperPeriod {
  int j = 0;                  // j:(j-1) first-order resonance
  double delta = 0.0;         // P_out/P_in (j-1)/j - 1, the distance from resonance
  double super_period_days = 0.0;
  double super_period_epochs = 0.0;  // in transits of the fitted planet
};

struct TtvResult {
  bool searched = false;
  std::string message = "Timing-variation search was not run.";
  // Periodogram of O-C (standard normalisation) on a uniform grid in cycles per epoch.
  std::vector<double> frequency_per_epoch;
  std::vector<double> power;
  double best_power = 0.0;
  double fap = 1.0;                  // Baluev 2008 for the best peak
  // Sinusoid fit seeded at the best peak (all free: T_ref, P, nu, a, b).
  bool fitted = false;
  Estimate period_epochs, period_days, amplitude_days, phase_rad;
  double nu_per_epoch = 0.0;         // best-fit frequency, cycles per epoch
  double a_days = 0.0, b_days = 0.0; // sine and cosine amplitudes
  double t_ref_days = 0.0, period_fit_days = 0.0;
  std::array<std::array<double, 5>, 5> covariance{};  // (T_ref, P, nu, a, b)
  double chi2 = std::numeric_limits<double>::quiet_NaN();
  int dof = 0;
  double bic = std::numeric_limits<double>::quiet_NaN();
  double delta_bic = std::numeric_limits<double>::quiet_NaN();  // BIC(sinusoid) - BIC(linear)
  // Expected super-periods when a companion period was given.
  std::vector<ResonanceSuperPeriod> resonances;
  double sinusoid_time_at(double n, long long n_ref) const;
  double sinusoid_sigma_at(double n, long long n_ref) const;
};

struct TransitPrediction {
  long long epoch = 0;
  double t_days = 0.0;        // relative to the reference epoch
  double t_mid_bjd = 0.0;     // full BJD_TDB (double: ~0.05 ms resolution)
  double err_days = 0.0;      // predictive 1-sigma: sqrt(g^T C g + s^2), see the top
  std::string utc;            // calendar UTC, "YYYY-MM-DD hh:mm:ss"
};

// One candidate timing model, scored for the choice of the predicting model.
struct TimingModelScore {
  EphemerisModel model = EphemerisModel::kLinear;
  int n_parameters = 0;
  bool candidate = false;     // fitted and eligible (the sinusoid: FAP < 0.01 as well)
  std::string why_not;        // when not a candidate
  double chi2 = std::numeric_limits<double>::quiet_NaN();  // errors as in the rule above
  double bic = std::numeric_limits<double>::quiet_NaN();
  double delta_bic_vs_linear = std::numeric_limits<double>::quiet_NaN();
};

// How the predictions were made.
struct PredictionBasis {
  EphemerisModel model = EphemerisModel::kLinear;
  bool chosen_automatically = true;
  std::string rule;           // the selection rule in words
  std::string reason;         // why this model, with the numbers
  double excess_scatter_days = 0.0;   // s (0: the stated errors explain the residuals)
  double refit_chi2 = std::numeric_limits<double>::quiet_NaN();  // with sigma_i^2 + s^2
  int refit_dof = 0;
};

struct EphemerisResult {
  std::string message = "Ephemeris was not run.";
  std::string termination = "not run";  // "converged" / "failed"
  double reference_epoch_bjd = 0.0;   // of the data (integer day)
  std::size_t n_transits = 0;         // in the fits
  std::size_t n_outliers = 0;
  long long n_ref = 0;                // reference epoch with ~zero T-P correlation
  long long user_epoch = 0;

  // Linear ephemeris.
  PolynomialEphemeris linear;
  Estimate t_ref_days;                // at n_ref (relative to reference_epoch_bjd)
  Estimate t0_days;                   // at user_epoch
  Estimate period_days;
  double t0_period_covariance = 0.0;  // cov(T0 at user_epoch, P), days^2
  double t_ref_period_correlation = 0.0;
  double reduced_chi2 = 0.0;
  bool errors_scaled = false;

  // Quadratic ephemeris.
  PolynomialEphemeris quadratic;
  Estimate dp_dn_days;                // days per orbit
  Estimate dp_dt;                     // dimensionless (days per day)
  Estimate dp_dt_ms_per_year;         // milliseconds per year
  double delta_chi2 = 0.0;            // chi2(linear) - chi2(quadratic)
  double delta_bic = 0.0;             // BIC(quadratic) - BIC(linear); < 0 favours change
  // The quadratic against the timing-variation model and against the best of linear and
  // sinusoid (scores as in the rule above; NaN without a sinusoid fit). A period change
  // is favoured only when the quadratic beats both: delta_bic < 0 and
  // delta_bic_vs_best_other < 0. With a timing variation, a quadratic term mostly fits
  // the variation, not a change of the period.
  double delta_bic_vs_sinusoid = std::numeric_limits<double>::quiet_NaN();
  double delta_bic_vs_best_other = std::numeric_limits<double>::quiet_NaN();
  bool period_change_favoured = false;

  std::vector<OminusC> o_minus_c;
  TtvResult ttv;
  std::vector<TimingModelScore> model_scores;  // linear, quadratic, sinusoid (in that order)
  std::vector<TransitPrediction> predictions;
  EphemerisModel prediction_model = EphemerisModel::kLinear;  // the model used (never kAuto)
  PredictionBasis prediction;
  std::vector<std::string> notes;     // things the reader must know, each once

  std::string BriefReport() const;
  // Tables: ephemerides, O-C (minutes, or days with oc_in_minutes = false), TTV,
  // predictions, notes.
  std::string FullReport(bool oc_in_minutes = true) const;
};

// Fits the ephemerides of one planet's transits (use TransitData::for_planet first when a
// file holds several). Throws InputError when there are fewer than 2 transits (3 for the
// quadratic, which is then skipped with a note), or on invalid options.
EphemerisResult fit_ephemeris(const TransitData& transits, const EphemerisOptions& options = {});

// Expected near-resonant super-periods for the first-order resonances j:(j-1) nearest
// the period ratio (two values of j, j >= 2), Lithwick, Xie & Wu (2012) eq. (1)-(2).
// `transiting_period_days` converts to epochs of the transiting planet.
std::vector<ResonanceSuperPeriod> near_resonance_super_periods(double transiting_period_days,
                                                               double companion_period_days);
// P_super = 1 / |j / P_out - (j - 1) / P_in| for one j (P_in < P_out).
double super_period_days(double p_inner_days, double p_outer_days, int j);

// ---- Time scales and display ----------------------------------------------------------
// TAI - UTC (s) at a UTC Julian date: IERS leap-second table (Bulletin C), 10 s before
// 1972, 37 s since 2017-01-01 (assumes no leap second announced since then).
double tai_minus_utc_seconds(double jd_utc);
// UTC calendar date of a BJD_TDB instant, "YYYY-MM-DD hh:mm:ss" (rounded to the second).
// UTC = TDB - (TT - TAI = 32.184 s) - (TAI - UTC); TDB - TT (periodic, < 2 ms) neglected.
// This is the barycentric instant in the UTC scale: the arrival time at an observatory
// differs by the barycentric light-time (up to ~8.3 min), which is the user's to apply.
std::string bjd_tdb_to_utc_string(long double bjd_tdb);
// Full-precision BJD text of reference_epoch_bjd + reduced_days with `decimals` places.
std::string format_bjd(double reference_epoch_bjd, double reduced_days, int decimals = 6);

// ---- Joint RV + transit likelihood ---------------------------------------------------
// Gaussian log-likelihood of one planet's transit times given its period and time of
// conjunction, for adding to the RV likelihood (keplerian_model.h) in fit / sample /
// evidence:
//   ln L = -1/2 sum_n [ r_n^2 / (s_n^2 + j^2) + ln(2 pi (s_n^2 + j^2)) ],
//   r_n = T_n - (T_c* + (n - n_anchor) P),
// with s_n the stated uncertainty, j the timing jitter (days, >= 0), and T_c* the
// model's conjunction nearest the anchor transit n_anchor (the most precise one):
// T_c* = t_conj + round((T_anchor - t_conj) / P) P. So `t_conj` may be any conjunction
// (a sampler may wrap it), while epoch differences in the file still fix the cycle count.
// Times are in the RV model's frame: days after `frame_reference_epoch_bjd` (the
// VelocityData's reference_epoch_bjd); the shift between frames is applied exactly.
class TransitTimingLikelihood {
 public:
  TransitTimingLikelihood(const TransitData& transits, double frame_reference_epoch_bjd);
  // -inf when P <= 0 or jitter < 0 or any input is not finite.
  double log_likelihood(double period_days, double t_conj_days, double jitter_days = 0.0) const;
  // Chi-square of the same residuals (jitter added in quadrature).
  double chi_square(double period_days, double t_conj_days, double jitter_days = 0.0) const;
  std::size_t size() const { return epoch_.size(); }

 private:
  std::vector<double> epoch_offset_;  // n - n_anchor
  std::vector<long long> epoch_;
  std::vector<double> time_days_;     // in the RV frame
  std::vector<double> variance_;
  double anchor_time_days_ = 0.0;
};

}  // namespace apsides
