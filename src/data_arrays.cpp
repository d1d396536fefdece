// Observations from arrays in memory: the file readers' rules (data.cpp), row by row, then
// the same combination step (combine_velocities), so a data set from arrays and one from a
// file with the same numbers are built alike.
#include "apsides/data_arrays.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <map>

#include "apsides/error.h"

namespace apsides {
namespace {
constexpr double kSpeedOfLightMS = 299792458.0;  // exact, SI definition of the metre

// The label of row i: one per row, one for all, or the fallback.
const std::string& label_of(const std::vector<std::string>& labels, std::size_t i, const std::string& fallback) {
  if (labels.empty()) return fallback;
  return labels.size() == 1 ? labels.front() : labels[i];
}

void check_lengths(const std::string& source, std::initializer_list<std::pair<const char*, std::size_t>> columns,
                   std::size_t n_labels, const char* label_name) {
  const auto& first = *columns.begin();
  for (const auto& [name, size] : columns) {
    if (size != first.second)
      throw InputError(fmt::format("{}: {} has {} values but {} has {}; every column needs one value per row",
                                   source, name, size, first.first, first.second));
  }
  if (n_labels > 1 && n_labels != first.second)
    throw InputError(fmt::format("{}: {} has {} labels but {} has {} values; give one label per row or one for all",
                                 source, label_name, n_labels, first.first, first.second));
}

void check_finite(const std::string& source, std::size_t row, const char* what, double x) {
  if (!std::isfinite(x)) throw InputError(fmt::format("{}:{}: {} is {}; it must be a finite number", source, row, what, x));
}
}  // namespace

VelocityData velocity_data_from_arrays(const VelocityArrays& a) {
  const std::string& src = a.source;
  check_lengths(src, {{"time", a.time_bjd.size()}, {"velocity", a.velocity.size()}, {"uncertainty", a.uncertainty.size()}},
                a.instrument.size(), "instrument");
  const std::size_t n = a.time_bjd.size();
  if (n == 0) throw InputError(fmt::format("{}: no velocities (the arrays are empty)", src));
  const double scale = a.unit == VelocityUnit::kKilometersPerSecond ? 1000.0 : 1.0;
  const std::string unit = to_string(a.unit);

  VelocityFile f;
  f.path = src;
  for (std::size_t i = 0; i < n; ++i) {
    const double t = a.time_bjd[i], v = a.velocity[i], s = a.uncertainty[i];
    check_finite(src, i, "time", t);
    check_finite(src, i, "velocity", v);
    check_finite(src, i, "uncertainty", s);
    // The rules of read_velocity_file, in its order.
    if (std::fabs(t) >= 1e7)
      throw InputError(fmt::format("{}:{}: time is {}; it must be a BJD_TDB in days (|t| < 1e7)", src, i, t));
    if (std::fabs(v * scale) >= kSpeedOfLightMS)
      throw InputError(fmt::format("{}:{}: velocity is {} {}; it must be below the speed of light", src, i, v, unit));
    if (!(s > 0.0)) throw InputError(fmt::format("{}:{}: uncertainty is {}; it must be > 0", src, i, s));
    if (s * scale >= kSpeedOfLightMS)
      throw InputError(fmt::format("{}:{}: uncertainty is {} {}; it must be below the speed of light", src, i, s, unit));
    const std::string& label = label_of(a.instrument, i, src);
    if (label.empty()) throw InputError(fmt::format("{}:{}: instrument label is empty", src, i));
    f.time_bjd.push_back(static_cast<long double>(t));
    f.velocity_m_s.push_back(v * scale);
    f.uncertainty_m_s.push_back(s * scale);
    f.instrument.push_back(label);
    f.line.push_back(static_cast<int>(i));
  }
  // The unit warnings of read_velocity_file (a median uncertainty far from the declared unit).
  std::vector<double> err(f.uncertainty_m_s);
  std::nth_element(err.begin(), err.begin() + static_cast<std::ptrdiff_t>(err.size() / 2), err.end());
  const double median_err = err[err.size() / 2];
  if (a.unit == VelocityUnit::kKilometersPerSecond && median_err > 500.0) {
    f.warnings.push_back(fmt::format(
        "{}: declared km/s, but the median uncertainty is {:g} km/s; these look like m/s (check velocity_unit)", src,
        median_err / 1000.0));
  } else if (a.unit == VelocityUnit::kMetersPerSecond && median_err < 0.05) {
    f.warnings.push_back(fmt::format(
        "{}: read as m/s, but the median uncertainty is {:g} m/s; these look like km/s (declare velocity_unit = \"km/s\")",
        src, median_err));
  }
  return combine_velocities({f});
}

TransitData transit_data_from_arrays(const TransitArrays& a) {
  const std::string& src = a.source;
  check_lengths(src, {{"epoch", a.epoch.size()}, {"time", a.time_bjd.size()}, {"uncertainty", a.uncertainty_days.size()}},
                a.planet.size(), "planet");
  TransitData out;
  const std::size_t n = a.epoch.size();
  if (n == 0) return out;
  static const std::string kDefaultPlanet = "b";
  for (std::size_t i = 0; i < n; ++i) {
    const double e = a.epoch[i], t = a.time_bjd[i], s = a.uncertainty_days[i];
    check_finite(src, i, "epoch", e);
    check_finite(src, i, "mid-transit time", t);
    check_finite(src, i, "uncertainty", s);
    if (e != std::floor(e) || std::fabs(e) > 1e15)
      throw InputError(fmt::format("{}:{}: epoch is {}; it must be an integer transit number", src, i, e));
    if (std::fabs(t) >= 1e7)
      throw InputError(fmt::format("{}:{}: mid-transit time is {}; it must be a BJD_TDB in days (|t| < 1e7)", src, i, t));
    if (!(s > 0.0)) throw InputError(fmt::format("{}:{}: uncertainty is {}; it must be > 0 (days)", src, i, s));
    if (!(s < 1.0))
      throw InputError(fmt::format(
          "{}:{}: uncertainty is {} days; it must be below 1 day (transit-time errors are in days, not minutes)", src, i,
          s));
    const std::string& label = label_of(a.planet, i, kDefaultPlanet);
    if (label.size() != 1 || label[0] < 'b' || label[0] > 'z')
      throw InputError(fmt::format("{}:{}: planet is '{}'; planets are labelled b, c, d, ... (a letter from b to z)",
                                   src, i, label));
    out.epoch.push_back(static_cast<long long>(e));
    out.time_days.push_back(t);  // made relative below
    out.uncertainty_days.push_back(s);
    out.planet.push_back(label);
    out.origin.push_back(fmt::format("{}:{}", src, i));
  }
  // A repeated epoch of one planet: a second measurement of the same transit (times within
  // 5 combined sigma) or a mistake, as read_transit_file decides.
  std::map<std::pair<std::string, long long>, std::size_t> seen;
  for (std::size_t i = 0; i < n; ++i) {
    auto [it, inserted] = seen.emplace(std::make_pair(out.planet[i], out.epoch[i]), i);
    if (inserted) continue;
    const std::size_t j = it->second;
    const std::string for_planet = fmt::format(" for planet '{}'", out.planet[i]);
    const double diff = out.time_days[i] - out.time_days[j];
    if (diff == 0.0)
      throw InputError(fmt::format("{}: epoch {} repeats {}{} with the same time; a duplicated row", out.origin[i],
                                   out.epoch[i], out.origin[j], for_planet));
    const double sigma = std::hypot(out.uncertainty_days[i], out.uncertainty_days[j]);
    if (std::fabs(diff) > 5.0 * sigma)
      throw InputError(fmt::format(
          "{}: epoch {} repeats {}{} but the times differ by {:.6f} d ({:.1f} sigma); two measurements of one transit "
          "must agree within 5 sigma (is an epoch number wrong?)",
          out.origin[i], out.epoch[i], out.origin[j], for_planet, diff, std::fabs(diff) / sigma));
  }
  const auto [lo, hi] = std::minmax_element(out.time_days.begin(), out.time_days.end());
  const double ref = std::floor(0.5 * (*lo + *hi));
  out.reference_epoch_bjd = ref;
  for (double& t : out.time_days) t -= ref;  // exact for full BJD (t and ref within a factor 2)
  return out;
}

}  // namespace apsides
