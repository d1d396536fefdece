// Run-time choice of the SIMD target of the kernels (src/kernels/simd.h): what is listed,
// switching in-process, and the APSIDES_SIMD_TARGET environment variable.
#include <doctest/doctest.h>

#include <algorithm>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <set>
#include <sstream>
#include <string>
#include <vector>

#include "apsides/kepler.h"
#include "kernels/simd.h"
#include "test_support.h"

using namespace apsides;

namespace {
// The CPU's feature flags as the Linux kernel reports them (first "flags" line).
std::set<std::string> cpu_flags() {
  std::ifstream in("/proc/cpuinfo");
  std::string line;
  while (std::getline(in, line)) {
    if (line.rfind("flags", 0) == 0) {
      std::istringstream words(line.substr(line.find(':') + 1));
      std::set<std::string> out;
      for (std::string w; words >> w;) out.insert(w);
      return out;
    }
  }
  return {};
}

bool has(const std::vector<std::string>& v, const std::string& x) { return std::find(v.begin(), v.end(), x) != v.end(); }
}  // namespace

TEST_SUITE("simd") {
  TEST_CASE("simd: the listed targets are the ones /proc/cpuinfo says this CPU runs, best first, scalar last") {
    const std::vector<std::string> targets = kernels::simd_targets();
    REQUIRE(!targets.empty());
    CHECK(targets.back() == "scalar");
#if defined(__x86_64__)
    // Outside reference: the kernel's CPU flags. A listed target must be runnable (else
    // the kernels would crash with an illegal instruction); the common instruction-set
    // groups must be listed when the CPU has them (Highway's AVX3 = AVX-512 F/VL/DQ/BW,
    // AVX2 = AVX2 + FMA + BMI2 + F16C, SSE4 = SSE4.2 + CLMUL + AES).
    const auto f = cpu_flags();
    REQUIRE(!f.empty());
    const bool avx512 = f.count("avx512f") && f.count("avx512vl") && f.count("avx512dq") && f.count("avx512bw");
    const bool avx2 = f.count("avx2") && f.count("fma") && f.count("bmi2") && f.count("f16c");
    const bool sse4 = f.count("sse4_2") && f.count("pclmulqdq") && f.count("aes");
    CHECK(has(targets, "avx512") == avx512);
    CHECK(has(targets, "avx2") == avx2);
    CHECK(has(targets, "sse4") == sse4);
    const std::vector<std::string> order = {"avx512", "avx2", "sse4", "scalar"};
    std::vector<std::string> expected;
    for (const auto& t : order) {
      if (has(targets, t)) expected.push_back(t);
    }
    CHECK(targets == expected);
#endif
  }

  TEST_CASE("simd: set_simd_target switches every kernel, refuses what the CPU cannot run, and restores") {
    const std::string start = kernels::simd_target();
    const std::vector<double> M = {0.1, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0}, e = {0.0, 0.1, 0.5, 0.9, 0.95, 0.99, 0.3};
    std::vector<double> E_first;
    for (const std::string& t : kernels::simd_targets()) {
      CAPTURE(t);
      REQUIRE(kernels::set_simd_target(t));
      CHECK(kernels::simd_target() == t);
      std::vector<double> E(M.size());
      solve_kepler_batch(M, e, E);
      if (E_first.empty()) E_first = E;
      for (std::size_t i = 0; i < M.size(); ++i) CHECK(E[i] == doctest::Approx(E_first[i]).epsilon(1e-14));
    }
    CHECK_FALSE(kernels::set_simd_target("no-such-target"));
    CHECK_FALSE(kernels::set_simd_target("AVX2"));  // names are lower case
    REQUIRE(kernels::set_simd_target(""));
    CHECK(kernels::simd_target() == start);
  }

  TEST_CASE("simd: APSIDES_SIMD_TARGET chooses the target of a process") {
    // Child mode: this test case re-run by the parent below with the variable set.
    if (std::getenv("APSIDES_SIMD_TEST_CHILD") != nullptr) {
      const char* v = std::getenv("APSIDES_SIMD_TARGET");
      REQUIRE(v != nullptr);
      const auto targets = kernels::simd_targets();
      CHECK(kernels::simd_target() == (has(targets, v) ? std::string(v) : targets.front()));
      std::vector<double> E(1);
      solve_kepler_batch(std::vector<double>{1.0}, std::vector<double>{0.5}, E);
      CHECK(E[0] == doctest::Approx(solve_kepler(1.0, 0.5)).epsilon(1e-14));
      return;
    }
    const std::string self = std::filesystem::read_symlink("/proc/self/exe").string();
    auto run = [&](const std::string& target) {
      return test::run_command("APSIDES_SIMD_TEST_CHILD=1 APSIDES_SIMD_TARGET=" + target + " '" + self +
                               "' --test-case='simd: APSIDES_SIMD_TARGET chooses*' --no-intro --no-version");
    };
    for (const std::string& t : kernels::simd_targets()) {
      CAPTURE(t);
      const auto r = run(t);
      CAPTURE(r.output);
      CHECK(r.status == 0);
      CHECK(r.output.find("APSIDES_SIMD_TARGET") == std::string::npos);  // no complaint
    }
    // A name this CPU cannot run: one line on stderr, the best target used.
    const auto r = run("bogus");
    CAPTURE(r.output);
    CHECK(r.status == 0);
    CHECK(r.output.find("apsides: APSIDES_SIMD_TARGET=bogus: not a target this binary and CPU can run") !=
          std::string::npos);
  }
}
