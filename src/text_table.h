// Internal: reading delimited text tables (velocity and transit-time files).
#pragma once

#include <string>
#include <vector>

namespace apsides::detail {

struct TextRow {
  int line = 0;                      // 1-based line number in the file
  std::vector<std::string> fields;   // trimmed
};

struct TextTable {
  std::string path;
  std::vector<std::string> header;   // empty when the file has none
  std::vector<TextRow> rows;
  char delimiter = ' ';              // ',' or ' ' (tab counts as whitespace)
};

// Reads a whole file: strips a UTF-8 BOM and CR characters of CRLF line ends, skips
// blank lines and `#` comments (whole-line or trailing), detects the delimiter from the
// first data line and insists every line uses the same kind, takes a first row whose
// first field is not a number as a header. Empty fields (",,", a trailing comma) are kept
// as "": the readers decide where a missing value is allowed (`require_filled`). Throws
// InputError for a missing file, a directory, an unreadable or binary file, mixed
// delimiters, an empty file.
TextTable read_text_table(const std::string& path);

// Parses a finite number; throws InputError "path:line: <what> is 'text'; it must be a
// number" (or "... must be finite" for nan/inf).
double parse_number(const std::string& text, const std::string& path, int line,
                    const std::string& what);
long double parse_long_double(const std::string& text, const std::string& path, int line,
                              const std::string& what);
bool looks_numeric(const std::string& text);
// A missing value in an optional column: an empty field, "nan" (any case, signed) or
// dashes only ("---", as CDS tables write it).
bool is_missing_value(const std::string& text);
// Throws InputError "path:line: column N is empty" when row.fields[column] is "".
void require_filled(const TextRow& row, std::size_t column, const std::string& path);

std::string file_stem(const std::string& path);

// For an unknown key: the allowed key the user most likely meant, or "" when none is
// close. Close: at most two edits away, or sharing a long prefix ("sigma" -> "sigma_ms",
// "velocity" -> "velocities").
std::string suggest_key(const std::string& key, const std::vector<std::string>& allowed);
std::string display_path(const std::string& path);

}  // namespace apsides::detail
