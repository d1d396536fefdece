#include "apsides/data.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <map>
#include <numeric>

#include "apsides/error.h"
#include "apsides/keplerian_model.h"
#include "text_table.h"

namespace apsides {
namespace {
constexpr double kSpeedOfLightMS = 299792458.0;  // exact, SI definition of the metre
// Dates a reduced time may plausibly stand for once an offset is added: JD 2440000
// (1968 May) to 2470000 (2050 Feb). Only used to say which common offset fits.
constexpr long double kPlausibleMinBjd = 2440000.0L;
constexpr long double kPlausibleMaxBjd = 2470000.0L;
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

std::string to_string(RepeatPolicy policy) {
  switch (policy) {
    case RepeatPolicy::kAverage: return "average";
    case RepeatPolicy::kError: return "error";
    case RepeatPolicy::kKeep: break;
  }
  return "keep";
}

RepeatPolicy parse_repeat_policy(const std::string& text, const std::string& where) {
  if (text == "keep") return RepeatPolicy::kKeep;
  if (text == "average") return RepeatPolicy::kAverage;
  if (text == "error") return RepeatPolicy::kError;
  throw InputError(fmt::format("{} is '{}'; it must be \"keep\", \"average\" or \"error\"", where, text));
}

void check_time_offset(double offset_days, const std::string& where) {
  if (!(offset_days >= 0.0 && offset_days < kFullBjdMax)) {
    throw InputError(fmt::format(
        "{} is {}; it must be between 0 and 2500000 (the day subtracted from BJD, e.g. 2457000)", where,
        offset_days));
  }
}

namespace {

bool is_full_bjd(long double t) { return t >= kFullBjdMin && t < kFullBjdMax; }

// The time of one row on the BJD scale, following the "Reduced times" rule of data.h.
// `what` names the column ("time"), `block` the project table ("[[velocities]]").
long double row_time(const std::string& text, const std::optional<double>& offset, const std::string& path,
                     int line, const char* what, const char* block) {
  const long double t = parse_long_double(text, path, line, what);
  if (std::fabs(t) >= 1e7L) {
    throw InputError(fmt::format("{}:{}: {} is {}; it must be a BJD_TDB in days (|t| < 1e7)", path, line, what, text));
  }
  if (offset && *offset == 0.0) return t;  // declared: times on a scale of their own
  if (!offset) {
    if (is_full_bjd(t)) return t;
    if (t >= kFullBjdMax) {
      throw InputError(fmt::format("{}:{}: {} {} is not a BJD_TDB (a full BJD is 2400000 to 2500000)", path,
                                   line, what, text));
    }
    std::vector<std::string> fits;
    for (double o : kCommonTimeOffsets) {
      const long double s = t + o;
      if (s >= kPlausibleMinBjd && s < kPlausibleMaxBjd) fits.push_back(fmt::format("{}", o));
    }
    std::string hint;
    if (fits.empty()) {
      hint = "no common offset gives a date in 1968-2050";
    } else {
      for (std::size_t i = 0; i < fits.size(); ++i)
        hint += (i == 0 ? "" : (i + 1 == fits.size() ? " or " : ", ")) + fits[i];
      hint += fits.size() == 1 ? " gives a date in 1968-2050" : " give a date in 1968-2050";
    }
    throw InputError(fmt::format(
        "{}:{}: {} {} looks reduced (a full BJD is 2400000 to 2500000): declare the offset that was "
        "subtracted, time_offset in {} or --time-offset; here {} (common offsets: 2457000, 2450000, 2400000, "
        "2400000.5 = MJD; 0 keeps times as given)",
        path, line, what, text, block, hint));
  }
  if (is_full_bjd(t)) {
    throw InputError(fmt::format(
        "{}:{}: {} {} is already a full BJD, but time_offset = {} is declared for this file (the offset would "
        "count twice); drop time_offset or --time-offset",
        path, line, what, text, *offset));
  }
  const long double s = t + static_cast<long double>(*offset);
  if (!is_full_bjd(s)) {
    throw InputError(fmt::format(
        "{}:{}: {} {} + time_offset {} = {:.6f} is not a full BJD (2400000 to 2500000); check time_offset",
        path, line, what, text, *offset, static_cast<double>(s)));
  }
  return s;
}

// Every row has the same number of columns, at least `min_columns`.
void check_shape(const detail::TextTable& table, const std::string& path, const char* needs) {
  const std::size_t expected = table.rows.front().fields.size();
  for (const auto& row : table.rows) {
    const std::size_t nc = row.fields.size();
    if (nc < 3) {
      throw InputError(fmt::format("{}:{}: has {} column{}; {}", path, row.line, nc, nc == 1 ? "" : "s", needs));
    }
    if (&row == &table.rows.front()) {
      if (!table.header.empty() && table.header.size() != nc) {
        throw InputError(fmt::format("{}:{}: has {} columns but the header names {}", path, row.line, nc,
                                     table.header.size()));
      }
    } else if (nc != expected) {
      throw InputError(fmt::format("{}:{}: has {} columns; line {} has {}", path, row.line, nc,
                                   table.rows.front().line, expected));
    }
  }
}

// The row deciding a column's kind: the first whose cell holds a value.
const detail::TextRow* deciding_row(const detail::TextTable& table, std::size_t c) {
  for (const auto& row : table.rows)
    if (!detail::is_missing_value(row.fields[c])) return &row;
  return nullptr;
}

// The label column (text) among the columns after the third, or -1. `two_labels` is the
// message (after "path:line: ") for a second text column: "columns {} and {} ...".
int find_label_column(const detail::TextTable& table, const std::string& path, const char* two_labels) {
  int label = -1;
  int label_line = 0;
  for (std::size_t c = 3; c < table.rows.front().fields.size(); ++c) {
    const detail::TextRow* row = deciding_row(table, c);
    if (!row || detail::looks_numeric(row->fields[c])) continue;
    if (label >= 0) {
      throw InputError(fmt::format("{}:{}: {}", path, std::max(row->line, label_line),
                                   fmt::format(fmt::runtime(two_labels), label + 1, c + 1)));
    }
    label = static_cast<int>(c);
    label_line = row->line;
  }
  return label;
}

// Column names, kinds and the indicators kept, decided from the whole table.
struct VelocityLayout {
  std::vector<std::string> names;  // every column
  bool named = false;              // from a header row or `columns`: missing values allowed
  int label = -1;                  // instrument column
  int label_line = 0;              // the row that made it a text column
  struct Kept {
    std::string name;
    std::size_t value = 0;
    int error = -1;  // uncertainty column or -1
  };
  std::vector<Kept> kept;
  std::vector<std::string> ignored;
  std::vector<std::string> empty_skipped;  // not named by `indicators`, empty on every row
};

std::string column_what(const VelocityLayout& L, std::size_t c) {
  return L.named ? fmt::format("{} (column {})", L.names[c], c + 1) : fmt::format("column {}", c + 1);
}

bool all_missing(const detail::TextTable& table, std::size_t c) { return deciding_row(table, c) == nullptr; }

VelocityLayout velocity_layout(const detail::TextTable& table, const std::string& path,
                               const VelocityFileOptions& options) {
  VelocityLayout L;
  const std::size_t nc = table.rows.front().fields.size();
  const std::string by = options.declared_at.empty() ? "" : " at " + options.declared_at;
  if (!options.columns.empty()) {
    if (options.columns.size() != nc) {
      throw InputError(fmt::format("{}:{}: has {} columns but columns{} names {}", path, table.rows.front().line, nc,
                                   by, options.columns.size()));
    }
    L.names = options.columns;
  } else {
    L.names = table.header;
  }
  L.named = !L.names.empty();
  L.names.resize(nc);
  for (std::size_t c = 0; c < nc; ++c)
    if (L.names[c].empty()) L.names[c] = fmt::format("column_{}", c + 1);
  L.label = find_label_column(table, path, "columns {} and {} are both text; a velocity file has one instrument label column");
  if (L.label >= 0) L.label_line = deciding_row(table, static_cast<std::size_t>(L.label))->line;

  auto index_of = [&](const std::string& name) -> int {
    for (std::size_t c = 0; c < nc; ++c)
      if (L.names[c] == name) return static_cast<int>(c);
    return -1;
  };
  auto is_extra = [&](int c) { return c >= 3 && c != L.label; };
  auto error_of = [&](const std::string& name) {
    const int e = index_of(indicator_error_column(name, L.names));
    return is_extra(e) ? e : -1;
  };
  std::vector<bool> used(nc, false);
  if (options.indicators) {
    std::vector<std::string> requested = *options.indicators;
    for (const std::string& name : requested) {
      const int c = index_of(name);
      if (c < 0) {
        std::string list;
        for (const auto& n : L.names) list += (list.empty() ? "" : ", ") + n;
        throw InputError(fmt::format("{}: has no column '{}' (named by indicators{}); its columns are: {}", path, name,
                                     by, list));
      }
      if (!is_extra(c)) {
        static const char* kRole[] = {"time", "velocity", "uncertainty"};
        throw InputError(fmt::format("{}: column '{}' (named by indicators{}) is the {} column; indicators are the "
                                     "columns after time, velocity, uncertainty and instrument",
                                     path, name, by, c < 3 ? kRole[c] : "instrument"));
      }
      if (all_missing(table, static_cast<std::size_t>(c))) {
        throw InputError(fmt::format("{}: column '{}' (named by indicators{}) is empty on every row", path, name, by));
      }
    }
    for (const std::string& name : requested) {
      // An error column named beside its indicator comes with it, not as a series of its own.
      bool is_error_of_other = false;
      for (const std::string& other : requested)
        is_error_of_other = is_error_of_other || (other != name && indicator_error_column(other, L.names) == name);
      if (is_error_of_other) continue;
      const auto c = static_cast<std::size_t>(index_of(name));
      L.kept.push_back({name, c, error_of(name)});
    }
  } else {
    std::vector<bool> is_error(nc, false);
    for (std::size_t c = 3; c < nc; ++c)
      if (is_extra(static_cast<int>(c)) && error_of(L.names[c]) >= 0) is_error[static_cast<std::size_t>(error_of(L.names[c]))] = true;
    for (std::size_t c = 3; c < nc; ++c) {
      if (!is_extra(static_cast<int>(c)) || is_error[c]) continue;
      if (all_missing(table, c)) {
        L.empty_skipped.push_back(L.names[c]);
        continue;
      }
      L.kept.push_back({L.names[c], c, error_of(L.names[c])});
    }
  }
  for (const auto& k : L.kept) {
    used[k.value] = true;
    if (k.error >= 0) used[static_cast<std::size_t>(k.error)] = true;
    for (const auto& o : L.kept) {
      if (&o != &k && o.name == k.name) {
        throw InputError(fmt::format("{}: columns {} and {} are both named '{}'; name them apart with columns = [...]",
                                     path, std::min(o.value, k.value) + 1, std::max(o.value, k.value) + 1, k.name));
      }
    }
  }
  for (std::size_t c = 3; c < nc; ++c)
    if (is_extra(static_cast<int>(c)) && !used[c]) L.ignored.push_back(L.names[c]);
  return L;
}

// One extra cell: NaN when missing (allowed where the file names its columns), else a
// finite number; `is_error` adds ">= 0".
double extra_value(const detail::TextRow& row, std::size_t c, const VelocityLayout& L, const std::string& path,
                   bool is_error) {
  if (!L.named) detail::require_filled(row, c, path);
  const std::string& f = row.fields[c];
  if (detail::is_missing_value(f)) return std::numeric_limits<double>::quiet_NaN();
  // Fast path without building the column's description; parse_number words any error.
  char* end = nullptr;
  const double x = std::strtod(f.c_str(), &end);
  if (end == f.c_str() || *end != '\0' || !(std::fabs(x) <= 1e300)) parse_number(f, path, row.line, column_what(L, c));
  if (is_error && x < 0.0) {
    throw InputError(fmt::format("{}:{}: {} is {}; an uncertainty must be >= 0", path, row.line, column_what(L, c), f));
  }
  return x;
}

// Uncertainties far from the declared unit's usual range: a warning, not an error.
// HARPS-like errors are ~1 m/s; a typical stated error far from that range in the
// declared unit usually means the unit is wrong.
void warn_unit(VelocityFile& out, const VelocityFileOptions& options) {
  std::vector<double> err(out.uncertainty_m_s);
  std::nth_element(err.begin(), err.begin() + static_cast<std::ptrdiff_t>(err.size() / 2), err.end());
  const double median_err = err[err.size() / 2];
  if (options.unit == VelocityUnit::kKilometersPerSecond && median_err > 500.0) {
    out.warnings.push_back(fmt::format(
        "{}: declared km/s, but the median uncertainty is {:g} km/s; these look like m/s "
        "(check velocity_unit)",
        out.path, median_err / 1000.0));
  } else if (options.unit == VelocityUnit::kMetersPerSecond && median_err < 0.05) {
    out.warnings.push_back(fmt::format(
        "{}: read as m/s, but the median uncertainty is {:g} m/s; these look like km/s "
        "(declare velocity_unit = \"km/s\" or --velocity-unit km/s)",
        out.path, median_err));
  }
}

// The instrument label of one row.
std::string row_label(const detail::TextRow& row, const VelocityLayout& L, const VelocityFileOptions& options,
                      const std::string& path) {
  std::string label = options.instrument;
  if (L.label >= 0) {
    const auto c = static_cast<std::size_t>(L.label);
    detail::require_filled(row, c, path);
    const std::string& f = row.fields[c];
    if (detail::looks_numeric(f)) {
      throw InputError(fmt::format("{}:{}: column {} is '{}'; it must be an instrument label (text) as on line {}",
                                   path, row.line, c + 1, f, L.label_line));
    }
    if (label.empty()) {
      label = f;
    } else if (f != label) {
      throw InputError(fmt::format(
          "{}:{}: instrument column says '{}' but the file is given instrument '{}'; drop the "
          "per-file instrument or the column",
          path, row.line, f, label));
    }
  }
  if (label.empty()) label = detail::file_stem(path);
  return label;
}

}  // namespace

std::size_t IndicatorSeries::count_present() const {
  return static_cast<std::size_t>(std::count_if(value.begin(), value.end(), [](double x) { return !std::isnan(x); }));
}

std::string indicator_error_column(const std::string& name, const std::vector<std::string>& columns) {
  for (const std::string& candidate : {name + "_err", name + "_error", "e_" + name, "err_" + name}) {
    if (std::find(columns.begin(), columns.end(), candidate) != columns.end()) return candidate;
  }
  return "";
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
  for (const auto& s : indicators) out.indicators.push_back(IndicatorSeries{s.name, {}, {}});
  for (std::size_t i = 0; i < size(); ++i) {
    if (instrument[i] != instrument_index) continue;
    out.time_days.push_back(time_days[i]);
    out.velocity_m_s.push_back(velocity_m_s[i]);
    out.uncertainty_m_s.push_back(uncertainty_m_s[i]);
    out.instrument.push_back(0);
    out.origin.push_back(origin[i]);
    for (std::size_t k = 0; k < indicators.size(); ++k) {
      out.indicators[k].value.push_back(indicators[k].value[i]);
      if (indicators[k].has_uncertainty()) out.indicators[k].uncertainty.push_back(indicators[k].uncertainty[i]);
    }
  }
  return out;
}

const IndicatorSeries* VelocityData::indicator(const std::string& name) const {
  for (const auto& s : indicators)
    if (s.name == name) return &s;
  return nullptr;
}

std::vector<std::string> VelocityData::indicator_names() const {
  std::vector<std::string> out;
  for (const auto& s : indicators) out.push_back(s.name);
  return out;
}

IndicatorPoints VelocityData::indicator_points(const std::string& name, int instrument_index) const {
  const IndicatorSeries* s = indicator(name);
  if (!s) {
    std::string list;
    for (const auto& n : indicator_names()) list += (list.empty() ? "'" : ", '") + n + "'";
    throw InputError(fmt::format("{}: no indicator '{}' in the data (indicators: {})", sources(), name,
                                 list.empty() ? "none" : list));
  }
  IndicatorPoints out;
  out.name = name;
  for (std::size_t i = 0; i < size(); ++i) {
    if (std::isnan(s->value[i]) || (instrument_index >= 0 && instrument[i] != instrument_index)) continue;
    out.time_days.push_back(time_days[i]);
    out.value.push_back(s->value[i]);
    out.uncertainty.push_back(s->has_uncertainty() ? s->uncertainty[i] : std::numeric_limits<double>::quiet_NaN());
    out.instrument.push_back(instrument[i]);
    out.point.push_back(i);
  }
  return out;
}

VelocityFile read_velocity_file(const std::string& path, const VelocityFileOptions& options) {
  detail::TextTable table = detail::read_text_table(path);
  check_shape(table, path, "a velocity file needs time, velocity, uncertainty (and optionally an instrument label)");
  const VelocityLayout L = velocity_layout(table, path, options);
  VelocityFile out;
  out.path = path;
  out.columns = L.names;
  out.ignored_columns = L.ignored;
  out.repeats = options.repeats;
  for (const auto& k : L.kept) {
    out.indicators.push_back(IndicatorSeries{k.name, {}, {}});
    out.indicators.back().value.reserve(table.rows.size());
  }
  const double scale = options.unit == VelocityUnit::kKilometersPerSecond ? 1000.0 : 1.0;
  for (const auto& row : table.rows) {
    // Without column names a missing value has nothing to attach to: every cell is filled.
    for (std::size_t c = 0; c < (L.named ? 3 : row.fields.size()); ++c) detail::require_filled(row, c, path);
    const long double t = row_time(row.fields[0], options.time_offset_days, path, row.line, "time", "[[velocities]]");
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
    out.instrument.push_back(row_label(row, L, options, path));
    for (std::size_t k = 0; k < L.kept.size(); ++k) {
      out.indicators[k].value.push_back(extra_value(row, L.kept[k].value, L, path, false));
      if (L.kept[k].error >= 0)
        out.indicators[k].uncertainty.push_back(extra_value(row, static_cast<std::size_t>(L.kept[k].error), L, path, true));
    }
    out.time_bjd.push_back(t);
    out.velocity_m_s.push_back(v * scale);
    out.uncertainty_m_s.push_back(s * scale);
    out.line.push_back(row.line);
  }
  if (!L.empty_skipped.empty()) {
    std::string list;
    for (const auto& c : L.empty_skipped) list += (list.empty() ? "" : ", ") + c;
    out.warnings.push_back(fmt::format("{}: column(s) empty on every row, not kept: {}", path, list));
  }
  warn_unit(out, options);
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

int strictness(RepeatPolicy p) { return p == RepeatPolicy::kError ? 2 : p == RepeatPolicy::kAverage ? 1 : 0; }

// One row of one file, while merging.
struct MergeRow {
  long double t;
  int inst;
  std::size_t file, row;
};

// A point of the merged data: one row, or several averaged (repeats = "average").
struct MergePoint {
  long double t;
  int inst;
  std::vector<std::size_t> members;  // indices into the MergeRow list, in file order
};

std::string row_origin(const std::vector<VelocityFile>& files, const MergeRow& r) {
  return fmt::format("{}:{}", files[r.file].path, files[r.file].line[r.row]);
}

// "lines 87 and 88" when every row of every group is in one file (returned in `file`),
// else "a.csv:3 and b.csv:5".
std::string list_rows(const std::vector<VelocityFile>& files, const std::vector<MergeRow>& rows,
                      const std::vector<std::size_t>& members, bool one_file) {
  std::string out = one_file ? "lines " : "";
  for (std::size_t i = 0; i < members.size(); ++i) {
    const MergeRow& r = rows[members[i]];
    out += (i == 0 ? "" : (i + 1 == members.size() ? " and " : ", "));
    out += one_file ? std::to_string(files[r.file].line[r.row]) : row_origin(files, r);
  }
  return out;
}

// The one warning line about repeated (time, instrument) pairs kept or averaged.
std::string repeat_warning(const std::vector<VelocityFile>& files, const std::vector<MergeRow>& rows,
                           const std::vector<std::vector<std::size_t>>& groups,
                           const std::vector<std::string>& instrument_names, bool averaged) {
  bool one_file = true;
  for (const auto& g : groups)
    for (std::size_t m : g) one_file = one_file && rows[m].file == rows[groups.front().front()].file;
  constexpr std::size_t kListed = 10;
  std::string list;
  for (std::size_t i = 0; i < groups.size() && i < kListed; ++i) {
    const MergeRow& r = rows[groups[i].front()];
    list += fmt::format("{}{} (time {}, '{}')", i == 0 ? "" : "; ", list_rows(files, rows, groups[i], one_file),
                        static_cast<double>(r.t), instrument_names[static_cast<std::size_t>(r.inst)]);
  }
  if (groups.size() > kListed) list += fmt::format("; and {} more", groups.size() - kListed);
  const std::string where = one_file ? files[rows[groups.front().front()].file].path + ": " : "";
  const std::string n = fmt::format("{} repeated (time, instrument) pair{}", groups.size(), groups.size() == 1 ? "" : "s");
  if (averaged) {
    return fmt::format("{}{} replaced by their inverse-variance weighted mean (repeats = \"average\"): {}", where, n,
                       list);
  }
  return fmt::format("{}{}, every point kept: {} (repeats = \"average\" merges them, \"error\" refuses them)", where,
                     n, list);
}

// Inverse-variance weighted mean of values with uncertainties (NaN entries skipped); a
// plain mean, with a NaN uncertainty, when some present value lacks a usable one.
std::pair<double, double> weighted_mean(const std::vector<double>& x, const std::vector<double>& s) {
  double sw = 0, swx = 0, sum = 0;
  std::size_t n = 0;
  bool weighted = true;
  for (std::size_t i = 0; i < x.size(); ++i) {
    if (std::isnan(x[i])) continue;
    ++n;
    sum += x[i];
    if (!(s[i] > 0.0)) {
      weighted = false;
      continue;
    }
    sw += 1.0 / (s[i] * s[i]);
    swx += x[i] / (s[i] * s[i]);
  }
  const double nan = std::numeric_limits<double>::quiet_NaN();
  if (n == 0) return {nan, nan};
  if (!weighted) return {sum / static_cast<double>(n), nan};
  return {swx / sw, 1.0 / std::sqrt(sw)};
}

// Groups equal (instrument, time) runs of `order` (sorted by instrument, then time) into
// points, applying each group's strictest RepeatPolicy; warnings go to `data`.
std::vector<MergePoint> merge_repeats(const std::vector<VelocityFile>& files, const std::vector<MergeRow>& rows,
                                      const std::vector<std::size_t>& order, VelocityData& data) {
  std::vector<MergePoint> points;
  std::vector<std::vector<std::size_t>> kept, averaged;
  for (std::size_t i = 0; i < order.size();) {
    std::size_t j = i + 1;
    while (j < order.size() && rows[order[j]].inst == rows[order[i]].inst && rows[order[j]].t == rows[order[i]].t) ++j;
    std::vector<std::size_t> group(order.begin() + static_cast<std::ptrdiff_t>(i),
                                   order.begin() + static_cast<std::ptrdiff_t>(j));
    const MergeRow& first = rows[group.front()];
    int policy = 0;
    for (std::size_t m : group) policy = std::max(policy, strictness(files[rows[m].file].repeats));
    if (group.size() > 1 && policy == 2) {
      throw InputError(fmt::format(
          "{}: time {} repeats {} for instrument '{}' (repeats = \"error\"; \"keep\" or \"average\" accept it)",
          row_origin(files, rows[group[1]]), static_cast<double>(first.t), row_origin(files, first),
          data.instrument_names[static_cast<std::size_t>(first.inst)]));
    }
    if (group.size() > 1 && policy == 1) {
      averaged.push_back(group);
      points.push_back(MergePoint{first.t, first.inst, group});
    } else {
      if (group.size() > 1) kept.push_back(group);
      for (std::size_t m : group) points.push_back(MergePoint{rows[m].t, rows[m].inst, {m}});
    }
    i = j;
  }
  if (!kept.empty()) data.warnings.push_back(repeat_warning(files, rows, kept, data.instrument_names, false));
  if (!averaged.empty()) data.warnings.push_back(repeat_warning(files, rows, averaged, data.instrument_names, true));
  return points;
}

// Fills the velocities, origins and indicators of `data` from the merged points.
void fill_points(const std::vector<VelocityFile>& files, const std::vector<MergeRow>& rows,
                 const std::vector<MergePoint>& points, long double ref, VelocityData& data) {
  // Indicator k of file f is global series slot[f][k].
  std::vector<std::vector<std::size_t>> slot(files.size());
  for (std::size_t f = 0; f < files.size(); ++f) {
    for (const auto& s : files[f].indicators) {
      std::size_t g = 0;
      while (g < data.indicators.size() && data.indicators[g].name != s.name) ++g;
      if (g == data.indicators.size()) data.indicators.push_back(IndicatorSeries{s.name, {}, {}});
      slot[f].push_back(g);
    }
  }
  std::vector<bool> with_error(data.indicators.size(), false);
  for (std::size_t f = 0; f < files.size(); ++f)
    for (std::size_t k = 0; k < files[f].indicators.size(); ++k)
      with_error[slot[f][k]] = with_error[slot[f][k]] || files[f].indicators[k].has_uncertainty();
  const double nan = std::numeric_limits<double>::quiet_NaN();
  const std::size_t n_ind = data.indicators.size();
  std::vector<std::vector<double>> xs(n_ind), ss(n_ind);  // per indicator, the members' values
  for (const MergePoint& p : points) {
    std::vector<double> v, s;
    for (auto& x : xs) x.clear();
    for (auto& x : ss) x.clear();
    for (std::size_t m : p.members) {
      const MergeRow& r = rows[m];
      const VelocityFile& f = files[r.file];
      v.push_back(f.velocity_m_s[r.row]);
      s.push_back(f.uncertainty_m_s[r.row]);
      for (std::size_t g = 0; g < n_ind; ++g) {
        xs[g].push_back(nan);
        ss[g].push_back(nan);
      }
      for (std::size_t k = 0; k < f.indicators.size(); ++k) {
        xs[slot[r.file][k]].back() = f.indicators[k].value[r.row];
        if (f.indicators[k].has_uncertainty()) ss[slot[r.file][k]].back() = f.indicators[k].uncertainty[r.row];
      }
    }
    const auto [vm, sm] = p.members.size() == 1 ? std::pair{v[0], s[0]} : weighted_mean(v, s);
    data.time_days.push_back(static_cast<double>(p.t - ref));
    data.velocity_m_s.push_back(vm);
    data.uncertainty_m_s.push_back(sm);
    data.instrument.push_back(p.inst);
    std::string origin = row_origin(files, rows[p.members.front()]);
    for (std::size_t i = 1; i < p.members.size(); ++i) {
      const MergeRow& r = rows[p.members[i]];
      if (r.file == rows[p.members.front()].file) origin += fmt::format("+{}", files[r.file].line[r.row]);
    }
    data.origin.push_back(origin);
    for (std::size_t g = 0; g < n_ind; ++g) {
      const auto [x, e] = p.members.size() == 1 ? std::pair{xs[g][0], ss[g][0]} : weighted_mean(xs[g], ss[g]);
      data.indicators[g].value.push_back(x);
      if (with_error[g]) data.indicators[g].uncertainty.push_back(e);
    }
  }
}

}  // namespace

VelocityData combine_velocities(const std::vector<VelocityFile>& files) {
  VelocityData data;
  std::vector<MergeRow> rows;
  std::map<std::string, int> index;
  for (std::size_t f = 0; f < files.size(); ++f) {
    for (std::size_t i = 0; i < files[f].time_bjd.size(); ++i) {
      auto [it, inserted] = index.emplace(files[f].instrument[i], static_cast<int>(data.instrument_names.size()));
      if (inserted) data.instrument_names.push_back(files[f].instrument[i]);
      rows.push_back(MergeRow{files[f].time_bjd[i], it->second, f, i});
    }
  }
  if (rows.empty()) return data;
  for (const auto& f : files) data.warnings.insert(data.warnings.end(), f.warnings.begin(), f.warnings.end());
  auto [lo, hi] = std::minmax_element(rows.begin(), rows.end(), [](const MergeRow& a, const MergeRow& b) { return a.t < b.t; });
  if (hi->t - lo->t > 1e5L) {
    throw InputError(fmt::format(
        "{}: time {} and {}: time {} are {:.0f} days apart; are some times full BJD and others "
        "reduced (BJD - 2400000 or similar)? Give every file the same kind",
        row_origin(files, *lo), static_cast<double>(lo->t), row_origin(files, *hi), static_cast<double>(hi->t),
        static_cast<double>(hi->t - lo->t)));
  }
  // An integer day near the middle of the data: keeps reduced times small (and the
  // conjunction-period correlation of fits low) while staying exact.
  const long double ref = std::floor(0.5L * (lo->t + hi->t));
  data.reference_epoch_bjd = static_cast<double>(ref);

  std::vector<std::size_t> order(rows.size());
  std::iota(order.begin(), order.end(), std::size_t{0});
  std::stable_sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) {
    return rows[a].inst != rows[b].inst ? rows[a].inst < rows[b].inst : rows[a].t < rows[b].t;
  });
  std::vector<MergePoint> points = merge_repeats(files, rows, order, data);
  std::stable_sort(points.begin(), points.end(), [](const MergePoint& a, const MergePoint& b) { return a.t < b.t; });
  fill_points(files, rows, points, ref, data);
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
  check_shape(table, path,
              "a transit-time file needs epoch, mid-transit time, uncertainty (and optionally a planet label)");
  TransitData out;
  std::vector<long double> times;
  const int label_column = find_label_column(table, path, "columns {} and {} both look like planet labels");
  const std::size_t nc = table.rows.front().fields.size();
  for (std::size_t c = 3; c < nc; ++c) {
    if (static_cast<int>(c) != label_column)
      out.ignored_columns.push_back(table.header.empty() ? fmt::format("column {}", c + 1) : table.header[c]);
  }
  for (const auto& row : table.rows) {
    // Skipped columns may have missing values where the header names them.
    for (std::size_t c = 0; c < nc; ++c) {
      if (c < 3 || static_cast<int>(c) == label_column || table.header.empty()) detail::require_filled(row, c, path);
    }
    long double e = parse_long_double(row.fields[0], path, row.line, "epoch");
    if (e != std::floor(e) || std::fabs(e) > 1e15L) {
      throw InputError(fmt::format("{}:{}: epoch is {}; it must be an integer transit number",
                                   path, row.line, row.fields[0]));
    }
    const long double t =
        row_time(row.fields[1], options.time_offset_days, path, row.line, "mid-transit time", "[[transits]]");
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
      if (static_cast<int>(c) == label_column || detail::is_missing_value(row.fields[c])) continue;
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
