// Internal to the kernels, compiled once per SIMD target (Highway's "-inl.h" convention:
// included after hwy/foreach_target.h, so the guard below toggles per target): the
// vector math the kernels use and the branch-free Kepler solve they share.
//
// Method. M is reduced to m in [-pi, pi]; the solution is odd in m, so the work is on
// |m| in [0, pi]. Markley (1995, Celest. Mech. Dyn. Astron. 63, 101) gives a starter E0
// from a Pade approximation of sin E and the root of a cubic (his Eqs. 5-20, one cube
// root and one square root), then one fifth-order correction d (his Eqs. 21-25,
// "delta_15"). One sin/cos pair is evaluated, at E0; sin E and cos E at E = E0 + d
// follow by angle addition with short Taylor series of sin d and cos d.
//
// Vector math. Measured per element on this project's (shared, loaded) AVX-512 machine,
// each library function called in a loop under Highway's AVX-512 / AVX2 targets, error
// against long double (sinl, cbrtl, logl):
//   Highway 1.0.3 Sin + Cos (two reductions)     1.19 / 2.26 ns   2.0-2.4 ulp
//   SLEEF 3.5 sincos u35 (one call, both)         0.80 / 1.42 ns   1.3 ulp
//   SLEEF 3.5 sincos u10                          1.18 / 2.25 ns   0.8 ulp
//   SLEEF 3.5 cbrt u35 / u10                      1.82 / 2.88 ns, 2.58 / 5.16 ns
//   inline cube root (below, full precision)      0.66 / 1.28 ns   0.7 ulp
//   Highway Log / SLEEF log u35                   0.52 / 1.11 ns, 0.40 / 1.48 ns  0.7 / 2.0 ulp
// Highway 1.0.3 has no cube root and no joint sincos. The Kepler solve needs sin/cos only
// on the starter's range [0, pi] and the cube root only to ~1e-6, so both are inline
// below, without division or table. sincos_batch, which takes any x, calls SLEEF's
// sincos on x86 (Highway's Sin/Cos on the other targets: scalar, NEON, SVE); the
// likelihood's log is Highway's Log (inline, the faster of the two on AVX2).
//
// Steps measured on AVX2 (ns per solve, Kepler batch, load 7-10 on 2 cores): SLEEF's
// sincos and a full-precision cube root in two loops 6.2; inline sin/cos and cube root
// 5.0; the starter without its per-point division 4.7; the starter in float on twice the
// lanes and every stage its own loop 3.9-4.0. The worst error against a long-double
// reference stays 2.7e-15 rad (double starter) / 3.6e-15 rad (float starter).
#if defined(APSIDES_KERNELS_KEPLER_CORE_INL_H_) == defined(HWY_TARGET_TOGGLE)
#ifdef APSIDES_KERNELS_KEPLER_CORE_INL_H_
#undef APSIDES_KERNELS_KEPLER_CORE_INL_H_
#else
#define APSIDES_KERNELS_KEPLER_CORE_INL_H_
#endif

#include <cstddef>
#include <cstdint>

#include "hwy/contrib/math/math-inl.h"
#include "hwy/highway.h"
#include "kernels/kepler_core.h"

HWY_BEFORE_NAMESPACE();
namespace apsides::kernels::HWY_NAMESPACE {
namespace hn = hwy::HWY_NAMESPACE;

using DF = hn::ScalableTag<double>;
using VF = hn::Vec<DF>;

// x^(1/3) to 1e-10 relative for finite normal x > 0: all the starter needs (its own
// error is 4.4e-4 rad, which the fifth-order correction removes; 1e-9 more changes
// nothing there). The argument lies in ~[1e-25, 1e4]. Estimate of x^(-1/3) from the
// bits: for x = 2^k (1 + f) the bit pattern is ~2^52 (k + 1023 + f), so the pattern of
// x^(-1/3) is ~(4/3) 1023 2^52 - bits(x) / 3, with the constant tuned for the log-linear
// error (3.4 % at most over every exponent). The division by 3 of the 64-bit pattern is
// x/4 + x/16 + ... by shifts (its truncation is far below the estimate's own error).
// Then two division-free Halley steps on r -> x^(-1/3): with h = 1 - x r^3,
// r <- r (1 + h/3 + 2 h^2/9), which cubes the error (3.4e-2, 2.0e-4, 3.6e-11), and
// y = x r^2 (7e-11; measured over 1e-40..1e40).
template <class D, class V = hn::Vec<D>>
HWY_INLINE V CbrtForStarter(D d, V x) {
  const hn::RebindToUnsigned<D> du;
  const auto b = hn::BitCast(du, x);
  auto t = hn::Add(hn::ShiftRight<2>(b), hn::ShiftRight<4>(b));
  t = hn::Add(t, hn::ShiftRight<4>(t));
  t = hn::Add(t, hn::ShiftRight<8>(t));
  t = hn::Add(t, hn::ShiftRight<16>(t));
  t = hn::Add(t, hn::ShiftRight<32>(t));
  V r = hn::BitCast(d, hn::Sub(hn::Set(du, uint64_t{0x553ef0ff289dd796}), t));
  const V one = hn::Set(d, 1.0), third = hn::Set(d, 1.0 / 3.0), two_ninths = hn::Set(d, 2.0 / 9.0);
  for (int k = 0; k < 2; ++k) {
    const V h = hn::NegMulAdd(hn::Mul(r, r), hn::Mul(r, x), one);
    r = hn::MulAdd(hn::Mul(r, h), hn::MulAdd(h, two_ninths, third), r);
  }
  return hn::Mul(x, hn::Mul(r, r));
}

// sin x for |x| <= pi/2 + 1e-3: the odd Taylor polynomial to degree 21 (truncation
// below 3e-19 there), Horner in x^2. Measured against long double sinl over that range:
// 2.3e-16 absolute and relative at most (one rounding of the last addition).
template <class D, class V = hn::Vec<D>>
HWY_INLINE V SinHalfPi(D d, V x) {
  const V x2 = hn::Mul(x, x);
  V p = hn::Set(d, -1.9572941063391263e-20);  // -1/21!
  p = hn::MulAdd(p, x2, hn::Set(d, 8.22063524662433e-18));     // 1/19!
  p = hn::MulAdd(p, x2, hn::Set(d, -2.8114572543455206e-15));  // -1/17!
  p = hn::MulAdd(p, x2, hn::Set(d, 7.647163731819816e-13));    // 1/15!
  p = hn::MulAdd(p, x2, hn::Set(d, -1.6059043836821613e-10));  // -1/13!
  p = hn::MulAdd(p, x2, hn::Set(d, 2.505210838544172e-08));    // 1/11!
  p = hn::MulAdd(p, x2, hn::Set(d, -2.7557319223985893e-06));  // -1/9!
  p = hn::MulAdd(p, x2, hn::Set(d, 0.0001984126984126984));    // 1/7!
  p = hn::MulAdd(p, x2, hn::Set(d, -0.008333333333333333));    // -1/5!
  p = hn::MulAdd(p, x2, hn::Set(d, 0.16666666666666666));      // 1/3! (sign below)
  return hn::NegMulAdd(hn::Mul(x, x2), p, x);
}

// sin x and cos x for x in [-1e-3, pi + 1e-3], the range of Markley's starter E0:
// sin x = S(x) below pi/2 and S(pi - x) above, cos x = S(pi/2 - x), with S the
// polynomial above and pi, pi/2 in two parts (the subtractions are exact or one
// rounding, 1.1e-16). No general range reduction, no call: this is what the solve
// spends on trigonometry (sincos_batch, for any x, calls SLEEF).
template <class D, class V = hn::Vec<D>>
HWY_INLINE void SinCosStarter(D d, V x, V& s, V& c) {
  const V pi_hi = hn::Set(d, 3.141592653589793), pi_lo = hn::Set(d, 1.2246467991473532e-16);
  const V half_pi_hi = hn::Set(d, 1.5707963267948966), half_pi_lo = hn::Set(d, 6.123233995736766e-17);
  const V a = hn::IfThenElse(hn::Gt(x, half_pi_hi), hn::Add(hn::Sub(pi_hi, x), pi_lo), x);
  s = SinHalfPi(d, a);
  c = SinHalfPi(d, hn::Add(hn::Sub(half_pi_hi, x), half_pi_lo));
}

// s = sin x, c = cos x (see the header comment for which library).
template <class D, class V = hn::Vec<D>>
HWY_INLINE void SinCos(D d, V x, V& s, V& c) {
#if HWY_ARCH_X86_64 && (HWY_TARGET == HWY_AVX3 || HWY_TARGET == HWY_AVX3_DL)
  const ApsidesSleefD8 r = Sleef_sincosd8_u35avx512f(x.raw);
  s = V{r.x};
  c = V{r.y};
#elif HWY_ARCH_X86_64 && HWY_TARGET == HWY_AVX2
  const ApsidesSleefD4 r = Sleef_sincosd4_u35avx2(x.raw);
  s = V{r.x};
  c = V{r.y};
#elif HWY_ARCH_X86_64 && HWY_TARGET == HWY_SSE4
  const ApsidesSleefD2 r = Sleef_sincosd2_u35sse4(x.raw);
  s = V{r.x};
  c = V{r.y};
#else
  s = hn::Sin(d, x);
  c = hn::Cos(d, x);
#endif
}

// Any finite M reduced to [-pi, pi] (up to one rounding): k = round(M / 2 pi) whole
// turns removed with 2 pi split in three parts (Cody & Waite), the first two with 32
// significant bits so that k C1 and k C2 are exact for |k| < 2^20 (|M| < 6.6e6 rad) with
// or without fused multiply-add; the result then carries two roundings of a number <= pi
// (4.4e-16 rad) on every target. (Beyond that the FMA targets stay as accurate and the
// others lose ~ulp(M), which is the precision of M itself there.)
template <class D, class V = hn::Vec<D>>
HWY_INLINE V ReduceSymmetric(D d, V M) {
  const V k = hn::Round(hn::Mul(M, hn::Set(d, detail::kInvTwoPi)));
  V m = hn::NegMulAdd(k, hn::Set(d, 6.2831853069365025), M);  // 0x1.921fb544p+2
  m = hn::NegMulAdd(k, hn::Set(d, 2.4308402025215864e-10), m);  // 0x1.0b4611a6p-32
  return hn::NegMulAdd(k, hn::Set(d, 8.089064995183803e-21), m);
}

// The cube root above in single precision, for the single-precision starter: the same
// estimate (constant tuned for float: 3.4 % at most) and two Halley steps, 3.3e-7.
template <class D, class V = hn::Vec<D>>
HWY_INLINE V CbrtForStarterF32(D d, V x) {
  const hn::RebindToUnsigned<D> du;
  const auto b = hn::BitCast(du, x);
  auto t = hn::Add(hn::ShiftRight<2>(b), hn::ShiftRight<4>(b));
  t = hn::Add(t, hn::ShiftRight<4>(t));
  t = hn::Add(t, hn::ShiftRight<8>(t));
  t = hn::Add(t, hn::ShiftRight<16>(t));
  V r = hn::BitCast(d, hn::Sub(hn::Set(du, uint32_t{0x54a2329f}), t));
  const V one = hn::Set(d, 1.0f), third = hn::Set(d, 1.0f / 3.0f), two_ninths = hn::Set(d, 2.0f / 9.0f);
  for (int k = 0; k < 2; ++k) {
    const V h = hn::NegMulAdd(hn::Mul(r, r), hn::Mul(r, x), one);
    r = hn::MulAdd(hn::Mul(r, h), hn::MulAdd(h, two_ninths, third), r);
  }
  return hn::Mul(x, hn::Mul(r, r));
}

// Markley's starter, Eqs. (9)-(20), with every quantity multiplied by the power of
// s = 1 + e that clears his 1/(1 + e) (no division per point): A = s alpha, D = s d,
// Q = s^2 q, R = s^3 r, W = s w, and E0 = (2 r w^2 + m den) / (den d) becomes
// (2 R W^2 + m s DEN) / (DEN D) with DEN = W^4 + W^2 Q + Q^2 = s^4 den. Written once for
// double and float lanes (T), in two halves (the cube root's argument; then E0) that
// the caller runs as separate loops. m = |reduced M|, u = 1 - e computed in double.
template <class D, class V = hn::Vec<D>>
HWY_INLINE void MarkleyCubic(D d, V m, V e, V u, V& Q, V& R, V& Dv, V& ms, V& arg) {
  using T = hn::TFromD<D>;
  constexpr double pi2 = detail::kPi * detail::kPi;
  const V s = hn::Add(hn::Set(d, T(1)), e), us = hn::Mul(u, s), three = hn::Set(d, T(3));
  // A = (3 pi^2 s + 1.6 pi (pi - m)) / (pi^2 - 6), D = 3 (1 - e) s + A e
  const V A = hn::MulAdd(hn::Set(d, T(3.0 * pi2 / (pi2 - 6.0))), s,
                         hn::Mul(hn::Set(d, T(1.6 * detail::kPi / (pi2 - 6.0))), hn::Sub(hn::Set(d, T(detail::kPi)), m)));
  Dv = hn::MulAdd(three, us, hn::Mul(A, e));
  const V AD = hn::Mul(A, Dv);
  ms = hn::Mul(m, s);
  const V ms2 = hn::Mul(ms, ms);
  Q = hn::MulSub(hn::Add(AD, AD), u, ms2);                                        // 2 A D u - (m s)^2
  R = hn::MulAdd(hn::Mul(hn::Mul(three, AD), hn::Sub(Dv, us)), m, hn::Mul(ms2, ms));  // 3 A D (D - u s) m + (m s)^3
  arg = hn::Add(hn::Abs(R), hn::Sqrt(hn::MulAdd(hn::Mul(Q, Q), Q, hn::Mul(R, R))));
}
template <class D, class V = hn::Vec<D>>
HWY_INLINE V MarkleyE0(D d, V Q, V R, V Dv, V ms, V arg) {
  using T = hn::TFromD<D>;
  V W;
  if constexpr (sizeof(T) == 4) {
    W = CbrtForStarterF32(d, arg);
  } else {
    W = CbrtForStarter(d, arg);
  }
  const V W2 = hn::Mul(W, W);
  const V DEN = hn::MulAdd(W2, hn::Add(W2, Q), hn::Mul(Q, Q));
  return hn::Div(hn::MulAdd(hn::Add(R, R), W2, hn::Mul(ms, DEN)), hn::Mul(DEN, Dv));
}

// Fills b.E0 with the starter for the n_pad points of b.m (and b.e when kPerPointEcc).
// The starter is only good to 4.4e-4 rad (the correction removes that), so where the
// target has vectors it runs in single precision on twice the lanes: the float rounding
// (1e-7) is nothing beside that, and it halves the starter's share of the solve. 1 - e
// is taken in double first, so e near 1 keeps its distance from 1. The scalar target,
// where float buys nothing, stays in double.
template <bool kPerPointEcc>
HWY_INLINE void Starter(detail::KeplerBlock& b, double e_one, std::size_t n_pad) {
  const DF d;
  const std::size_t L = hn::Lanes(d);
  const VF one = hn::Set(d, 1.0);
#if HWY_TARGET == HWY_SCALAR
  for (std::size_t i = 0; i < n_pad; i += L) {
    const VF ei = kPerPointEcc ? hn::Load(d, b.e + i) : hn::Set(d, e_one);
    VF Q, R, Dv, ms, arg;
    MarkleyCubic(d, hn::Abs(hn::Load(d, b.m + i)), ei, hn::Sub(one, ei), Q, R, Dv, ms, arg);
    hn::Store(MarkleyE0(d, Q, R, Dv, ms, arg), d, b.E0 + i);
  }
#else
  const hn::Repartition<float, DF> df;  // twice the lanes of d
  const hn::Rebind<float, DF> dh;       // L floats: half of df
  auto demote2 = [&](VF lo, VF hi) { return hn::Combine(df, hn::DemoteTo(dh, hi), hn::DemoteTo(dh, lo)); };
  // Two loops (the cube root's argument, then the cube root and E0): each chain is then
  // short enough for the out-of-order core to overlap several vectors.
  for (std::size_t i = 0; i < n_pad; i += 2 * L) {
    const auto m = hn::Abs(demote2(hn::Load(d, b.m + i), hn::Load(d, b.m + i + L)));
    const VF e_lo = kPerPointEcc ? hn::Load(d, b.e + i) : hn::Set(d, e_one);
    const VF e_hi = kPerPointEcc ? hn::Load(d, b.e + i + L) : hn::Set(d, e_one);
    hn::Vec<decltype(df)> Q, R, Dv, ms, arg;
    MarkleyCubic(df, m, demote2(e_lo, e_hi), demote2(hn::Sub(one, e_lo), hn::Sub(one, e_hi)), Q, R, Dv, ms, arg);
    hn::Store(Q, df, b.Qf + i);
    hn::Store(R, df, b.Rf + i);
    hn::Store(Dv, df, b.Df + i);
    hn::Store(ms, df, b.msf + i);
    hn::Store(arg, df, b.argf + i);
  }
  for (std::size_t i = 0; i < n_pad; i += 2 * L) {
    const auto E0 = MarkleyE0(df, hn::Load(df, b.Qf + i), hn::Load(df, b.Rf + i), hn::Load(df, b.Df + i),
                              hn::Load(df, b.msf + i), hn::Load(df, b.argf + i));
    hn::Store(hn::PromoteTo(d, hn::LowerHalf(dh, E0)), d, b.E0 + i);
    hn::Store(hn::PromoteTo(d, hn::UpperHalf(dh, E0)), d, b.E0 + i + L);
  }
#endif
}

// Solves the points of one block: b.m holds n_pad reduced mean anomalies (n_pad from
// PaddedCount, padding lanes filled with anything finite), b.e their eccentricities when
// kPerPointEcc, else every point has e_one. Calls finish(i, E, sin E, cos E) for the
// vector at offset i, with E in [-pi, pi].
//
// Five loops over the block, each throughput-bound: the starter's cubic and its root
// (Starter), sin/cos of E0, Halley's step d3, then d4, d5 and the angle addition. The
// whole chain per vector is long (a square root, a cube root and four divisions): in
// one loop the out-of-order core stalls on it, as separate loops it overlaps
// neighbouring vectors of each, and the intermediates pass through L1. (Measured on
// AVX2: one loop for the starter and one for sin/cos + correction took 6.2 ns per
// solve, these five 4.0-4.7.)
template <bool kPerPointEcc, class Finish>
HWY_INLINE void SolveBlock(detail::KeplerBlock& b, double e_one, std::size_t n_pad, Finish&& finish) {
  const DF d;
  const std::size_t L = hn::Lanes(d);
  const VF one = hn::Set(d, 1.0);
  const VF e_single = hn::Set(d, e_one);
  Starter<kPerPointEcc>(b, e_one, n_pad);
  for (std::size_t i = 0; i < n_pad; i += L) {
    VF s0, c0;
    SinCosStarter(d, hn::Load(d, b.E0 + i), s0, c0);
    hn::Store(s0, d, b.s0 + i);
    hn::Store(c0, d, b.c0 + i);
  }

  // Fifth-order correction, Eqs. (21)-(25), and angle addition. The starter is good to
  // 4.4e-4 rad (largest error over a grid of e in [0, 0.999], m in [0, pi]), so
  // |d5| < 5e-4 and the dropped series terms (d^7/5040, d^8/40320) are below 1e-26.
  const VF half = hn::Set(d, 0.5), sixth = hn::Set(d, 1.0 / 6.0), c24 = hn::Set(d, 1.0 / 24.0);
  const VF c20 = hn::Set(d, 1.0 / 20.0), c12 = hn::Set(d, 1.0 / 12.0), c30 = hn::Set(d, 1.0 / 30.0);
  // d3 (Halley's step, Eq. 22) in a loop of its own, then d4, d5 and the angle addition.
  for (std::size_t i = 0; i < n_pad; i += L) {
    const VF ei = kPerPointEcc ? hn::Load(d, b.e + i) : e_single;
    const VF es = hn::Mul(ei, hn::Load(d, b.s0 + i)), ec = hn::Mul(ei, hn::Load(d, b.c0 + i));
    const VF f0 = hn::Sub(hn::Sub(hn::Load(d, b.E0 + i), es), hn::Abs(hn::Load(d, b.m + i)));
    const VF f1 = hn::Sub(one, ec);
    hn::Store(hn::Div(hn::Mul(hn::Neg(f0), f1), hn::NegMulAdd(hn::Mul(half, f0), es, hn::Mul(f1, f1))), d, b.d3 + i);
  }
  for (std::size_t i = 0; i < n_pad; i += L) {
    const VF E0 = hn::Load(d, b.E0 + i);
    const VF s0 = hn::Load(d, b.s0 + i), c0 = hn::Load(d, b.c0 + i);
    const VF ei = kPerPointEcc ? hn::Load(d, b.e + i) : e_single;
    const VF m = hn::Load(d, b.m + i);
    const VF es = hn::Mul(ei, s0), ec = hn::Mul(ei, c0);
    const VF f0 = hn::Sub(hn::Sub(E0, es), hn::Abs(m));
    const VF f1 = hn::Sub(one, ec);
    const VF nf0 = hn::Neg(f0);
    const VF hes = hn::Mul(half, es), ec6 = hn::Mul(ec, sixth);
    const VF d3 = hn::Load(d, b.d3 + i);
    const VF d4 = hn::Div(nf0, hn::MulAdd(d3, hn::MulAdd(d3, ec6, hes), f1));
    const VF d5 = hn::Div(nf0, hn::MulAdd(d4, hn::MulAdd(d4, hn::NegMulAdd(d4, hn::Mul(es, c24), ec6), hes), f1));
    const VF dd = hn::Mul(d5, d5);
    const VF sin_d = hn::Mul(d5, hn::NegMulAdd(hn::Mul(dd, sixth), hn::NegMulAdd(dd, c20, one), one));
    const VF cos_d = hn::NegMulAdd(hn::Mul(dd, half),
                                   hn::NegMulAdd(hn::Mul(dd, c12), hn::NegMulAdd(dd, c30, one), one), one);
    const VF sin_E = hn::MulAdd(s0, cos_d, hn::Mul(c0, sin_d));
    const VF cos_E = hn::NegMulAdd(s0, sin_d, hn::Mul(c0, cos_d));
    finish(i, hn::CopySign(hn::Add(E0, d5), m), hn::CopySign(sin_E, m), cos_E);
  }
}

// n rounded up to what the solve takes at once: whole vectors, pairs of them where the
// starter runs in float (Starter).
HWY_INLINE std::size_t PaddedCount(std::size_t n) {
  const std::size_t step = (HWY_TARGET == HWY_SCALAR ? 1 : 2) * hn::Lanes(DF());
  return (n + step - 1) / step * step;
}

// src[i, i + L) for the vector at offset i of an array of n values; lanes past n get
// `pad`. Only the last vector of an array takes the slow way.
HWY_INLINE VF LoadPadded(DF d, const double* HWY_RESTRICT src, std::size_t i, std::size_t n, double pad) {
  if (HWY_LIKELY(i + hn::Lanes(d) <= n)) return hn::LoadU(d, src + i);
  HWY_ALIGN double buf[HWY_MAX_BYTES / sizeof(double)];
  for (std::size_t l = 0; l < hn::Lanes(d); ++l) buf[l] = i + l < n ? src[i + l] : pad;
  return hn::Load(d, buf);
}

// dst[i, min(i + L, n)) = the lanes of v.
HWY_INLINE void StorePadded(DF d, VF v, double* HWY_RESTRICT dst, std::size_t i, std::size_t n) {
  if (HWY_LIKELY(i + hn::Lanes(d) <= n)) return hn::StoreU(v, d, dst + i);
  HWY_ALIGN double buf[HWY_MAX_BYTES / sizeof(double)];
  hn::Store(v, d, buf);
  for (std::size_t l = 0; i + l < n; ++l) dst[i + l] = buf[l];
}

}  // namespace apsides::kernels::HWY_NAMESPACE
HWY_AFTER_NAMESPACE();

#endif  // include guard toggle
