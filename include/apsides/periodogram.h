// Generalised Lomb-Scargle periodogram (Zechmeister & Kuerster 2009, A&A 496, 577):
// weighted, floating mean, on a uniform frequency grid; Baluev (2008, MNRAS 385, 1279)
// false-alarm probabilities; window function; alias flags; residual periodograms.
#pragma once

#include <cstddef>
#include <string>
#include <vector>

#include "apsides/data.h"

namespace apsides {

enum class Normalization { kStandard, kModel, kLog, kPsd };
std::string to_string(Normalization n);
Normalization parse_normalization(const std::string& text, const std::string& where);

enum class PeriodogramMethod { kAuto, kExact, kFast };
std::string to_string(PeriodogramMethod m);
PeriodogramMethod parse_periodogram_method(const std::string& text, const std::string& where);

struct PeriodogramOptions {
  // Frequency grid. Unset (<= 0) values are chosen from the data:
  //   min frequency 1 / (3 x baseline); max frequency from the sampling (see Validate);
  //   step 1 / (oversample x baseline).
  double min_period_days = 0.0;
  double max_period_days = 0.0;
  double oversample = 10.0;          // grid points per peak width 1/baseline (>= 5 advised)
  Normalization normalization = Normalization::kStandard;
  PeriodogramMethod method = PeriodogramMethod::kAuto;
  int n_peaks = 10;                  // peaks to report
  int n_window_peaks = 5;
  int bootstrap = 0;                 // bootstrap resamplings for an empirical FAP (0 = off)
  unsigned long long seed = 1;
  int threads = 0;                   // 0 = all cores

  std::string Validate() const;
};

struct Peak {
  double frequency_per_day = 0.0;
  double period_days = 0.0;
  double power = 0.0;
  double fap = 1.0;                  // Baluev 2008 analytic
  double fap_bootstrap = -1.0;       // -1 when not computed
  int alias_of = -1;                 // index of the stronger peak this may be an alias of
  double alias_window_frequency = 0.0;  // the window peak f_w linking them (per day)
};

struct PeriodogramResult {
  std::vector<double> frequency_per_day;
  std::vector<double> power;          // in the requested normalization
  std::vector<Peak> peaks;            // sorted by power, strongest first
  std::vector<double> window_power;   // window function on the same grid
  std::vector<Peak> window_peaks;
  double max_frequency_per_day = 0.0; // used for the FAP
  std::size_t n_points = 0;
  std::string method_used;            // "exact" or "fast"
  std::string offsets_note;           // how instrument offsets were handled
  std::string message = "Periodogram was not run.";

  std::string BriefReport() const;
};

// Periodogram of the velocities. With several instruments, the per-instrument offsets
// are removed first (see DEVELOPERS.md for which and why).
PeriodogramResult compute_periodogram(const VelocityData& data, const PeriodogramOptions& options);

// Low-level: periodogram of (t, y, dy) on an explicit uniform grid f0 + k df, k < nf.
// Standard normalisation. `threads` 0 = all cores.
std::vector<double> gls_power(const std::vector<double>& t, const std::vector<double>& y,
                              const std::vector<double>& dy, double f0, double df,
                              std::size_t nf, PeriodogramMethod method = PeriodogramMethod::kAuto,
                              int threads = 0);

// Baluev (2008) false-alarm probability of the maximum standard-normalised power z
// among frequencies up to fmax, for N points at times t with weights from dy.
double baluev_fap(double z, std::size_t n, double fmax, const std::vector<double>& t,
                  const std::vector<double>& dy);

}  // namespace apsides
