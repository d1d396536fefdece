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

}  // namespace apsides::test
