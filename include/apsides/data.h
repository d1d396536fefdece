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

  std::size_t size() const { return time_days.size(); }
  std::size_t n_instruments() const { return instrument_names.size(); }
  double baseline_days() const;           // max(t) - min(t); 0 when empty
  std::size_t count(int instrument_index) const;
  // A copy holding only the points of one instrument (index re-numbered to 0).
  VelocityData subset(int instrument_index) const;
};

// How to read one velocity file.
struct VelocityFileOptions {
  // Label for every row of the file. Empty: the file's 4th column names the instrument;
  // a file with three columns and no label gets the file's stem as its instrument.
  std::string instrument;
  VelocityUnit unit = VelocityUnit::kMetersPerSecond;
};

// Reads a velocity file: `#` comments, comma / tab / whitespace delimited (one kind
// per file), an optional header row, columns time, velocity, uncertainty, optional
// instrument label. A UTF-8 byte-order mark and CRLF line ends are accepted. Throws
// InputError ("file:line: problem") on anything malformed. Times are kept as long
// double until `combine_velocities` reduces them.
struct VelocityFile {
  std::string path;
  std::vector<long double> time_bjd;
  std::vector<double> velocity_m_s;
  std::vector<double> uncertainty_m_s;
  std::vector<std::string> instrument;  // per row
  std::vector<int> line;                // line number of each row (1-based)
};
VelocityFile read_velocity_file(const std::string& path, const VelocityFileOptions& options);

// Merges files into one data set: instruments numbered in order of first appearance,
// integer reference epoch chosen near the middle of the data, points sorted by time.
// Throws InputError on duplicated (time, instrument) pairs.
VelocityData combine_velocities(const std::vector<VelocityFile>& files);

// Convenience: read and combine in one step.
VelocityData load_velocities(const std::vector<std::string>& paths,
                             const std::vector<VelocityFileOptions>& options);

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
};

struct TransitFileOptions {
  std::string planet;  // label for every row; empty keeps the file's label column if any
  // Reference epoch to use; NaN (default) picks an integer day near the middle.
  double reference_epoch_bjd = std::numeric_limits<double>::quiet_NaN();
};

// Reads epoch (integer), mid-transit time (BJD_TDB), uncertainty (days), optional planet
// label. Extra numeric columns (e.g. an O-C column) are skipped and recorded in
// `ignored_columns`. Non-integer or repeated epochs (per planet) are input errors.
TransitData read_transit_file(const std::string& path, const TransitFileOptions& options = {});

}  // namespace apsides
