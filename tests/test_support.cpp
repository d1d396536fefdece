#include "test_support.h"

#include <doctest/doctest.h>
#include <algorithm>

#include <array>
#include <cmath>
#include <map>
#include <nlohmann/json.hpp>
#include <sstream>
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

double half_last_digit(const std::string& printed) {
  std::string t = printed;
  while (!t.empty() && (t.front() == '+' || t.front() == '-' || t.front() == ' ')) t.erase(t.begin());
  int exponent = 0;
  if (const auto e = t.find_first_of("eE"); e != std::string::npos) {
    exponent = std::stoi(t.substr(e + 1));
    t = t.substr(0, e);
  }
  if (const auto dot = t.find('.'); dot != std::string::npos) {
    const int decimals = static_cast<int>(t.size() - dot - 1);
    return 0.5 * std::pow(10.0, exponent - decimals);
  }
  int zeros = 0;
  for (auto it = t.rbegin(); it != t.rend() && *it == '0' && it + 1 != t.rend(); ++it) ++zeros;
  return 0.5 * std::pow(10.0, exponent + zeros);
}

bool agrees_to_printed(double value, const std::string& printed) {
  const double shown = std::stod(printed);
  return std::fabs(value - shown) <= half_last_digit(printed) * (1.0 + 1e-9) + 1e-9 * std::fabs(value);
}

namespace {
void length_check(const nlohmann::json& j, const std::string& path, std::vector<std::string>& bad) {
  if (j.is_object()) {
    for (const auto& [key, names] : j.items()) {
      const bool is_names = key == "names" || (key.size() > 6 && key.substr(key.size() - 6) == "_names");
      if (!is_names || !names.is_array() || names.empty() || !names[0].is_string()) continue;
      for (const auto& [other, value] : j.items()) {
        if (!value.is_array() || value.empty() || !value[0].is_number()) continue;
        if (value.size() != names.size())
          bad.push_back(path + "/" + other + ": " + std::to_string(value.size()) + " values vs " +
                        std::to_string(names.size()) + " in " + key);
      }
    }
    for (const auto& [key, value] : j.items()) length_check(value, path + "/" + key, bad);
  } else if (j.is_array()) {
    for (std::size_t i = 0; i < j.size(); ++i) length_check(j[i], path + "/" + std::to_string(i), bad);
  }
}
}  // namespace

std::vector<std::string> per_parameter_length_mismatches(const std::string& json_text) {
  std::vector<std::string> bad;
  length_check(nlohmann::json::parse(json_text), "", bad);
  return bad;
}

std::vector<std::string> lines_of(const std::string& text) {
  std::vector<std::string> out;
  std::istringstream in(text);
  for (std::string line; std::getline(in, line);) {
    if (!line.empty() && line.back() == '\r') line.pop_back();
    out.push_back(line);
  }
  return out;
}

std::vector<std::string> repeated_lines(const std::string& text) {
  std::map<std::string, int> count;
  std::vector<std::string> out;
  for (const auto& line : lines_of(text)) {
    if (line.find_first_not_of(" \t") == std::string::npos) continue;
    if (++count[line] == 2) out.push_back(line);
  }
  return out;
}

std::string read_file(const std::string& path) {
  std::ifstream in(path);
  std::stringstream ss;
  ss << in.rdbuf();
  return ss.str();
}

}  // namespace apsides::test
