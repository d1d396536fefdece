// Signal search: the generalised Lomb-Scargle periodogram (Zechmeister & Kuerster 2009,
// A&A 496, 577) -- weighted, floating mean -- on a uniform frequency grid; Baluev (2008,
// MNRAS 385, 1279) analytic false-alarm probabilities; a seeded bootstrap FAP; the window
// function (periodogram of the sampling) with alias flags; periodograms of the residuals
// of fixed planets.
//
// Power in the standard normalisation: p(f) = (chi2_0 - chi2(f)) / chi2_0, chi2_0 the
// chi-square of the null model (a constant, or one offset per instrument) and chi2(f) that
// of the null model plus a sinusoid of frequency f, both weighted by 1/sigma^2.
// Other normalisations (as astropy defines them for the same model):
//   model = p / (1 - p);  log = -ln(1 - p);  psd = p * chi2_0 / 2.
//
// Instrument offsets (several instruments). The offsets are fitted jointly with the
// sinusoid AT EVERY FREQUENCY: the design matrix is [one indicator column per instrument,
// cos 2 pi f t, sin 2 pi f t], which for one instrument is exactly the floating mean of
// Zechmeister & Kuerster. Why not remove the offsets by a first fit and scan the rest:
// an instrument that covers only part of a long-period orbit (or few points) has a
// weighted mean that soaks up part of the signal, so a first fit biases (can even hide)
// the very signal sought and misplaces the power. The joint fit is the exact linear least
// squares of the full model, costs one pair of sums per instrument in the same pass, and
// the Baluev FAP uses the matching degrees of freedom (m offsets in the null, m + 2 with
// the sinusoid).
//
// Numerics. The exact mode sums over every point at every frequency, stepping cos/sin
// across the grid with a rotation recurrence (per point, per 8 frequencies) and
// re-anchoring on a directly computed sin/cos every 4096 frequencies (error <= 1e-12 in
// the sums, checked by tests). Times are centred and the velocities weighted-mean
// centred before summing. Work is split over threads by blocks of frequencies; the result
// does not depend on the number of threads. The fast mode spreads the points onto a
// regular grid and uses FFTW (Press & Rybicki 1989, ApJ 338, 277), with an "exponential
// of semicircle" kernel 9 cells wide on a grid twice the number of frequencies (Barnett,
// Magland & af Klinteberg 2019), so that the maximum power error stays <= 1e-5 (~1e-7
// measured); its plans and buffers are kept and reused across calls.
#pragma once

#include <cstddef>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/keplerian_model.h"

namespace apsides {

enum class Normalization { kStandard, kModel, kLog, kPsd };
std::string to_string(Normalization n);
// "standard", "model", "log", "psd"; throws InputError naming `where` otherwise.
Normalization parse_normalization(const std::string& text, const std::string& where);

// kAuto: exact unless N x Nf is large (> 2e8 point-frequency terms), then fast.
enum class PeriodogramMethod { kAuto, kExact, kFast };
std::string to_string(PeriodogramMethod m);
// "auto", "exact", "fast"; throws InputError naming `where` otherwise.
PeriodogramMethod parse_periodogram_method(const std::string& text, const std::string& where);

// The frequency grid a periodogram uses: first frequency, step, count.
struct FrequencyGrid {
  double f0 = 0.0;
  double df = 0.0;
  std::size_t nf = 0;
  double fmax() const { return f0 + df * static_cast<double>(nf == 0 ? 0 : nf - 1); }
};

struct PeriodogramOptions {
  // Frequency grid, uniform in frequency. Unset (<= 0) values come from the data:
  //   longest period: 3 x baseline (lowest frequency 1 / (3 T));
  //   shortest period: from the sampling -- half the inverse of the 10th percentile of
  //   the gaps between consecutive distinct times, kept within [0.1 d, 0.5 d] (i.e. the
  //   maximum frequency is between 2 and 10 per day, so the daily aliases of
  //   short-period planets are always on the grid);
  //   step 1 / (oversample x T).
  double min_period_days = 0.0;
  double max_period_days = 0.0;
  double oversample = 10.0;          // grid points per peak width 1/T; >= 1 (5 or more advised)
  Normalization normalization = Normalization::kStandard;
  PeriodogramMethod method = PeriodogramMethod::kAuto;
  int n_peaks = 10;                  // peaks to report, >= 1
  int n_window_peaks = 5;            // window-function peaks to report, >= 0
  int bootstrap = 0;                 // bootstrap resamplings for an empirical FAP (0 = off)
  unsigned long long seed = 1;       // bootstrap seed
  int threads = 0;                   // 0 = all cores
  std::size_t max_grid_points = 50'000'000;  // refuse larger grids (memory)
  // When set (nf > 0), this grid instead of the one above: an indicator's periodogram on
  // the velocities' grid (activity.h), so the two share their frequencies exactly.
  FrequencyGrid fixed_grid;

  // "" when valid, otherwise "field = value: must be ...".
  std::string Validate() const;
};

struct Peak {
  double frequency_per_day = 0.0;
  double period_days = 0.0;
  double power = 0.0;                // in the requested normalisation
  double power_standard = 0.0;       // standard normalisation (what the FAP uses)
  double fap = 1.0;                  // Baluev 2008 analytic
  double fap_bootstrap = -1.0;       // -1 when not computed
  int alias_of = -1;                 // index (in `peaks`) of the stronger peak this may alias
  double alias_window_frequency = 0.0;  // the window peak f_w linking them (per day)
};

struct PeriodogramResult {
  std::vector<double> frequency_per_day;
  std::vector<double> power;          // in the requested normalisation
  std::vector<Peak> peaks;            // sorted by power, strongest first
  std::vector<double> window_power;   // window function on the same grid, |sum w e^{i 2 pi f t}|^2
  std::vector<Peak> window_peaks;     // strongest window peaks above 2/T (power = window power)
  Normalization normalization = Normalization::kStandard;
  double min_frequency_per_day = 0.0;
  double max_frequency_per_day = 0.0; // grid top, also used for the FAP
  double frequency_step_per_day = 0.0;
  double baseline_days = 0.0;
  std::size_t n_points = 0;
  std::size_t n_instruments = 0;
  int bootstrap = 0;
  std::string method_used;            // "exact" or "fast"
  std::string offsets_note;           // how instrument offsets were handled
  std::string residual_note;          // what was subtracted (residual periodograms)
  bool success = false;
  std::string message = "Periodogram was not run.";

  std::string BriefReport() const;
  std::string FullReport() const;
};

// Periodogram of the velocities, with one offset per instrument fitted at each frequency.
// Throws InputError for invalid options or too few points (< n_instruments + 3).
PeriodogramResult compute_periodogram(const VelocityData& data, const PeriodogramOptions& options);

// Residual periodogram: the same scan on data minus the velocities of `planets` (held
// fixed); instrument offsets are fitted at every frequency as above, so the search for the
// next planet sees the right residuals whatever the offsets of the previous fit were.
PeriodogramResult compute_residual_periodogram(const VelocityData& data,
                                               const std::vector<Planet>& planets,
                                               const PeriodogramOptions& options);

// The grid `compute_periodogram` would use (options.fixed_grid when set).
FrequencyGrid default_grid(const VelocityData& data, const PeriodogramOptions& options);

// Low-level: GLS power (standard normalisation, one floating mean) of (t, y, dy) on the
// grid f0 + k df, k < nf. `threads` 0 = all cores. Deterministic for any thread count.
std::vector<double> gls_power(const std::vector<double>& t, const std::vector<double>& y,
                              const std::vector<double>& dy, double f0, double df,
                              std::size_t nf, PeriodogramMethod method = PeriodogramMethod::kAuto,
                              int threads = 0);

// Reference: the same power by the textbook direct sums (std::cos/std::sin at every point
// and frequency, Zechmeister & Kuerster Eqs. 5-15). Slow; for tests.
std::vector<double> gls_power_direct(const std::vector<double>& t, const std::vector<double>& y,
                                     const std::vector<double>& dy,
                                     const std::vector<double>& frequency_per_day);

// Baluev (2008) false-alarm probability of the maximum standard-normalised power z
// among frequencies up to fmax, for N points at times t with weights from dy
// (Eq. 6 with the tau of Eq. 5 -- astropy's "baluev" method): one floating mean.
double baluev_fap(double z, std::size_t n, double fmax, const std::vector<double>& t,
                  const std::vector<double>& dy);
// The same with n_null parameters in the null model and n_null + 2 with the sinusoid
// (n_null = number of fitted offsets).
double baluev_fap(double z, std::size_t n, double fmax, const std::vector<double>& t,
                  const std::vector<double>& dy, int n_null);

// Converts a standard-normalised power to another normalisation (chi2_0 for psd).
double convert_power(double p_standard, Normalization to, double chi2_null);

}  // namespace apsides
