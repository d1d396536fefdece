#include "apsides/data.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <map>
#include <numeric>

#include "apsides/error.h"
#include "text_table.h"

namespace apsides {
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
    } else if (nc != expected) {
      throw InputError(fmt::format("{}:{}: has {} columns; line {} has {}", path, row.line, nc,
                                   expected_line, expected));
    }
    long double t = parse_long_double(row.fields[0], path, row.line, "time");
    double v = parse_number(row.fields[1], path, row.line, "velocity");
    double s = parse_number(row.fields[2], path, row.line, "uncertainty");
    if (!(s > 0.0)) {
      throw InputError(fmt::format("{}:{}: uncertainty is {}; it must be > 0", path, row.line,
                                   row.fields[2]));
    }
    std::string label = options.instrument;
    if (nc >= 4) {
      const std::string& f = row.fields[3];
      if (detail::looks_numeric(f)) {
        throw InputError(fmt::format(
            "{}:{}: column 4 is '{}'; it must be an instrument label (text), "
            "or the file must have three columns",
            path, row.line, f));
      }
      if (label.empty()) label = f;
    }
    if (nc > 4) {
      throw InputError(fmt::format(
          "{}:{}: has {} columns; a velocity file has time, velocity, uncertainty and an "
          "optional instrument label",
          path, row.line, nc));
    }
    if (label.empty()) label = detail::file_stem(path);
    out.time_bjd.push_back(t);
    out.velocity_m_s.push_back(v * scale);
    out.uncertainty_m_s.push_back(s * scale);
    out.instrument.push_back(label);
    out.line.push_back(row.line);
  }
  return out;
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
    double s = parse_number(row.fields[2], path, row.line, "uncertainty");
    if (!(s > 0.0)) {
      throw InputError(fmt::format("{}:{}: uncertainty is {}; it must be > 0 (days)", path,
                                   row.line, row.fields[2]));
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
  // Repeated epochs (per planet) are input errors.
  std::map<std::pair<std::string, long long>, std::size_t> seen;
  for (std::size_t i = 0; i < out.epoch.size(); ++i) {
    auto key = std::make_pair(out.planet[i], out.epoch[i]);
    auto [it, inserted] = seen.emplace(key, i);
    if (!inserted) {
      throw InputError(fmt::format("{}: epoch {} repeats {}{}", out.origin[i], out.epoch[i],
                                   out.origin[it->second],
                                   out.planet[i].empty() ? "" : fmt::format(" for planet '{}'", out.planet[i])));
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
