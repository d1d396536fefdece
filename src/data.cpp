#include "apsides/data.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <map>
#include <numeric>

#include "apsides/error.h"
#include "apsides/keplerian_model.h"
#include "text_table.h"

namespace apsides {
namespace {
constexpr double kSpeedOfLightMS = 299792458.0;  // exact, SI definition of the metre
}  // namespace
using detail::parse_long_double;
using detail::parse_number;

std::string to_string(VelocityUnit unit) {
  return unit == VelocityUnit::kKilometersPerSecond ? "km/s" : "m/s";
}

VelocityUnit parse_velocity_unit(const std::string& text, const std::string& where) {
  if (text == "m/s" || text == "m s-1") return VelocityUnit::kMetersPerSecond;
  if (text == "km/s" || text == "km s-1") return VelocityUnit::kKilometersPerSecond;
  throw InputError(fmt::format("{}: velocity unit is '{}'; it must be \"m/s\" or \"km/s\"", where, text));
}

double VelocityData::baseline_days() const {
  if (time_days.empty()) return 0.0;
  auto [mn, mx] = std::minmax_element(time_days.begin(), time_days.end());
  return *mx - *mn;
}

std::size_t VelocityData::count(int instrument_index) const {
  return static_cast<std::size_t>(std::count(instrument.begin(), instrument.end(), instrument_index));
}

VelocityData VelocityData::subset(int instrument_index) const {
  VelocityData out;
  out.reference_epoch_bjd = reference_epoch_bjd;
  out.instrument_names = {instrument_names.at(static_cast<std::size_t>(instrument_index))};
  for (std::size_t i = 0; i < size(); ++i) {
    if (instrument[i] != instrument_index) continue;
    out.time_days.push_back(time_days[i]);
    out.velocity_m_s.push_back(velocity_m_s[i]);
    out.uncertainty_m_s.push_back(uncertainty_m_s[i]);
    out.instrument.push_back(0);
    out.origin.push_back(origin[i]);
  }
  return out;
}

VelocityFile read_velocity_file(const std::string& path, const VelocityFileOptions& options) {
  detail::TextTable table = detail::read_text_table(path);
  VelocityFile out;
  out.path = path;
  const double scale = options.unit == VelocityUnit::kKilometersPerSecond ? 1000.0 : 1.0;
  std::size_t expected = 0;
  int expected_line = 0;
  int label_column = -1;
  for (const auto& row : table.rows) {
    const std::size_t nc = row.fields.size();
    if (nc < 3) {
      throw InputError(fmt::format(
          "{}:{}: has {} column{}; a velocity file needs time, velocity, uncertainty "
          "(and optionally an instrument label)",
          path, row.line, nc, nc == 1 ? "" : "s"));
    }
    if (expected == 0) {
      expected = nc;
      expected_line = row.line;
      if (!table.header.empty() && table.header.size() != nc) {
        throw InputError(fmt::format("{}:{}: has {} columns but the header names {}", path,
                                     row.line, nc, table.header.size()));
      }
      // Columns after the third: the first text one is the instrument label, numeric ones
      // (activity indicators, ...) are skipped.
      for (std::size_t c = 3; c < nc; ++c) {
        if (!detail::looks_numeric(row.fields[c])) {
          if (label_column >= 0) {
            throw InputError(fmt::format(
                "{}:{}: columns {} and {} are both text; a velocity file has one instrument "
                "label column",
                path, row.line, label_column + 1, c + 1));
          }
          label_column = static_cast<int>(c);
        } else {
          out.ignored_columns.push_back(table.header.empty() ? fmt::format("column {}", c + 1)
                                                             : table.header[c]);
        }
      }
    } else if (nc != expected) {
      throw InputError(fmt::format("{}:{}: has {} columns; line {} has {}", path, row.line, nc,
                                   expected_line, expected));
    }
    long double t = parse_long_double(row.fields[0], path, row.line, "time");
    if (std::fabs(t) >= 1e7L) {
      throw InputError(fmt::format("{}:{}: time is {}; it must be a BJD_TDB in days (|t| < 1e7)",
                                   path, row.line, row.fields[0]));
    }
    double v = parse_number(row.fields[1], path, row.line, "velocity");
    double s = parse_number(row.fields[2], path, row.line, "uncertainty");
    if (std::fabs(v * scale) >= kSpeedOfLightMS) {
      throw InputError(fmt::format("{}:{}: velocity is {} {}; it must be below the speed of light",
                                   path, row.line, row.fields[1], to_string(options.unit)));
    }
    if (!(s > 0.0)) {
      throw InputError(fmt::format("{}:{}: uncertainty is {}; it must be > 0", path, row.line,
                                   row.fields[2]));
    }
    if (s * scale >= kSpeedOfLightMS) {
      throw InputError(fmt::format("{}:{}: uncertainty is {} {}; it must be below the speed of light",
                                   path, row.line, row.fields[2], to_string(options.unit)));
    }
    std::string label = options.instrument;
    if (label_column >= 0) {
      const std::string& f = row.fields[static_cast<std::size_t>(label_column)];
      if (detail::looks_numeric(f)) {
        throw InputError(fmt::format(
            "{}:{}: column {} is '{}'; it must be an instrument label (text) as on line {}",
            path, row.line, label_column + 1, f, expected_line));
      }
      if (label.empty()) {
        label = f;
      } else if (f != label) {
        throw InputError(fmt::format(
            "{}:{}: instrument column says '{}' but the file is given instrument '{}'; drop the "
            "per-file instrument or the column",
            path, row.line, f, label));
      }
    } else {
      for (std::size_t c = 3; c < nc; ++c) parse_number(row.fields[c], path, row.line, fmt::format("column {}", c + 1));
    }
    if (label.empty()) label = detail::file_stem(path);
    out.time_bjd.push_back(t);
    out.velocity_m_s.push_back(v * scale);
    out.uncertainty_m_s.push_back(s * scale);
    out.instrument.push_back(label);
    out.line.push_back(row.line);
  }
  if (!out.ignored_columns.empty()) {
    std::string list;
    for (const auto& c : out.ignored_columns) list += (list.empty() ? "" : ", ") + c;
    out.warnings.push_back(fmt::format("{}: skipped extra numeric column(s): {}", path, list));
  }
  // Units: HARPS-like errors are ~1 m/s; a typical stated error far from that range in
  // the declared unit usually means the unit is wrong. A warning, not an error.
  std::vector<double> err(out.uncertainty_m_s);
  std::nth_element(err.begin(), err.begin() + static_cast<std::ptrdiff_t>(err.size() / 2), err.end());
  const double median_err = err[err.size() / 2];
  if (options.unit == VelocityUnit::kKilometersPerSecond && median_err > 500.0) {
    out.warnings.push_back(fmt::format(
        "{}: declared km/s, but the median uncertainty is {:g} km/s; these look like m/s "
        "(check velocity_unit)",
        path, median_err / 1000.0));
  } else if (options.unit == VelocityUnit::kMetersPerSecond && median_err < 0.05) {
    out.warnings.push_back(fmt::format(
        "{}: read as m/s, but the median uncertainty is {:g} m/s; these look like km/s "
        "(declare velocity_unit = \"km/s\" or --velocity-unit km/s)",
        path, median_err));
  }
  return out;
}

void check_enough_points(const VelocityData& data, const ModelLayout& layout) {
  if (static_cast<std::size_t>(layout.n_instruments) != data.n_instruments()) {
    throw InputError(fmt::format("model has {} instrument(s) but the data have {}",
                                 layout.n_instruments, data.n_instruments()));
  }
  const std::size_t k = layout.n_params();
  if (data.size() <= k) {
    throw InputError(fmt::format(
        "{}: {} velocities are too few for a model with {} planet(s), {} instrument(s){}{}: it has "
        "{} free parameters and needs more than {} points",
        data.sources(), data.size(), layout.n_planets, layout.n_instruments, layout.fit_jitter ? " with jitter" : "",
        layout.trend == Trend::kNone ? "" : fmt::format(" and a {} trend", to_string(layout.trend)), k, k));
  }
  if (layout.fit_jitter) {
    for (std::size_t i = 0; i < data.n_instruments(); ++i) {
      const std::size_t n = data.count(static_cast<int>(i));
      if (n < 2) {
        throw InputError(fmt::format(
            "instrument '{}' has {} velocity; an instrument with its own offset and jitter needs "
            "at least 2 points (or drop jitter fitting)",
            data.instrument_names[i], n));
      }
    }
  }
}

namespace {
// An integer day near the middle of the data: keeps reduced times small (and the
// conjunction-period correlation of fits low) while staying exact.
long double middle_epoch(const std::vector<long double>& times) {
  long double lo = *std::min_element(times.begin(), times.end());
  long double hi = *std::max_element(times.begin(), times.end());
  return std::floor(0.5L * (lo + hi));
}
}  // namespace

VelocityData combine_velocities(const std::vector<VelocityFile>& files) {
  std::vector<long double> all;
  for (const auto& f : files) all.insert(all.end(), f.time_bjd.begin(), f.time_bjd.end());
  VelocityData data;
  if (all.empty()) return data;
  const long double ref = middle_epoch(all);
  data.reference_epoch_bjd = static_cast<double>(ref);

  struct Row {
    long double t;
    double v, s;
    int inst;
    std::string origin;
  };
  std::vector<Row> rows;
  std::map<std::string, int> index;
  for (const auto& f : files) {
    for (std::size_t i = 0; i < f.time_bjd.size(); ++i) {
      auto it = index.find(f.instrument[i]);
      int k;
      if (it == index.end()) {
        k = static_cast<int>(data.instrument_names.size());
        index.emplace(f.instrument[i], k);
        data.instrument_names.push_back(f.instrument[i]);
      } else {
        k = it->second;
      }
      rows.push_back(Row{f.time_bjd[i], f.velocity_m_s[i], f.uncertainty_m_s[i], k,
                         fmt::format("{}:{}", f.path, f.line[i])});
    }
  }
  std::stable_sort(rows.begin(), rows.end(), [](const Row& a, const Row& b) {
    return a.inst != b.inst ? a.inst < b.inst : a.t < b.t;
  });
  for (std::size_t i = 1; i < rows.size(); ++i) {
    if (rows[i].inst == rows[i - 1].inst && rows[i].t == rows[i - 1].t) {
      throw InputError(fmt::format("{}: time {} repeats {} for instrument '{}'; each instrument "
                                   "may observe a given time once",
                                   rows[i].origin, static_cast<double>(rows[i].t), rows[i - 1].origin,
                                   data.instrument_names[static_cast<std::size_t>(rows[i].inst)]));
    }
  }
  std::stable_sort(rows.begin(), rows.end(), [](const Row& a, const Row& b) { return a.t < b.t; });
  if (rows.back().t - rows.front().t > 1e5L) {
    throw InputError(fmt::format(
        "{}: time {} and {}: time {} are {:.0f} days apart; are some times full BJD and others "
        "reduced (BJD - 2400000 or similar)? Give every file the same kind",
        rows.front().origin, static_cast<double>(rows.front().t), rows.back().origin,
        static_cast<double>(rows.back().t), static_cast<double>(rows.back().t - rows.front().t)));
  }
  for (const auto& f : files) data.warnings.insert(data.warnings.end(), f.warnings.begin(), f.warnings.end());
  for (const auto& r : rows) {
    data.time_days.push_back(static_cast<double>(r.t - ref));
    data.velocity_m_s.push_back(r.v);
    data.uncertainty_m_s.push_back(r.s);
    data.instrument.push_back(r.inst);
    data.origin.push_back(r.origin);
  }
  return data;
}

VelocityData load_velocities(const std::vector<std::string>& paths,
                             const std::vector<VelocityFileOptions>& options) {
  std::vector<VelocityFile> files;
  for (std::size_t i = 0; i < paths.size(); ++i) {
    files.push_back(read_velocity_file(paths[i], i < options.size() ? options[i] : VelocityFileOptions{}));
  }
  return combine_velocities(files);
}

std::string VelocityData::sources() const {
  std::vector<std::string> files;
  for (const std::string& o : origin) {
    const std::string f = o.substr(0, o.rfind(':') == std::string::npos ? o.size() : o.rfind(':'));
    if (std::find(files.begin(), files.end(), f) == files.end()) files.push_back(f);
  }
  std::string out;
  for (const auto& f : files) out += (out.empty() ? "" : ", ") + f;
  return out.empty() ? std::string("the data") : out;
}

std::vector<bool> TransitData::planets_with_times(int n_planets) const {
  std::vector<bool> out(static_cast<std::size_t>(std::max(n_planets, 0)), false);
  for (int j = 0; j < n_planets; ++j)
    out[static_cast<std::size_t>(j)] = std::find(planet.begin(), planet.end(), planet_label(j)) != planet.end();
  return out;
}

TransitData TransitData::for_planet(const std::string& label) const {
  TransitData out;
  out.reference_epoch_bjd = reference_epoch_bjd;
  out.ignored_columns = ignored_columns;
  for (std::size_t i = 0; i < size(); ++i) {
    if (planet[i] != label) continue;
    out.epoch.push_back(epoch[i]);
    out.time_days.push_back(time_days[i]);
    out.uncertainty_days.push_back(uncertainty_days[i]);
    out.planet.push_back(planet[i]);
    out.origin.push_back(origin[i]);
  }
  return out;
}

TransitData read_transit_file(const std::string& path, const TransitFileOptions& options) {
  detail::TextTable table = detail::read_text_table(path);
  TransitData out;
  std::vector<long double> times;
  std::size_t expected = 0;
  int expected_line = 0;
  int label_column = -1;
  for (const auto& row : table.rows) {
    const std::size_t nc = row.fields.size();
    if (nc < 3) {
      throw InputError(fmt::format(
          "{}:{}: has {} column{}; a transit-time file needs epoch, mid-transit time, "
          "uncertainty (and optionally a planet label)",
          path, row.line, nc, nc == 1 ? "" : "s"));
    }
    if (expected == 0) {
      expected = nc;
      expected_line = row.line;
      if (!table.header.empty() && table.header.size() != nc) {
        throw InputError(fmt::format("{}:{}: has {} columns but the header names {}", path,
                                     row.line, nc, table.header.size()));
      }
      for (std::size_t c = 3; c < nc; ++c) {
        if (!detail::looks_numeric(row.fields[c])) {
          if (label_column >= 0) {
            throw InputError(fmt::format("{}:{}: columns {} and {} both look like planet labels",
                                         path, row.line, label_column + 1, c + 1));
          }
          label_column = static_cast<int>(c);
        } else {
          out.ignored_columns.push_back(table.header.empty() ? fmt::format("column {}", c + 1)
                                                             : table.header[c]);
        }
      }
    } else if (nc != expected) {
      throw InputError(fmt::format("{}:{}: has {} columns; line {} has {}", path, row.line, nc,
                                   expected_line, expected));
    }
    long double e = parse_long_double(row.fields[0], path, row.line, "epoch");
    if (e != std::floor(e) || std::fabs(e) > 1e15L) {
      throw InputError(fmt::format("{}:{}: epoch is {}; it must be an integer transit number",
                                   path, row.line, row.fields[0]));
    }
    long double t = parse_long_double(row.fields[1], path, row.line, "mid-transit time");
    if (std::fabs(t) >= 1e7L) {
      throw InputError(fmt::format(
          "{}:{}: mid-transit time is {}; it must be a BJD_TDB in days (|t| < 1e7)", path,
          row.line, row.fields[1]));
    }
    double s = parse_number(row.fields[2], path, row.line, "uncertainty");
    if (!(s > 0.0)) {
      throw InputError(fmt::format("{}:{}: uncertainty is {}; it must be > 0 (days)", path,
                                   row.line, row.fields[2]));
    }
    if (!(s < 1.0)) {
      throw InputError(fmt::format(
          "{}:{}: uncertainty is {} days; it must be below 1 day (transit-time errors are in "
          "days, not minutes)",
          path, row.line, row.fields[2]));
    }
    for (std::size_t c = 3; c < nc; ++c) {
      if (static_cast<int>(c) == label_column) continue;
      parse_number(row.fields[c], path, row.line, fmt::format("column {}", c + 1));
    }
    std::string label = options.planet;
    if (label.empty() && label_column >= 0) label = row.fields[static_cast<std::size_t>(label_column)];
    out.epoch.push_back(static_cast<long long>(e));
    times.push_back(t);
    out.uncertainty_days.push_back(s);
    out.planet.push_back(label);
    out.origin.push_back(fmt::format("{}:{}", path, row.line));
  }
  // A repeated epoch (per planet) is either a second measurement of the same transit
  // (kept: times agree within 5 combined sigma) or a mistake (an error).
  std::map<std::pair<std::string, long long>, std::size_t> seen;
  for (std::size_t i = 0; i < out.epoch.size(); ++i) {
    auto key = std::make_pair(out.planet[i], out.epoch[i]);
    auto [it, inserted] = seen.emplace(key, i);
    if (inserted) continue;
    const std::size_t j = it->second;
    const std::string for_planet =
        out.planet[i].empty() ? "" : fmt::format(" for planet '{}'", out.planet[i]);
    if (times[i] == times[j]) {
      throw InputError(fmt::format("{}: epoch {} repeats {}{} with the same time; a duplicated row",
                                   out.origin[i], out.epoch[i], out.origin[j], for_planet));
    }
    const double diff = static_cast<double>(times[i] - times[j]);
    const double sigma = std::hypot(out.uncertainty_days[i], out.uncertainty_days[j]);
    if (std::fabs(diff) > 5.0 * sigma) {
      throw InputError(fmt::format(
          "{}: epoch {} repeats {}{} but the times differ by {:.6f} d ({:.1f} sigma); two "
          "measurements of one transit must agree within 5 sigma (is an epoch number wrong?)",
          out.origin[i], out.epoch[i], out.origin[j], for_planet, diff, std::fabs(diff) / sigma));
    }
  }
  long double ref = std::isnan(options.reference_epoch_bjd)
                        ? std::floor(0.5L * (*std::min_element(times.begin(), times.end()) +
                                             *std::max_element(times.begin(), times.end())))
                        : static_cast<long double>(options.reference_epoch_bjd);
  out.reference_epoch_bjd = static_cast<double>(ref);
  for (long double t : times) out.time_days.push_back(static_cast<double>(t - ref));
  return out;
}

}  // namespace apsides
