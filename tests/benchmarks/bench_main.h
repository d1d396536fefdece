// main() of the kernel benchmark programs: Google Benchmark's own, plus
//   --apsides_simd_targets   print the SIMD targets this binary and CPU can run, best
//                            first, one a line, and exit (scripts/bench asks this);
// and the target in use (APSIDES_SIMD_TARGET, else the best) in the JSON context
// ("simd_target", "simd_targets"), so every result file says what it measured.
#pragma once

#include <benchmark/benchmark.h>

#include <cstdio>
#include <cstring>
#include <string>

#include "kernels/simd.h"

namespace apsides::bench {
inline int run_main(int argc, char** argv) {
  for (int i = 1; i < argc; ++i) {
    if (std::strcmp(argv[i], "--apsides_simd_targets") == 0) {
      for (const auto& t : kernels::simd_targets()) std::printf("%s\n", t.c_str());
      return 0;
    }
  }
  std::string all;
  for (const auto& t : kernels::simd_targets()) all += (all.empty() ? "" : " ") + t;
  benchmark::AddCustomContext("simd_target", kernels::simd_target());
  benchmark::AddCustomContext("simd_targets", all);
  benchmark::Initialize(&argc, argv);
  if (benchmark::ReportUnrecognizedArguments(argc, argv)) return 1;
  benchmark::RunSpecifiedBenchmarks();
  benchmark::Shutdown();
  return 0;
}
}  // namespace apsides::bench

#define APSIDES_BENCHMARK_MAIN() \
  int main(int argc, char** argv) { return apsides::bench::run_main(argc, argv); }
