// Figures for papers and for looking at a fit: periodograms, velocities against time,
// phase-folded orbits, O−C of transit times, corner plots and trace plots, drawn with
// PLplot (cairo devices) as PNG or PDF.
//
// Every function here takes plain data (vectors and the small structs below), never
// another stage's result type, so any stage — or a user's own program — can draw with
// them. The look is shared by all figures:
//   - white background, dark axes, labels in plain words with units;
//   - the Okabe & Ito (2008, "Color Universal Design") colour-blind-safe palette;
//   - instruments differ in marker shape AND colour, lines in dash pattern AND colour,
//     so every figure also reads in greyscale.
//
// Writing is atomic: a figure is drawn to a temporary file beside the target and renamed
// over it only when complete, so a failed write never leaves a half-drawn file. Bad input
// (empty or mismatched arrays, non-finite values, an unwritable path, a size out of range)
// throws apsides::InputError naming the figure, the field and the rule; PLplot is never
// called with data it could reject.
//
// PLplot keeps global state; calls into this module are serialised by an internal mutex,
// so they are safe (but not parallel) from several threads.
#pragma once

#include <cstddef>
#include <limits>
#include <string>
#include <vector>

namespace apsides {

enum class FigureFormat { kPng, kPdf };
std::string to_string(FigureFormat f);  // "png" / "pdf"
// Parses "png" or "pdf" (case-insensitive); `where` names the option or key for the error.
FigureFormat parse_figure_format(const std::string& text, const std::string& where);
// The file extension with its dot: ".png" / ".pdf".
std::string figure_extension(FigureFormat f);

struct FigureOptions {
  FigureFormat format = FigureFormat::kPng;
  // Size of the image. For PNG these are pixels; for PDF the same numbers are taken as
  // pixels at 96 per inch, so a PDF has the same proportions and text size as the PNG.
  int width_px = 1200;   // [200, 8000]
  int height_px = 800;   // [200, 8000]
  double font_scale = 1.0;  // multiplies every text size; (0.2, 5]
  std::string title;        // optional line above the figure; empty = none

  std::string Validate() const;
};

// What was written.
struct FigureFile {
  std::string path;
  FigureFormat format = FigureFormat::kPng;
  int width_px = 0;
  int height_px = 0;
};

// dir/stem + the format's extension, e.g. figure_path("out/figures", "periodogram", kPng)
// = "out/figures/periodogram.png".
std::string figure_path(const std::string& dir, const std::string& stem, FigureFormat format);

// ---------------------------------------------------------------------------------------
// Shared pieces.

// One series of measurements from one instrument (velocities, residuals, ...).
// `error` may be empty (no error bars) or have the size of `time_bjd`.
struct InstrumentSeries {
  std::string name;               // legend entry
  std::vector<double> time_bjd;   // BJD_TDB, full or reduced, as in the data
  std::vector<double> value;      // same size as time_bjd
  std::vector<double> error;      // empty, or same size (1-sigma)
};

// A horizontal reference level with a label, e.g. a false-alarm-probability level.
struct LevelLine {
  double value = 0.0;
  std::string label;  // e.g. "FAP 1%"
};

// A point to mark and annotate, e.g. a periodogram peak.
struct MarkedPoint {
  double x = 0.0;
  double y = 0.0;
  std::string label;  // e.g. "12.34 d"; empty = marker only
};

// ---------------------------------------------------------------------------------------
// (1) Periodogram: power against period (log axis) with FAP levels and marked peaks;
// optionally the window function in a second panel below, on the same period axis.

struct PeriodogramPanel {
  std::string title;                 // e.g. "Residuals after 1 planet"; empty = none
  std::vector<double> period_days;   // > 0, any order
  std::vector<double> power;         // same size, finite
  std::vector<LevelLine> fap_levels; // power values at which the FAP is e.g. 10 %, 1 %, 0.1 %
  std::vector<MarkedPoint> peaks;    // x = period [d], y = power; drawn with their labels
  std::string power_label = "Power (normalised)";
};

struct PeriodogramFigureData {
  PeriodogramPanel periodogram;
  // Window function on a period grid (may be the periodogram's grid). Empty = no panel.
  std::vector<double> window_period_days;
  std::vector<double> window_power;
  std::vector<MarkedPoint> window_peaks;  // optional
};

FigureFile write_periodogram_figure(const PeriodogramFigureData& data, const std::string& path,
                                    const FigureOptions& options = {});

// The periodograms of successive search steps (data, residuals after 1 planet, ...)
// stacked top to bottom on a shared period axis. At least one panel, at most 8.
FigureFile write_periodogram_steps_figure(const std::vector<PeriodogramPanel>& panels,
                                          const std::string& path, const FigureOptions& options = {});

// ---------------------------------------------------------------------------------------
// (2) Velocities against time with the model curve, one marker shape and colour per
// instrument and a legend; residuals in a panel underneath when given.

struct TimeSeriesFigureData {
  std::vector<InstrumentSeries> instruments;  // at least one point in all
  std::vector<double> model_time_bjd;         // optional model curve (sorted by time)
  std::vector<double> model_value;
  std::string model_label = "Model";
  std::vector<InstrumentSeries> residuals;    // optional; drawn in a lower panel
  std::string value_label = "Radial velocity [m/s]";
  std::string residual_label = "Residual [m/s]";
  // Times are shown as t − time_zero_bjd. NaN = chosen from the data: the start of the
  // data rounded down to a multiple of 1000 d when times are full BJD values (> 1e5),
  // otherwise 0 (times shown as given).
  double time_zero_bjd = std::numeric_limits<double>::quiet_NaN();
};

FigureFile write_time_series_figure(const TimeSeriesFigureData& data, const std::string& path,
                                    const FigureOptions& options = {});

// ---------------------------------------------------------------------------------------
// (3) Phase-folded orbits, one column per planet: the velocities with the other planets,
// the trend and the instrument offsets removed, the planet's model curve, and the
// residuals underneath. Phase is (t − t_ref) / P folded into [−0.5, 0.5), so the
// reference time (e.g. the time of conjunction) sits in the middle.

struct PhaseFoldPanel {
  std::string planet_label;                   // e.g. "b"
  double period_days = 0.0;                   // > 0
  double t_ref_bjd = 0.0;                     // phase zero
  std::vector<InstrumentSeries> data;         // velocities, other signals removed
  std::vector<double> model_phase;            // model curve: phase in [−0.5, 0.5] …
  std::vector<double> model_value;            // … and velocity
  std::vector<InstrumentSeries> residuals;    // optional; same instruments as `data`
  std::string subtitle;                       // e.g. "P = 12.34 d, K = 5.6 m/s"; may be empty
};

struct PhaseFoldFigureData {
  std::vector<PhaseFoldPanel> planets;        // 1 to 6 planets
  std::string value_label = "Radial velocity [m/s]";
  std::string residual_label = "Residual [m/s]";
};

FigureFile write_phase_fold_figure(const PhaseFoldFigureData& data, const std::string& path,
                                   const FigureOptions& options = {});

// ---------------------------------------------------------------------------------------
// (4) O−C of transit times against epoch, with error bars, drawn in minutes, and an
// optional curve (e.g. a fitted timing-variation sinusoid, sampled by the caller).

struct OcFigureData {
  std::string planet_label;                 // e.g. "b"; used in the title line
  std::vector<double> epoch;                // transit number (integers, stored as double)
  std::vector<double> o_minus_c_days;       // same size
  std::vector<double> error_days;           // same size, > 0
  std::vector<double> curve_epoch;          // optional fitted curve
  std::vector<double> curve_o_minus_c_days;
  std::string curve_label = "Timing-variation fit";
};

FigureFile write_oc_figure(const OcFigureData& data, const std::string& path,
                           const FigureOptions& options = {});

// ---------------------------------------------------------------------------------------
// (5) Corner plot of N parameters (1 ≤ N ≤ 12): 1-D histograms on the diagonal with the
// 16/50/84 % quantiles marked and quoted, 2-D sample density below it with contours
// enclosing 39.3 % and 86.5 % of the samples (the 1σ and 2σ regions of a 2-D Gaussian).

struct CornerParameter {
  std::string label;                   // with unit, e.g. "Period [d]"
  std::vector<double> samples;         // all parameters the same length (>= 10), finite
  double truth = std::numeric_limits<double>::quiet_NaN();  // drawn when finite
};

struct CornerFigureData {
  std::vector<CornerParameter> parameters;
  int bins = 30;                       // histogram bins per axis, [5, 200]
};

FigureFile write_corner_figure(const CornerFigureData& data, const std::string& path,
                               const FigureOptions& options = {});

// ---------------------------------------------------------------------------------------
// (6) Trace plots: each parameter's value against step for several walkers, one panel
// per parameter (1 to 12), with an optional line at the end of the burn-in.

struct TraceFigureData {
  std::vector<std::string> labels;     // one per parameter, with units
  std::size_t n_steps = 0;
  std::size_t n_walkers = 0;
  // steps × walkers × parameters, row-major (the layout of the results file's chains):
  // chain[(s * n_walkers + w) * n_params + p], with n_params = labels.size().
  std::vector<double> chain;
  int max_walkers_shown = 12;          // the first walkers are drawn; [1, 100]
  double burn_in_step = -1.0;          // vertical line at this step when >= 0
};

FigureFile write_trace_figure(const TraceFigureData& data, const std::string& path,
                              const FigureOptions& options = {});

// ---------------------------------------------------------------------------------------
// (7) Completeness map (detection limits): the fraction of injected planets recovered in
// each cell of a period x mass grid, both axes logarithmic, as shaded cells (white = 0 to
// dark blue = 1, with a colour bar; cells not computed left grey), contour lines at the
// given levels (dash pattern AND colour per level), and planets marked on top.

struct CompletenessFigureData {
  std::vector<double> period_edges_d;   // n_p + 1 values, increasing, > 0 (log-spaced reads best)
  std::vector<double> mass_edges;       // n_m + 1 values, increasing, > 0
  // n_p x n_m values in [0, 1], period-major: fraction[i * n_m + j] for period cell i and
  // mass cell j; NaN = not computed.
  std::vector<double> fraction;
  std::vector<double> contour_levels{0.5, 0.9, 0.99};  // each in (0, 1); at most 4
  std::vector<MarkedPoint> planets;     // x = period [d], y = mass; drawn with labels
  std::string mass_label = "Minimum mass m sin i [Earth masses]";
  std::string value_label = "Fraction recovered";
};

FigureFile write_completeness_figure(const CompletenessFigureData& data, const std::string& path,
                                     const FigureOptions& options = {});

// ---------------------------------------------------------------------------------------
// (8) A population of planets (e.g. a survey): two panels on log-log axes, mass against
// period and semi-major axis against period, one marker per planet; in the second panel
// an optional reference curve (e.g. Kepler's third law, P^2 proportional to a^3, for a
// typical host), sampled by the caller.

struct PopulationFigureData {
  std::vector<double> period_d;         // one per planet, > 0
  std::vector<double> mass;             // same size; NaN = unknown (not drawn in panel 1)
  std::vector<double> a_au;             // same size; NaN = unknown (not drawn in panel 2)
  std::string mass_label = "Minimum mass m sin i [Earth masses]";
  std::vector<double> line_period_d;    // optional reference curve in panel 2
  std::vector<double> line_a_au;
  std::string line_label;
};

FigureFile write_population_figure(const PopulationFigureData& data, const std::string& path,
                                   const FigureOptions& options = {});

}  // namespace apsides
