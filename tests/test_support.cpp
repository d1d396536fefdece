#include "test_support.h"

#include <doctest/doctest.h>

#include <array>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <sys/wait.h>
#include <unistd.h>

#include "kernels/simd.h"

namespace apsides::test {
namespace fs = std::filesystem;

std::string source_dir() { return APSIDES_SOURCE_DIR; }
std::string apsides_binary() { return APSIDES_BINARY; }

std::string real_data(const std::string& name) {
  return (fs::path(source_dir()) / "tests" / "data" / "real" / name).lexically_normal().string();
}

std::string temp_dir(const std::string& name) {
  const char* base = std::getenv("APSIDES_TEST_TMP");
  fs::path root = base ? fs::path(base) : fs::temp_directory_path() / "apsides-tests";
  fs::path dir = root / name;
  fs::remove_all(dir);
  fs::create_directories(dir);
  return dir.string();
}

std::string write_text(const std::string& dir, const std::string& name, const std::string& content) {
  const fs::path p = fs::path(dir) / name;
  std::ofstream out(p, std::ios::binary);
  out << content;
  return p.string();
}

CommandResult run_command(const std::string& command, bool merge_stderr) {
  CommandResult r;
  const std::string cmd = merge_stderr ? command + " 2>&1" : command;
  FILE* pipe = popen(cmd.c_str(), "r");
  if (!pipe) return r;
  std::array<char, 4096> buf{};
  std::size_t n;
  while ((n = fread(buf.data(), 1, buf.size(), pipe)) > 0) r.output.append(buf.data(), n);
  const int status = pclose(pipe);
  r.status = WIFEXITED(status) ? WEXITSTATUS(status) : -1;
  return r;
}

CommandResult run_python(const std::string& code) {
  const std::string dir = temp_dir("python-" + std::to_string(getpid()));
  static int counter = 0;
  const std::string path = write_text(dir, "snippet" + std::to_string(counter++) + ".py", code);
  return run_command("/usr/bin/python3 " + path, false);
}

void for_each_simd_target(const std::function<void(const std::string& target)>& body) {
  struct Restore {
    ~Restore() { kernels::set_simd_target(""); }
  } restore;  // also when a REQUIRE inside `body` throws
  for (const std::string& target : kernels::simd_targets()) {
    REQUIRE(kernels::set_simd_target(target));
    REQUIRE(kernels::simd_target() == target);
    INFO("SIMD target " << target);
    body(target);
  }
}

}  // namespace apsides::test
