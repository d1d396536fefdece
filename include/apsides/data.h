// Observations: stellar radial velocities and mid-transit times, as read from files.
//
// Times are BJD_TDB in days. To keep full precision, each data set stores times relative
// to an integer reference epoch (`reference_epoch_bjd`), computed in long double when the
// file is read; add the epoch back only for display. Velocities are m/s, positive =
// receding.
//
// Reduced times. Archives often print times with a constant subtracted. The rule, for
// velocity and transit-time files alike, applied to every row as a file is read:
//   - no offset declared: every time must be a full BJD, 2 400 000 <= t < 2 500 000 (the
//     years 1858-2132). Anything else is an InputError that names the common offsets
//     (`kCommonTimeOffsets`: BJD - 2457000 as TESS prints it, BJD - 2450000,
//     BJD - 2400000, MJD = BJD - 2400000.5) and says which of them put the time between
//     1968 and 2050;
//   - an offset declared (`time_offset` in the project, `--time-offset` on the command
//     line): it is added to every time of the file, and the file's own times must not
//     already be full BJD (the offset would then be applied twice), and the sums must be
//     full BJD;
//   - `time_offset = 0` declares that the times are on a scale of their own (days from an
//     arbitrary origin, as in simulations): they are kept as given and not checked.
// The check |t| < 1e7 (a time in days at all) comes first.
#pragma once

#include <cstddef>
#include <limits>
#include <optional>
#include <string>
#include <vector>

namespace apsides {

enum class VelocityUnit { kMetersPerSecond, kKilometersPerSecond };
std::string to_string(VelocityUnit unit);
// Accepts "m/s" and "km/s"; throws InputError naming `where` otherwise.
VelocityUnit parse_velocity_unit(const std::string& text, const std::string& where);

// What to do with two points of one instrument at exactly the same time (after the time
// offset). Archives repeat timestamps (two exposures, times rounded to 1e-3 d):
//   kKeep    (default) keep every point, with one warning line naming the rows;
//   kAverage replace the repeated points by their inverse-variance weighted mean
//            (v = sum w_i v_i / sum w_i, sigma = (sum w_i)^-1/2, w_i = sigma_i^-2; indicators
//            the same way where they have uncertainties, else their plain mean), with one
//            warning line;
//   kError   refuse the data (InputError naming both rows).
// When the repeated rows come from files with different settings, the strictest wins
// (error > average > keep).
enum class RepeatPolicy { kKeep, kAverage, kError };
std::string to_string(RepeatPolicy policy);
// Accepts "keep", "average", "error"; throws InputError naming `where` otherwise.
RepeatPolicy parse_repeat_policy(const std::string& text, const std::string& where);

// The offsets archives commonly subtract from BJD: 2457000 (TESS), 2450000, 2400000,
// 2400000.5 (MJD). Used in the message for a time that looks reduced.
inline constexpr double kCommonTimeOffsets[] = {2457000.0, 2450000.0, 2400000.0, 2400000.5};
// Full BJD range accepted without a declared offset: [2 400 000, 2 500 000).
inline constexpr double kFullBjdMin = 2400000.0;
inline constexpr double kFullBjdMax = 2500000.0;
// Throws InputError "<where> is <value>; it must be between 0 and 2500000 ..." unless
// 0 <= offset < 2 500 000. `where` names the key or option ("project.toml:5:
// velocities.time_offset", "--time-offset").
void check_time_offset(double offset_days, const std::string& where);

// One activity indicator (or any other extra numeric column kept by name), aligned with
// the points of its data set: value[i] belongs to point i. Values are kept as read (no
// unit conversion). A missing value (an empty cell, "nan", or dashes "---" as CDS tables
// write it) is NaN.
struct IndicatorSeries {
  std::string name;                 // the column's name (header row or `columns`)
  std::vector<double> value;        // NaN where missing
  // From the column named `<name>_err`, `<name>_error`, `e_<name>` or `err_<name>` (the
  // first of these present; >= 0). Empty when the file has no such column; otherwise one
  // per point, NaN where missing.
  std::vector<double> uncertainty;
  bool has_uncertainty() const { return !uncertainty.empty(); }
  std::size_t count_present() const;  // values that are not NaN
};
// The name of the uncertainty column of indicator `name` among `columns`, or "" (the rule
// above, checked in that order).
std::string indicator_error_column(const std::string& name, const std::vector<std::string>& columns);

// The points of one indicator that have a value, e.g. for an indicator periodogram or a
// Gaussian process fitted to it.
struct IndicatorPoints {
  std::string name;
  std::vector<double> time_days;     // relative to the data's reference_epoch_bjd
  std::vector<double> value;
  std::vector<double> uncertainty;   // NaN where the indicator has none
  std::vector<int> instrument;       // index into the data's instrument_names
  std::vector<std::size_t> point;    // index of the point in the data set
  std::size_t size() const { return value.size(); }
};

// Velocities of one star, possibly from several instruments.
struct VelocityData {
  double reference_epoch_bjd = 0.0;      // integer day subtracted from every time
  std::vector<double> time_days;         // t - reference_epoch_bjd
  std::vector<double> velocity_m_s;      // as read, converted to m/s
  std::vector<double> uncertainty_m_s;   // 1-sigma, > 0
  std::vector<int> instrument;           // index into instrument_names
  std::vector<std::string> instrument_names;
  std::vector<std::string> origin;       // "file:line" of each point, for messages
  // Activity indicators by name, each aligned with the points (NaN where a point has no
  // value, e.g. an instrument whose file lacks the column). In order of first appearance.
  std::vector<IndicatorSeries> indicators;
  // The files the points came from ("a.csv, b.csv"), for messages about the data as a whole.
  std::string sources() const;
  // Things the user should know that are not errors (e.g. uncertainties that look like
  // m/s in a file declared km/s, repeated timestamps kept). Commands print them to stderr.
  std::vector<std::string> warnings;

  std::size_t size() const { return time_days.size(); }
  std::size_t n_instruments() const { return instrument_names.size(); }
  double baseline_days() const;           // max(t) - min(t); 0 when empty
  std::size_t count(int instrument_index) const;
  // A copy holding only the points of one instrument (index re-numbered to 0), with their
  // indicator values.
  VelocityData subset(int instrument_index) const;

  // Indicator by name, or nullptr.
  const IndicatorSeries* indicator(const std::string& name) const;
  std::vector<std::string> indicator_names() const;
  // The points where indicator `name` has a value, of one instrument (index) or of all
  // (-1). Throws InputError naming the indicators present when there is no such indicator.
  IndicatorPoints indicator_points(const std::string& name, int instrument_index = -1) const;
};

// How to read one velocity file.
struct VelocityFileOptions {
  // Label for every row of the file. Empty: the file's instrument column (the first text
  // column after the third) names the instrument; a file without one gets the file's stem.
  // A label that contradicts the file's own instrument column is an input error.
  std::string instrument;
  VelocityUnit unit = VelocityUnit::kMetersPerSecond;
  // Added to every time of the file (days); see "Reduced times" above. Unset: none declared.
  std::optional<double> time_offset_days{};
  RepeatPolicy repeats = RepeatPolicy::kKeep;
  // Extra columns to keep as indicators, by name. Unset: every extra numeric column (that
  // is not an indicator's uncertainty column) is kept, except one empty on every row (left
  // out with a warning). A name that is not a column, or a named column empty on every
  // row, is an input error. An uncertainty column named beside its indicator comes with
  // it (not as a series of its own).
  std::optional<std::vector<std::string>> indicators{};
  // Names of every column, in order, for a file without a header row (a header's names are
  // replaced). Must name as many columns as the file has. The first three columns are time,
  // velocity, uncertainty whatever their names.
  std::vector<std::string> columns{};
  // Where these options were declared ("project.toml:7"), for messages; may be empty.
  std::string declared_at{};
};

// Reads a velocity file: `#` comments, comma / tab / whitespace delimited (one kind
// per file; a fixed-width table reads by whitespace splitting), an optional header row,
// columns time, velocity, uncertainty, then optionally an instrument label (text) and
// extra numeric columns (activity indicators, ...), kept by name as `indicators` (see
// VelocityFileOptions::indicators). Names come from `columns`, else the header row, else
// "column_N" (1-based). An indicator cell may be empty, "nan" or "---" (a missing value)
// when the file names its columns; in a file without names no cell may be empty. A UTF-8
// byte-order mark, CRLF line ends and "quoted" fields are accepted. Throws InputError
// ("file:line: problem") on anything malformed: every row must have the same number of
// columns, times |t| < 1e7 d and full BJD unless an offset is declared (see "Reduced times"),
// velocities below the speed of light, uncertainties > 0. Times are kept as long double
// until `combine_velocities` reduces them.
struct VelocityFile {
  std::string path;
  std::vector<long double> time_bjd;    // offset added
  std::vector<double> velocity_m_s;
  std::vector<double> uncertainty_m_s;
  std::vector<std::string> instrument;  // per row
  std::vector<int> line;                // line number of each row (1-based)
  std::vector<IndicatorSeries> indicators;   // aligned with the rows
  std::vector<std::string> columns;          // the name of every column
  std::vector<std::string> ignored_columns;  // extra columns not kept (not named, or empty everywhere)
  RepeatPolicy repeats = RepeatPolicy::kKeep;
  std::vector<std::string> warnings;         // see VelocityData::warnings
};
VelocityFile read_velocity_file(const std::string& path, const VelocityFileOptions& options);

// Merges files into one data set: instruments numbered in order of first appearance,
// integer reference epoch chosen near the middle of the data, points sorted by time
// (stable: equal times keep instrument order, then file order). Indicators are merged by
// name (NaN for the points of files without that column). Repeated (time, instrument)
// pairs follow each file's RepeatPolicy. Throws InputError on data spanning more than
// 1e5 days (full BJD in one file, times kept as given in another).
VelocityData combine_velocities(const std::vector<VelocityFile>& files);

// Convenience: read and combine in one step.
VelocityData load_velocities(const std::vector<std::string>& paths,
                             const std::vector<VelocityFileOptions>& options);

struct ModelLayout;
// The rule for "enough data": the number of velocities must exceed the number of free
// parameters of the model (at least one degree of freedom), and every instrument whose
// jitter is fitted needs at least two points (its offset and jitter rest on them alone).
// Throws InputError stating the counts; `layout.n_instruments` must match the data.
void check_enough_points(const VelocityData& data, const ModelLayout& layout);

// Mid-transit times of one or more transiting planets.
struct TransitData {
  double reference_epoch_bjd = 0.0;      // integer day subtracted from every time
  std::vector<long long> epoch;          // transit number (integer)
  std::vector<double> time_days;         // T - reference_epoch_bjd
  std::vector<double> uncertainty_days;  // 1-sigma, > 0
  std::vector<std::string> planet;       // label per row ("" when the file has none)
  std::vector<std::string> origin;       // "file:line" of each row
  std::vector<std::string> ignored_columns;  // names (or numbers) of extra numeric columns skipped

  std::size_t size() const { return epoch.size(); }
  // The rows of one planet ("" selects rows without a label), reference epoch kept.
  TransitData for_planet(const std::string& label) const;
  // For a model of n_planets planets: which planets (by slot, letters b, c, ...) have
  // transit times here. Those planets keep their letter whatever their period.
  std::vector<bool> planets_with_times(int n_planets) const;
};

struct TransitFileOptions {
  std::string planet;  // label for every row; empty keeps the file's label column if any
  // Reference epoch to use; NaN (default) picks an integer day near the middle.
  double reference_epoch_bjd = std::numeric_limits<double>::quiet_NaN();
  // Added to every time of the file (days); the "Reduced times" rule at the top applies.
  std::optional<double> time_offset_days{};
};

// Reads epoch (integer), mid-transit time (BJD_TDB), uncertainty (days), optional planet
// label. Extra numeric columns (e.g. an O-C column) are skipped and recorded in
// `ignored_columns`. Non-integer epochs are input errors. An epoch may appear twice only
// as two measurements of the same transit (compiled timing tables have them): the times
// must then agree within 5 combined sigma; an exact duplicate row, or times that
// disagree (an epoch number typed wrong), is an input error. Uncertainties must be > 0
// and below 1 d. Times must be full BJD unless an offset is declared ("Reduced times").
TransitData read_transit_file(const std::string& path, const TransitFileOptions& options = {});

}  // namespace apsides
