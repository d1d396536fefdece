// Internal to src/kernels: the branch-free Kepler solve that the batch kernels share.
// Included only by files compiled with APSIDES_KERNEL_FLAGS, so the inline definitions
// never meet a copy compiled with other flags.
//
// Method. M is reduced to m in [-pi, pi]; the solution is odd in m, so the work is on
// |m| in [0, pi]. Markley (1995, Celest. Mech. Dyn. Astron. 63, 101) gives a starter E0
// from a Pade approximation of sin E and the root of a cubic (his Eqs. 5-20, one cbrt
// and one sqrt), then one fifth-order correction d (his Eqs. 21-25, "delta_15"). One
// sin/cos pair is evaluated, at E0; sin E and cos E at E = E0 + d follow by angle
// addition with short Taylor series of sin d and cos d.
//
// Speed. Each call into the vector math library spills every vector register, and one
// loop holding the whole chain (cbrt -> sin -> cos -> three divisions) runs at the
// latency of that chain. So a block of points goes through the stages one loop at a
// time (starter polynomial, cbrt, starter end, sin, cos, correction), each loop
// throughput-bound; the block's temporaries stay in L1.
#pragma once

#include <cmath>
#include <cstddef>

namespace apsides::kernels::detail {

inline constexpr double kPi = 3.14159265358979323846;
inline constexpr double kHalfPi = 1.57079632679489661923;
inline constexpr double kTwoPi = 6.28318530717958647692;
inline constexpr double kInvTwoPi = 0.15915494309189533577;

inline constexpr std::size_t kBlock = 256;

// Reduces any finite M to [-pi, pi]. (For |M| beyond ~1e9 rad the double M itself is
// coarser than 1e-7 rad, so the result is finite but carries that input rounding.)
#if defined(__FMA__) && defined(__SSE4_1__)
// 2 pi = kTwoPi + kTwoPiLow to 1e-32. With fused multiply-adds each step is exact up to
// one rounding of a number <= pi, so k turns cost ~2e-16 rad instead of k * 2.4e-16 rad
// (which the factor 1/(1 - e cos E) would enlarge up to 1000x at e = 0.999).
inline constexpr double kTwoPiLow = 2.4492935982947064e-16;
inline double reduce_symmetric(double M) {
  const double k = std::nearbyint(M * kInvTwoPi);
  return std::fma(-k, kTwoPiLow, std::fma(-k, kTwoPi, M));
}
#elif defined(__SSE4_1__)
inline double reduce_symmetric(double M) { return M - kTwoPi * std::nearbyint(M * kInvTwoPi); }
#else
// Baseline x86-64 (SSE2) has no vector rounding instruction, and a nearbyint() call
// would stop the loop vectorising; int32 conversions do vectorise. Whole turns are
// removed in two steps (2^30 turns at a time, then the rest), then the result is
// folded into [-pi, pi].
inline double reduce_symmetric(double M) {
  constexpr double kChunk = 1073741824.0;  // 2^30 turns
  const double turns = M * kInvTwoPi;
  const double coarse_turns = std::fmax(std::fmin(turns * (1.0 / kChunk), 2.0e9), -2.0e9);
  const double coarse = kChunk * static_cast<double>(static_cast<int>(coarse_turns));
  const double k = coarse + static_cast<double>(static_cast<int>(turns - coarse));
  double m = M - kTwoPi * k;
  m -= m > kPi ? kTwoPi : 0.0;
  m += m < -kPi ? kTwoPi : 0.0;
  return m;
}
#endif

// Temporaries of one block. `m` is filled by the caller with reduced mean anomalies in
// [-pi, pi]; everything else is scratch.
struct KeplerBlock {
  alignas(64) double m[kBlock];
  alignas(64) double q[kBlock];
  alignas(64) double r[kBlock];
  alignas(64) double d[kBlock];
  alignas(64) double E0[kBlock];
  alignas(64) double s0[kBlock];
  alignas(64) double c0[kBlock];
};

// Solves the n <= kBlock points in `b.m` for eccentricity e[i] (kPerPointEcc) or e[0]
// (one e for all), then calls finish(i, E, sin E, cos E) with E in [-pi, pi] for each i.
// `finish` is inlined into the last loop, which stays vectorisable.
template <bool kPerPointEcc, class Finish>
inline void solve_block(KeplerBlock& b, const double* __restrict e, std::size_t n, Finish&& finish) {
  constexpr double pi2 = kPi * kPi;
  constexpr double inv_den = 1.0 / (pi2 - 6.0);
  const double e_one = e[0];
  const double inv_1pe_one = 1.0 / (1.0 + e_one);
  double* __restrict m = b.m;
  double* __restrict q = b.q;
  double* __restrict r = b.r;
  double* __restrict d = b.d;
  double* __restrict E0 = b.E0;
  double* __restrict s0 = b.s0;
  double* __restrict c0 = b.c0;

  // Markley's starter, Eqs. (9)-(20): alpha, d, q, r and the cube root's argument.
  for (std::size_t i = 0; i < n; ++i) {
    const double ei = kPerPointEcc ? e[i] : e_one;
    const double inv_1pe = kPerPointEcc ? 1.0 / (1.0 + ei) : inv_1pe_one;
    const double mi = std::fabs(m[i]);
    const double one_m_e = 1.0 - ei;
    const double alpha = (3.0 * pi2 + 1.6 * kPi * (kPi - mi) * inv_1pe) * inv_den;
    const double di = 3.0 * one_m_e + alpha * ei;
    const double qi = 2.0 * alpha * di * one_m_e - mi * mi;
    const double ri = 3.0 * alpha * di * (di - one_m_e) * mi + mi * mi * mi;
    q[i] = qi;
    r[i] = ri;
    d[i] = di;
    E0[i] = std::fabs(ri) + std::sqrt(qi * qi * qi + ri * ri);
  }
  for (std::size_t i = 0; i < n; ++i) E0[i] = std::cbrt(E0[i]);
  for (std::size_t i = 0; i < n; ++i) {
    const double w2 = E0[i] * E0[i];
    const double den = w2 * w2 + w2 * q[i] + q[i] * q[i];
    E0[i] = (2.0 * r[i] * w2 + std::fabs(m[i]) * den) / (den * d[i]);
  }
  // sin and cos in separate loops; cos E0 is written sin(pi/2 - E0) because GCC would
  // merge sin(x) and cos(x) into a scalar sincos() call it cannot vectorise. The
  // subtraction costs at most half an ulp of pi/2 (1.1e-16) in absolute error.
  for (std::size_t i = 0; i < n; ++i) s0[i] = std::sin(E0[i]);
  for (std::size_t i = 0; i < n; ++i) c0[i] = std::sin(kHalfPi - E0[i]);
  // Fifth-order correction, Eqs. (21)-(25), and angle addition. The starter is good to
  // 4.4e-4 rad (largest error over a grid of e in [0, 0.999], m in [0, pi]), so
  // |d5| < 5e-4 and the dropped series terms (d^7/5040, d^8/40320) are below 1e-26.
  for (std::size_t i = 0; i < n; ++i) {
    const double ei = kPerPointEcc ? e[i] : e_one;
    const double es = ei * s0[i], ec = ei * c0[i];
    const double f0 = E0[i] - es - std::fabs(m[i]);
    const double f1 = 1.0 - ec;
    const double d3 = -f0 * f1 / (f1 * f1 - 0.5 * f0 * es);
    const double d4 = -f0 / (f1 + d3 * (0.5 * es + d3 * ec * (1.0 / 6.0)));
    const double d5 =
        -f0 / (f1 + d4 * (0.5 * es + d4 * (ec * (1.0 / 6.0) - d4 * es * (1.0 / 24.0))));
    const double dd = d5 * d5;
    const double sin_d = d5 * (1.0 - dd * (1.0 / 6.0) * (1.0 - dd * (1.0 / 20.0)));
    const double cos_d = 1.0 - dd * 0.5 * (1.0 - dd * (1.0 / 12.0) * (1.0 - dd * (1.0 / 30.0)));
    const double sin_E = s0[i] * cos_d + c0[i] * sin_d;
    const double cos_E = c0[i] * cos_d - s0[i] * sin_d;
    finish(i, std::copysign(E0[i] + d5, m[i]), std::copysign(sin_E, m[i]), cos_E);
  }
}

}  // namespace apsides::kernels::detail
