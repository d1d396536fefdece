// Internal to the kernels: what the per-target code (kepler_core-inl.h) shares and is
// compiled once: constants, the block of temporaries, and the declarations of the SLEEF
// vector functions the x86 targets call.
#pragma once

#include <cstddef>

#if defined(__x86_64__) || defined(__i386__)
#include <immintrin.h>  // __m128d, __m256d, __m512d: GCC and Clang declare them for any -m flags
#endif

namespace apsides::kernels::detail {

inline constexpr double kPi = 3.14159265358979323846;
inline constexpr double kTwoPi = 6.28318530717958647692;
inline constexpr double kInvTwoPi = 0.15915494309189533577;

// Points per block: the stages of one block keep their temporaries in L1. A multiple
// of every vector length (up to 2048-bit SVE).
inline constexpr std::size_t kBlock = 256;

// Temporaries of one block: `m` holds the reduced mean anomalies in [-pi, pi] and `e`
// the eccentricities (per-point solves), both padded to whole vectors; the rest is what
// the stages of the solve (kepler_core-inl.h, SolveBlock) pass between them.
struct KeplerBlock {
  // Each array is followed by kSkew unused doubles, so that the arrays do not sit at
  // multiples of 4 KiB from each other (loads would then wait on unrelated stores).
  static constexpr std::size_t kSkew = 8;
  alignas(64) double m[kBlock + kSkew];
  alignas(64) double e[kBlock + kSkew];
  alignas(64) double E0[kBlock + kSkew];
  alignas(64) double d3[kBlock + kSkew];
  alignas(64) double s0[kBlock + kSkew];
  alignas(64) double c0[kBlock + kSkew];
  // The starter's intermediates in single precision (kepler_core-inl.h, Starter).
  alignas(64) float Qf[kBlock + 2 * kSkew];
  alignas(64) float Rf[kBlock + 2 * kSkew];
  alignas(64) float Df[kBlock + 2 * kSkew];
  alignas(64) float msf[kBlock + 2 * kSkew];
  alignas(64) float argf[kBlock + 2 * kSkew];
};

}  // namespace apsides::kernels::detail

#if defined(__x86_64__)
// SLEEF 3.5 (Debian libsleef-dev), one function per instruction set. <sleef.h> declares
// these only when the translation unit itself is compiled for AVX / AVX-512, which the
// kernels are not (each Highway target enables its instruction set per function), so
// they are declared here with the layout <sleef.h> gives them.
extern "C" {
struct ApsidesSleefD2 { __m128d x, y; };
struct ApsidesSleefD4 { __m256d x, y; };
struct ApsidesSleefD8 { __m512d x, y; };
ApsidesSleefD2 Sleef_sincosd2_u35sse4(__m128d);
ApsidesSleefD4 Sleef_sincosd4_u35avx2(__m256d);
ApsidesSleefD8 Sleef_sincosd8_u35avx512f(__m512d);
}
#endif
