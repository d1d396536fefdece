// Observations given as arrays in memory (the Python module, programs that hold their own
// tables) instead of files. The same rules as the file readers of data.h apply, with the
// same kind of one-line InputError; a row is named "<source>:<row>" with the row index
// counted from 0 (as numpy indexes it), e.g. `velocities:16: uncertainty is -0.4; it must
// be > 0`.
#pragma once

#include <span>
#include <string>
#include <vector>

#include "apsides/data.h"

namespace apsides {

// One star's velocities, one row per measurement.
struct VelocityArrays {
  std::span<const double> time_bjd;     // BJD_TDB in days, full (2.46e6) or reduced
  std::span<const double> velocity;     // in `unit`, positive = receding
  std::span<const double> uncertainty;  // 1-sigma, in `unit`, > 0
  // Instrument label of each row; or one label for every row; or none: every row gets
  // `source` as its label.
  std::vector<std::string> instrument;
  VelocityUnit unit = VelocityUnit::kMetersPerSecond;
  std::string source = "velocities";    // names the arrays in messages and origins
};

// Validates like read_velocity_file + combine_velocities (equal lengths; finite values;
// |t| < 1e7 d; |velocity|, uncertainty below the speed of light; uncertainty > 0; no time
// repeated by one instrument; not more than 1e5 days spanned; empty labels refused), gives
// the same unit warnings, converts km/s to m/s, and combines the rows into a data set (integer
// reference epoch near the middle, points sorted by time, instruments numbered in order of
// first appearance). Times arrive as double, so a full BJD keeps ~5e-10 d (what a float64
// column holds). Throws InputError.
VelocityData velocity_data_from_arrays(const VelocityArrays& arrays);

// Mid-transit times, one row per measurement.
struct TransitArrays {
  std::span<const double> epoch;             // transit number; must be an integer value
  std::span<const double> time_bjd;          // BJD_TDB in days
  std::span<const double> uncertainty_days;  // 1-sigma, in (0, 1) days
  // Planet label of each row ("b", "c", ...), or one for every row; none: "b".
  std::vector<std::string> planet;
  std::string source = "transits";
};

// Validates like read_transit_file (integer epochs, finite times |t| < 1e7 d, uncertainties
// in (0, 1) d, planet labels a letter b..z, a repeated epoch of one planet only as two
// measurements of one transit within 5 combined sigma) and sets an integer reference epoch
// near the middle. Empty arrays give empty TransitData. Throws InputError.
TransitData transit_data_from_arrays(const TransitArrays& arrays);

}  // namespace apsides
