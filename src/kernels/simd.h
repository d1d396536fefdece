// Internal: which SIMD instruction set the numerical kernels run on.
//
// The kernels (Kepler solve, likelihood, exact periodogram) are compiled once per
// instruction set with Google Highway (foreach_target.h) and dispatched at run time
// (HWY_DYNAMIC_DISPATCH) to the best one this CPU supports. One binary therefore runs
// AVX-512 on a machine that has it, AVX2 + FMA on one that does not, SSE4 on older x86-64
// and plain scalar code anywhere (NEON / SVE on 64-bit ARM).
//
// Names used here, best first: "avx512" (Highway's AVX3: AVX-512 F/VL/DQ/BW), "avx2"
// (AVX2 + FMA + BMI2 + F16C), "sse4" (SSE4.2 + CLMUL + AES), "scalar" (no SIMD), and on
// ARM "sve2", "sve", "neon". Any other Highway target gets its Highway name in lower case.
//
// Restricting the targets. The environment variable APSIDES_SIMD_TARGET, read once at
// the first kernel call (or the first call of a function below), makes the process use
// that target instead of the best one: APSIDES_SIMD_TARGET=avx2 on an AVX-512 machine
// measures what an AVX2-only CPU would get. A name this CPU cannot run, or an unknown
// one, is reported on stderr (one line) and the best target is used. Tests and
// benchmarks switch targets in-process with set_simd_target().
#pragma once

#include <string>
#include <string_view>
#include <vector>

namespace apsides::kernels {

// Targets compiled into this binary that this CPU can run, best first. Never empty
// (the scalar fallback is always there).
std::vector<std::string> simd_targets();

// The target the kernels use now.
std::string simd_target();

// Makes every kernel use `name` (one of simd_targets()) from the next call on; "" goes
// back to the start-up choice (APSIDES_SIMD_TARGET if it was valid, else the best).
// Returns false and changes nothing if `name` is not available. Not thread-safe: call
// it while no kernel runs (tests, benchmarks, start of main).
bool set_simd_target(std::string_view name);

// Reads APSIDES_SIMD_TARGET the first time it is called; every kernel entry point
// calls it (a function-local static: one predictable branch per call afterwards).
void simd_init();

}  // namespace apsides::kernels
