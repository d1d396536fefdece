// Stellar activity seen in the indicator columns (S-index, Hα, CCF FWHM, bisector span...):
// each indicator's periodogram on the velocities' own frequency grid, the velocity peaks an
// indicator shares, and the correlations of the velocities (or of the residuals of a fit)
// with each indicator, per instrument.
//
// Why: spots and faculae rotating with the star make velocity signals at the rotation
// period, its harmonics and their aliases, the commonest false planets. An indicator
// traces the star's part; a velocity peak that an indicator shows too is suspect.
//
// Indicators are read by name from the velocity files (data.h, IndicatorSeries). Each
// instrument's indicator gets its own zero point (S-index calibrations differ between
// spectrographs), exactly as instrument offsets in the velocity periodogram.
#ifndef APSIDES_ACTIVITY_H_
#define APSIDES_ACTIVITY_H_

#include <cstddef>
#include <limits>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/periodogram.h"

namespace apsides {

struct ActivityOptions {
  // An indicator peak counts (for flags and for the rotation hint) when its analytic FAP
  // (Baluev 2008, one zero point per instrument) is below this.
  double fap_level = 0.01;
  int n_peaks = 5;  // indicator peaks kept per indicator
  // Rotation hint: the strongest significant indicator peak between these periods (days);
  // max 0 = half the baseline.
  double rotation_min_days = 2.0;
  double rotation_max_days = 0.0;
  std::string Validate() const;  // "" or "field = value: must be ..."
};

struct IndicatorPeriodogram {
  std::string name;
  std::size_t n_points = 0;      // points where the indicator has a value
  bool weighted = false;         // true when the file gave the indicator's uncertainties
  PeriodogramResult periodogram; // on the velocities' grid
};

// A velocity peak within one peak width (1/baseline) of a significant indicator peak, or
// at its first harmonic (2 f_indicator, the second spot-group signal of rotation).
struct SharedSignal {
  int velocity_peak = 0;           // index into the velocity periodogram's peaks
  double velocity_period_days = 0.0;
  std::string indicator;
  double indicator_period_days = 0.0;
  double indicator_fap = 1.0;
  bool harmonic = false;           // the velocity peak is at half the indicator's period
  // "also in sindex at 27.1 d" / "half of sindex's 27.1 d (harmonic)"
  std::string note() const;
};

// Pearson and Spearman correlation of one indicator with the velocities (or residuals),
// two-sided p-values from Student's t with n - 2 degrees of freedom (as scipy.stats
// pearsonr / spearmanr; Spearman ranks ties by their average).
struct IndicatorCorrelation {
  std::string indicator;
  std::string instrument;          // "all" when pooled
  std::string against;             // "velocities" or "residuals"
  std::size_t n = 0;
  double pearson_r = std::numeric_limits<double>::quiet_NaN();
  double pearson_p = std::numeric_limits<double>::quiet_NaN();
  double spearman_rho = std::numeric_limits<double>::quiet_NaN();
  double spearman_p = std::numeric_limits<double>::quiet_NaN();
};

struct ActivityResult {
  std::vector<IndicatorPeriodogram> periodograms;
  std::vector<SharedSignal> shared;
  std::vector<IndicatorCorrelation> correlations;
  // Strongest significant indicator peak in the rotation range (NaN when none) and where it
  // came from ("sindex periodogram, FAP 1.2e-5"): the centre of the GP rotation-period prior.
  double rotation_hint_days = std::numeric_limits<double>::quiet_NaN();
  std::string rotation_hint_source;
  std::vector<std::string> notes;  // indicators skipped (too few points) and why

  bool empty() const { return periodograms.empty(); }
  std::string BriefReport() const;
  std::string FullReport() const;
};

// Periodogram of one indicator on `grid` (the velocities' grid), one zero point per
// instrument. Throws InputError when the indicator is absent or has too few values.
IndicatorPeriodogram indicator_periodogram(const VelocityData& data, const std::string& name,
                                           const FrequencyGrid& grid, const PeriodogramOptions& options);

// Every indicator of `data`: periodograms on the grid of `velocities`, shared signals,
// correlations with the velocities and, when `residuals` is not null (one per point),
// with the residuals too. Indicators with fewer than 6 values are skipped with a note.
ActivityResult analyze_activity(const VelocityData& data, const PeriodogramResult& velocities,
                                const PeriodogramOptions& periodogram_options, const ActivityOptions& options,
                                const std::vector<double>* residuals = nullptr);

// An indicator peak at a frequency of the sampling (within 1/baseline of a window-function
// peak of power >= 0.1: the day, its harmonics, the year) is an artefact of the sampling,
// not of the star; it neither flags a velocity peak nor gives the rotation hint. Nor does
// an indicator peak marked as a possible alias of a stronger one (Peak::alias_of).
bool at_sampling_frequency(const PeriodogramResult& velocities, double frequency_per_day);

// The velocity peaks that an indicator periodogram shares (rule of SharedSignal).
std::vector<SharedSignal> shared_signals(const PeriodogramResult& velocities,
                                         const std::vector<IndicatorPeriodogram>& indicators, double fap_level);

// Pearson and Spearman of x against y (equal sizes, n >= 3; NaN pairs skipped).
IndicatorCorrelation correlate(const std::vector<double>& x, const std::vector<double>& y);

// The "signal at the rotation period or a harmonic" caution for a planet at `period_days`,
// or "" when the period is not within 5 % of P_rot or P_rot/2 (common practice: spot
// signals are strongest at the rotation period and its first harmonic, the two terms of
// the rotation kernel; P_rot/3 is left out, as it would flag many true planets).
std::string rotation_caution(double period_days, double rotation_days);

}  // namespace apsides

#endif  // APSIDES_ACTIVITY_H_
