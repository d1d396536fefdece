// Helpers shared by the test suites.
#pragma once

#include <functional>
#include <string>
#include <vector>

namespace apsides::test {

// A fresh, empty directory for one test (under the build tree).
std::string temp_dir(const std::string& name);
// Writes `content` to dir/name and returns the path.
std::string write_text(const std::string& dir, const std::string& name, const std::string& content);
// Runs a shell command, returns its exit status and captures stdout (+stderr if asked).
struct CommandResult {
  int status = -1;
  std::string output;
};
CommandResult run_command(const std::string& command, bool merge_stderr = true);
// Runs a Python snippet with /usr/bin/python3 (Debian's numpy/scipy/astropy/h5py).
CommandResult run_python(const std::string& code);
// Paths.
std::string source_dir();
std::string real_data(const std::string& name);  // tests/data/real/<name> (in the repository)
std::string apsides_binary();

// Runs `body(target)` once under each SIMD target this binary and CPU can run
// (kernels/simd.h: "avx512", "avx2", "sse4", "scalar", ...), best first, then puts the
// start-up target back. Kernel accuracy tests run through it, so each is proved for
// every instruction set a user's machine might dispatch to. Wrap the body's checks with
// CAPTURE(target) (the helper adds an INFO line too).
void for_each_simd_target(const std::function<void(const std::string& target)>& body);

// ---- Output contracts: a number printed in a table against the same number in JSON.
// Half a unit of the last printed digit: "6.412701" -> 5e-7, "5.35e-11" -> 5e-14,
// "+0.0000020" -> 5e-8; an integer's trailing zeros count as rounding ("120" -> 5, as in
// "120 +50 -20"), so compare integer fields exactly instead.
double half_last_digit(const std::string& printed);
// |value - printed| <= half a unit of its last digit (plus 1e-9 relative, for ties).
bool agrees_to_printed(double value, const std::string& printed);
// In every object of a JSON text, every array of numbers beside an array of names (a key
// "names" or ending in "_names") must have the names' length; returns "path: n vs m" for
// each that does not.
std::vector<std::string> per_parameter_length_mismatches(const std::string& json_text);
// The lines of a text (without their line ends).
std::vector<std::string> lines_of(const std::string& text);
// Non-blank lines that occur more than once.
std::vector<std::string> repeated_lines(const std::string& text);
// A whole file as a string ("" when missing).
std::string read_file(const std::string& path);

}  // namespace apsides::test
