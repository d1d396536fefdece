#include "text_table.h"

#include <fmt/format.h>

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

std::vector<std::string> split_whitespace(const std::string& s) {
  std::vector<std::string> out;
  std::istringstream in(s);
  std::string f;
  while (in >> f) out.push_back(f);
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

std::string file_stem(const std::string& path) { return fs::path(path).stem().string(); }

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
    const char this_delim = has_comma ? ',' : ' ';
    std::vector<std::string> fields = has_comma ? split_comma(body) : split_whitespace(body);
    // A header row names columns: none of its fields is a number. (A data row with a
    // typo in one field still has numbers elsewhere and gets a precise error below.)
    bool none_numeric = true;
    for (const auto& f : fields) none_numeric = none_numeric && !looks_numeric(f);
    const bool is_header_candidate = table.header.empty() && table.rows.empty() && none_numeric;
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
    for (std::size_t i = 0; i < fields.size(); ++i) {
      if (fields[i].empty()) {
        throw InputError(fmt::format("{}:{}: column {} is empty", path, line_no, i + 1));
      }
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
