// Target selection for the Highway kernels (see simd.h).
#include "simd.h"

#include <algorithm>
#include <cctype>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <mutex>

#include "hwy/highway.h"
#include "hwy/targets.h"

namespace apsides::kernels {
namespace {

std::string target_name(int64_t target) {
  switch (target) {
    case HWY_AVX3: return "avx512";
    case HWY_AVX2: return "avx2";
    case HWY_SSE4: return "sse4";
    case HWY_SSSE3: return "ssse3";
    case HWY_SCALAR: return "scalar";
    case HWY_EMU128: return "scalar";
    default: break;
  }
  std::string s = hwy::TargetName(target);
  std::transform(s.begin(), s.end(), s.begin(), [](unsigned char c) { return static_cast<char>(std::tolower(c)); });
  return s;
}

// Highway target bits compiled into the kernels (HWY_TARGETS of this translation
// unit, which has the kernels' compile definitions) that the CPU supports, best first
// (Highway's bits: a lower bit is a better target).
std::vector<int64_t> available_bits() {
  static const std::vector<int64_t> bits = [] {
    hwy::SetSupportedTargetsForTest(0);  // the CPU's real answer, no mock
    std::vector<int64_t> out;
    for (int64_t t = hwy::SupportedTargets() & HWY_TARGETS; t != 0; t &= t - 1) out.push_back(t & -t);
    return out;
  }();
  return bits;
}

int64_t bit_of(std::string_view name) {
  for (int64_t b : available_bits()) {
    if (target_name(b) == name) return b;
  }
  return 0;
}

// The start-up choice: 0 (best) or the bit APSIDES_SIMD_TARGET named.
int64_t startup_bit() {
  static const int64_t bit = [] {
    const char* v = std::getenv("APSIDES_SIMD_TARGET");
    if (v == nullptr || *v == '\0') return int64_t{0};
    const int64_t b = bit_of(v);
    if (b == 0) {
      std::string names;
      for (int64_t t : available_bits()) names += (names.empty() ? "" : ", ") + target_name(t);
      std::fprintf(stderr, "apsides: APSIDES_SIMD_TARGET=%s: not a target this binary and CPU can run (%s); using %s\n",
                   v, names.c_str(), target_name(available_bits().front()).c_str());
    }
    return b;
  }();
  return bit;
}

std::mutex& state_mutex() {
  static std::mutex m;
  return m;
}

// The forced bit in effect (0: none). Guarded by state_mutex().
int64_t& forced_bit() {
  static int64_t bit = 0;
  return bit;
}

void apply(int64_t bit) {
  forced_bit() = bit;
  // A mock of the supported set, which Highway offers for exactly this (tests of
  // every target); 0 removes the mock. Either way the next dispatch re-chooses.
  hwy::SetSupportedTargetsForTest(bit);
}

}  // namespace

void simd_init() {
  static const bool done = [] {
    const std::lock_guard<std::mutex> lock(state_mutex());
    apply(startup_bit());
    return true;
  }();
  (void)done;
}

std::vector<std::string> simd_targets() {
  std::vector<std::string> out;
  for (int64_t b : available_bits()) out.push_back(target_name(b));
  return out;
}

std::string simd_target() {
  simd_init();
  const std::lock_guard<std::mutex> lock(state_mutex());
  const int64_t b = forced_bit();
  return target_name(b != 0 ? b : available_bits().front());
}

bool set_simd_target(std::string_view name) {
  simd_init();
  const int64_t b = name.empty() ? startup_bit() : bit_of(name);
  if (!name.empty() && b == 0) return false;
  const std::lock_guard<std::mutex> lock(state_mutex());
  apply(b);
  return true;
}

}  // namespace apsides::kernels
