#include "text_table.h"

#include <fmt/format.h>

#include <algorithm>
#include <cctype>
#include <cerrno>
#include <cmath>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "apsides/error.h"

namespace apsides::detail {
namespace fs = std::filesystem;

namespace {

std::string trim(const std::string& s) {
  std::size_t b = 0, e = s.size();
  while (b < e && (s[b] == ' ' || s[b] == '\t' || s[b] == '\r' || s[b] == '\n')) ++b;
  while (e > b && (s[e - 1] == ' ' || s[e - 1] == '\t' || s[e - 1] == '\r' || s[e - 1] == '\n')) --e;
  return s.substr(b, e - b);
}

bool is_blank(char c) { return c == ' ' || c == '\t' || c == '\r' || c == '\n' || c == '\v' || c == '\f'; }

std::vector<std::string> split_whitespace(const std::string& s) {
  std::vector<std::string> out;
  std::size_t i = 0;
  while (i < s.size()) {
    while (i < s.size() && is_blank(s[i])) ++i;
    const std::size_t b = i;
    while (i < s.size() && !is_blank(s[i])) ++i;
    if (i > b) out.emplace_back(s, b, i - b);
  }
  return out;
}

std::vector<std::string> split_comma(const std::string& s) {
  std::vector<std::string> out;
  std::string cur;
  for (char c : s) {
    if (c == ',') {
      out.push_back(trim(cur));
      cur.clear();
    } else {
      cur.push_back(c);
    }
  }
  out.push_back(trim(cur));
  return out;
}

}  // namespace

std::string display_path(const std::string& path) { return path; }

std::string suggest_key(const std::string& key, const std::vector<std::string>& allowed) {
  auto edit_distance = [](const std::string& a, const std::string& b) {
    std::vector<std::size_t> prev(b.size() + 1), cur(b.size() + 1);
    for (std::size_t j = 0; j <= b.size(); ++j) prev[j] = j;
    for (std::size_t i = 1; i <= a.size(); ++i) {
      cur[0] = i;
      for (std::size_t j = 1; j <= b.size(); ++j) {
        cur[j] = std::min({prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + (a[i - 1] == b[j - 1] ? 0 : 1)});
      }
      std::swap(prev, cur);
    }
    return prev[b.size()];
  };
  std::string best;
  std::size_t best_d = 3;
  for (const auto& a : allowed) {
    const std::size_t d = edit_distance(key, a);
    if (d < best_d) {
      best_d = d;
      best = a;
    }
  }
  if (!best.empty()) return best;
  const std::size_t need = std::max<std::size_t>(4, (6 * key.size() + 9) / 10);
  std::size_t best_prefix = 0;
  for (const auto& a : allowed) {
    std::size_t k = 0;
    while (k < a.size() && k < key.size() && a[k] == key[k]) ++k;
    if (k >= need && (k > best_prefix || (k == best_prefix && a.size() < best.size()))) {
      best_prefix = k;
      best = a;
    }
  }
  return best;
}

std::string file_stem(const std::string& path) { return fs::path(path).stem().string(); }

bool is_missing_value(const std::string& text) {
  if (text.empty()) return true;
  // CDS tables write a missing value as dashes ("---").
  if (text.find_first_not_of('-') == std::string::npos) return true;
  std::string t = text;
  if (t.front() == '+' || t.front() == '-') t.erase(0, 1);
  if (t.size() != 3) return false;
  for (char& c : t) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  return t == "nan";
}

void require_filled(const TextRow& row, std::size_t column, const std::string& path) {
  if (column < row.fields.size() && row.fields[column].empty()) {
    throw InputError(fmt::format("{}:{}: column {} is empty", path, row.line, column + 1));
  }
}

bool looks_numeric(const std::string& text) {
  if (text.empty()) return false;
  const char* b = text.c_str();
  char* end = nullptr;
  errno = 0;
  std::strtod(b, &end);
  return end != b && *end == '\0';
}

long double parse_long_double(const std::string& text, const std::string& path, int line,
                              const std::string& what) {
  const char* b = text.c_str();
  char* end = nullptr;
  errno = 0;
  long double v = std::strtold(b, &end);
  if (text.empty() || end == b || *end != '\0') {
    throw InputError(fmt::format("{}:{}: {} is '{}'; it must be a number", path, line, what, text));
  }
  if (!std::isfinite(v)) {
    throw InputError(fmt::format("{}:{}: {} is '{}'; it must be a finite number", path, line,
                                 what, text));
  }
  return v;
}

double parse_number(const std::string& text, const std::string& path, int line,
                    const std::string& what) {
  long double v = parse_long_double(text, path, line, what);
  if (std::fabs(v) > 1e300L) {
    throw InputError(fmt::format("{}:{}: {} is '{}'; it is out of range", path, line, what, text));
  }
  return static_cast<double>(v);
}

TextTable read_text_table(const std::string& path) {
  std::error_code ec;
  if (!fs::exists(path, ec)) {
    throw InputError(fmt::format("{}: no such file", path));
  }
  if (fs::is_directory(path, ec)) {
    throw InputError(fmt::format("{}: is a directory, not a data file", path));
  }
  std::ifstream in(path, std::ios::binary);
  if (!in) throw InputError(fmt::format("{}: cannot be opened for reading", path));
  std::string content((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
  if (content.size() >= 2 && (((unsigned char)content[0] == 0xFF && (unsigned char)content[1] == 0xFE) ||
                              ((unsigned char)content[0] == 0xFE && (unsigned char)content[1] == 0xFF))) {
    throw InputError(fmt::format("{}: is UTF-16 encoded; save it as plain text (ASCII or UTF-8)", path));
  }
  if (content.size() >= 3 && (unsigned char)content[0] == 0xEF && (unsigned char)content[1] == 0xBB &&
      (unsigned char)content[2] == 0xBF) {
    content.erase(0, 3);  // UTF-8 byte-order mark: harmless, drop it
  }
  if (content.find('\0') != std::string::npos) {
    throw InputError(fmt::format("{}: contains NUL bytes; it is not a text table", path));
  }

  TextTable table;
  table.path = path;
  bool delimiter_known = false;
  int delimiter_line = 0;
  std::istringstream lines(content);
  std::string raw;
  int line_no = 0;
  bool any_nonblank = false;
  while (std::getline(lines, raw)) {
    ++line_no;
    if (!raw.empty() && raw.back() == '\r') raw.pop_back();
    std::size_t hash = raw.find('#');
    std::string body = trim(hash == std::string::npos ? raw : raw.substr(0, hash));
    if (body.empty()) continue;
    any_nonblank = true;
    const bool has_comma = body.find(',') != std::string::npos;
    if (body.find(';') != std::string::npos) {
      throw InputError(fmt::format(
          "{}:{}: is semicolon-separated; separate columns with commas, tabs or spaces "
          "(and use '.' as the decimal point)",
          path, line_no));
    }
    const char this_delim = has_comma ? ',' : ' ';
    std::vector<std::string> fields = has_comma ? split_comma(body) : split_whitespace(body);
    if (has_comma) {
      for (std::size_t i = 0; i < fields.size(); ++i) {
        std::string& f = fields[i];
        // Spreadsheet exports quote fields: "2459000.5","3.2" reads as 2459000.5, 3.2.
        if (f.size() >= 2 && f.front() == '"' && f.back() == '"') f = trim(f.substr(1, f.size() - 2));
        // Numbers separated by both commas and blanks on one line: mixed delimiters.
        if (f.find_first_of(" \t") == std::string::npos) continue;
        const std::vector<std::string> parts = split_whitespace(f);
        bool all_numeric = parts.size() > 1;
        for (const auto& q : parts) all_numeric = all_numeric && looks_numeric(q);
        if (all_numeric) {
          throw InputError(fmt::format(
              "{}:{}: mixed delimiters: column {} ('{}') holds blank-separated numbers in a "
              "comma-separated line; use one kind of delimiter per file",
              path, line_no, i + 1, f));
        }
      }
    }
    // A header row names columns: none of its fields is a number. (A data row with a
    // typo in one field still has numbers elsewhere and gets a precise error below.)
    bool is_header_candidate = table.header.empty() && table.rows.empty();
    for (std::size_t i = 0; is_header_candidate && i < fields.size(); ++i) is_header_candidate = !looks_numeric(fields[i]);
    if (is_header_candidate) {
      table.header = fields;
      table.delimiter = this_delim;
      delimiter_known = true;
      delimiter_line = line_no;
      continue;
    }
    if (!delimiter_known) {
      table.delimiter = this_delim;
      delimiter_known = true;
      delimiter_line = line_no;
    } else if (this_delim != table.delimiter) {
      throw InputError(fmt::format(
          "{}:{}: mixed delimiters: this line is {}-separated but line {} is {}-separated",
          path, line_no, this_delim == ',' ? "comma" : "whitespace", delimiter_line,
          table.delimiter == ',' ? "comma" : "whitespace"));
    }
    table.rows.push_back(TextRow{line_no, std::move(fields)});
  }
  if (!any_nonblank) throw InputError(fmt::format("{}: file is empty (no data rows)", path));
  if (table.rows.empty()) {
    throw InputError(fmt::format("{}: has a header but no data rows", path));
  }
  return table;
}

}  // namespace apsides::detail
