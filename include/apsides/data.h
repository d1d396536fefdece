// Observations: stellar radial velocities and mid-transit times, as read from files.
//
// Times are BJD_TDB in days, exactly as given (full 2.46e6 values or reduced ones).
// To keep full precision, each data set stores times relative to an integer reference
// epoch (`reference_epoch_bjd`), computed in long double when the file is read; add the
// epoch back only for display. Velocities are m/s, positive = receding.
#pragma once

#include <cstddef>
#include <limits>
#include <string>
#include <vector>

namespace apsides {

enum class VelocityUnit { kMetersPerSecond, kKilometersPerSecond };
std::string to_string(VelocityUnit unit);
// Accepts "m/s" and "km/s"; throws InputError naming `where` otherwise.
VelocityUnit parse_velocity_unit(const std::string& text, const std::string& where);

// Velocities of one star, possibly from several instruments.
struct VelocityData {
  double reference_epoch_bjd = 0.0;      // integer day subtracted from every time
  std::vector<double> time_days;         // t - reference_epoch_bjd
  std::vector<double> velocity_m_s;      // as read, converted to m/s
  std::vector<double> uncertainty_m_s;   // 1-sigma, > 0
  std::vector<int> instrument;           // index into instrument_names
  std::vector<std::string> instrument_names;
  std::vector<std::string> origin;       // "file:line" of each point, for messages
  // The files the points came from ("a.csv, b.csv"), for messages about the data as a whole.
  std::string sources() const;
  // Things the user should know that are not errors (e.g. uncertainties that look like
  // m/s in a file declared km/s, numeric columns skipped). Commands print them to stderr.
  std::vector<std::string> warnings;

  std::size_t size() const { return time_days.size(); }
  std::size_t n_instruments() const { return instrument_names.size(); }
  double baseline_days() const;           // max(t) - min(t); 0 when empty
  std::size_t count(int instrument_index) const;
  // A copy holding only the points of one instrument (index re-numbered to 0).
  VelocityData subset(int instrument_index) const;
};

// How to read one velocity file.
struct VelocityFileOptions {
  // Label for every row of the file. Empty: the file's instrument column (the first text
  // column after the third) names the instrument; a file without one gets the file's stem.
  // A label that contradicts the file's own instrument column is an input error.
  std::string instrument;
  VelocityUnit unit = VelocityUnit::kMetersPerSecond;
};

// Reads a velocity file: `#` comments, comma / tab / whitespace delimited (one kind
// per file), an optional header row, columns time, velocity, uncertainty, then optionally
// an instrument label (text) and extra numeric columns (activity indicators, ...), which
// are skipped and listed in `ignored_columns`. A UTF-8 byte-order mark, CRLF line ends and
// "quoted" fields are accepted. Throws InputError ("file:line: problem") on anything
// malformed: every row must have the same number of columns, times |t| < 1e7 d, velocities
// below the speed of light, uncertainties > 0. Times are kept as long double until
// `combine_velocities` reduces them.
struct VelocityFile {
  std::string path;
  std::vector<long double> time_bjd;
  std::vector<double> velocity_m_s;
  std::vector<double> uncertainty_m_s;
  std::vector<std::string> instrument;  // per row
  std::vector<int> line;                // line number of each row (1-based)
  std::vector<std::string> ignored_columns;  // header names (or "column N") of skipped columns
  std::vector<std::string> warnings;         // see VelocityData::warnings
};
VelocityFile read_velocity_file(const std::string& path, const VelocityFileOptions& options);

// Merges files into one data set: instruments numbered in order of first appearance,
// integer reference epoch chosen near the middle of the data, points sorted by time.
// Throws InputError on duplicated (time, instrument) pairs and on data spanning more
// than 1e5 days (full BJD in one file, reduced times in another).
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
};

// Reads epoch (integer), mid-transit time (BJD_TDB), uncertainty (days), optional planet
// label. Extra numeric columns (e.g. an O-C column) are skipped and recorded in
// `ignored_columns`. Non-integer epochs are input errors. An epoch may appear twice only
// as two measurements of the same transit (compiled timing tables have them): the times
// must then agree within 5 combined sigma; an exact duplicate row, or times that
// disagree (an epoch number typed wrong), is an input error. Uncertainties must be > 0
// and below 1 d.
TransitData read_transit_file(const std::string& path, const TransitFileOptions& options = {});

}  // namespace apsides
