// The exact periodogram engine: sums over every point at every frequency.
//
// Compiled once per SIMD target by Highway (foreach_target.h) and dispatched at run time
// (kernels/simd.h); this file belongs to the kernels' object library for that reason.
//
// Layout chosen for speed: L consecutive frequencies sit in the L lanes of one vector
// (L = 8 with AVX-512, 4 with AVX2, 2 with SSE4 / NEON, 1 scalar), so the inner loop over
// points needs only broadcasts of per-point scalars. Each point keeps sqrt(w) cos/sin of
// its phase at the current L frequencies (so each of the six sums is one FMA per lane)
// and steps them by a rotation of L df (two multiplies and two FMAs per component).
// Where the target has 32 vector registers (AVX-512, NEON, SVE) two blocks of L
// frequencies are done per pass over the points, halving the loads and stores of the
// state; with 16 (AVX2, SSE4) one block, so the 6 sums, the state and the broadcasts stay
// in registers. Points are taken in tiles small enough for L1, so memory never grows
// with N x Nf. Every 4096 frequencies the state is re-anchored on directly computed
// sin/cos, which bounds the drift of the recurrence (4096 / L rotations: ~1e-13 at
// L = 8) -- and makes each chunk of 4096 frequencies independent of the others, so
// threads split chunks and the result is the same for any number of threads.
#include <algorithm>
#include <cmath>
#include <functional>
#include <numbers>
#include <thread>
#include <vector>

#include "kernels/simd.h"
#include "periodogram_internal.h"

#undef HWY_TARGET_INCLUDE
#define HWY_TARGET_INCLUDE "periodogram_exact.cpp"
#include "hwy/foreach_target.h"  // IWYU pragma: keep

#include "hwy/aligned_allocator.h"
#include "hwy/highway.h"

#ifndef APSIDES_PERIODOGRAM_EXACT_ONCE
#define APSIDES_PERIODOGRAM_EXACT_ONCE
namespace apsides::detail {
constexpr std::size_t kChunk = 4096;  // frequencies between re-anchors
constexpr std::size_t kTile = 192;    // points per tile (state: 2 vectors per point)
}  // namespace apsides::detail
#endif

HWY_BEFORE_NAMESPACE();
namespace apsides::detail::HWY_NAMESPACE {
namespace hn = hwy::HWY_NAMESPACE;
namespace {
using DF = hn::ScalableTag<double>;
using VF = hn::Vec<DF>;

// Blocks of L frequencies per pass over the points: 2 where 32 vector registers hold
// 12 sums + state, else 1.
#if HWY_TARGET == HWY_AVX3 || HWY_TARGET == HWY_AVX3_DL || HWY_ARCH_ARM_A64
constexpr std::size_t kUnroll = 2;
#else
constexpr std::size_t kUnroll = 1;
#endif

struct PointTables {
  hwy::AlignedFreeUniquePtr<double[]> lane_c, lane_s;  // sqrt(w) cos/sin(2 pi t l df), l < L, per point
  std::vector<double> rot_c, rot_s;                     // cos/sin(2 pi t L df)
  std::vector<double> sw, ysw;                          // sqrt(w), y sqrt(w)
};

PointTables MakeTables(const GlsData& d, double df, std::size_t L) {
  const std::size_t n = d.t.size();
  PointTables tb;
  tb.lane_c = hwy::AllocateAligned<double>(n * L);
  tb.lane_s = hwy::AllocateAligned<double>(n * L);
  tb.rot_c.resize(n);
  tb.rot_s.resize(n);
  tb.sw.resize(n);
  tb.ysw.resize(n);
  const double two_pi = 2.0 * std::numbers::pi;
  for (std::size_t i = 0; i < n; ++i) {
    tb.sw[i] = std::sqrt(d.w[i]);
    tb.ysw[i] = d.y[i] * tb.sw[i];
    for (std::size_t l = 0; l < L; ++l) {
      const double ph = two_pi * d.t[i] * (df * static_cast<double>(l));
      tb.lane_c[i * L + l] = tb.sw[i] * std::cos(ph);
      tb.lane_s[i * L + l] = tb.sw[i] * std::sin(ph);
    }
    const double phL = two_pi * d.t[i] * (df * static_cast<double>(L));
    tb.rot_c[i] = std::cos(phL);
    tb.rot_s[i] = std::sin(phL);
  }
  return tb;
}

// Adds the six sums of one block of L frequencies at offset k into `acc` (row stride
// `stride`): YC, YS, CC, CS and the group's C, S.
HWY_INLINE void AddTo(DF d, double* HWY_RESTRICT p, VF v) { hn::Store(hn::Add(hn::Load(d, p), v), d, p); }
HWY_INLINE void AddSums(DF d, double* HWY_RESTRICT acc, std::size_t stride, double* HWY_RESTRICT cg,
                        double* HWY_RESTRICT sg, std::size_t k, VF yc, VF ys, VF cc, VF cs, VF c, VF s) {
  AddTo(d, acc + k, yc);
  AddTo(d, acc + stride + k, ys);
  AddTo(d, acc + 2 * stride + k, cc);
  AddTo(d, acc + 3 * stride + k, cs);
  AddTo(d, cg + k, c);
  AddTo(d, sg + k, s);
}

// Sums of one chunk of `nfc` frequencies (multiple of kUnroll L) starting at fa, added
// into `acc` (layout q * stride + k as in GlsSums).
void ChunkSums(const GlsData& d, const PointTables& tb, double fa, std::size_t nfc, double* HWY_RESTRICT acc,
               std::size_t stride, double* HWY_RESTRICT st_c, double* HWY_RESTRICT st_s) {
  const DF df;
  const std::size_t L = hn::Lanes(df);
  const double two_pi = 2.0 * std::numbers::pi;
  const std::size_t m = d.n_groups();
  for (std::size_t g = 0; g < m; ++g) {
    double* cg = acc + (4 + 2 * g) * stride;
    double* sg = acc + (5 + 2 * g) * stride;
    for (std::size_t a = d.group_begin[g]; a < d.group_begin[g + 1]; a += kTile) {
      const std::size_t b = std::min(a + kTile, d.group_begin[g + 1]);
      const std::size_t nt = b - a;
      for (std::size_t j = 0; j < nt; ++j) {
        const double ph = two_pi * d.t[a + j] * fa;
        const VF ca = hn::Set(df, std::cos(ph)), sa = hn::Set(df, std::sin(ph));
        const VF lc = hn::Load(df, tb.lane_c.get() + (a + j) * L), ls = hn::Load(df, tb.lane_s.get() + (a + j) * L);
        hn::Store(hn::NegMulAdd(sa, ls, hn::Mul(ca, lc)), df, st_c + j * L);
        hn::Store(hn::MulAdd(sa, lc, hn::Mul(ca, ls)), df, st_s + j * L);
      }
      const double* w = tb.sw.data() + a;
      const double* y = tb.ysw.data() + a;
      const double* rc = tb.rot_c.data() + a;
      const double* rs = tb.rot_s.data() + a;
      for (std::size_t k0 = 0; k0 < nfc; k0 += kUnroll * L) {
        VF c0 = hn::Zero(df), s0 = c0, yc0 = c0, ys0 = c0, cc0 = c0, cs0 = c0;
        VF c1 = c0, s1 = c0, yc1 = c0, ys1 = c0, cc1 = c0, cs1 = c0;
        // State a + i b = sqrt(w) e^{i theta}: every sum is then one FMA per lane,
        // sum w c = sum sqrt(w) a, sum w y c = sum (y sqrt(w)) a, sum w c^2 = sum a^2 ...
        for (std::size_t j = 0; j < nt; ++j) {
          const VF wv = hn::Set(df, w[j]), yv = hn::Set(df, y[j]);
          const VF rcv = hn::Set(df, rc[j]), rsv = hn::Set(df, rs[j]);
          const VF c = hn::Load(df, st_c + j * L), s = hn::Load(df, st_s + j * L);
          c0 = hn::MulAdd(wv, c, c0);
          s0 = hn::MulAdd(wv, s, s0);
          yc0 = hn::MulAdd(yv, c, yc0);
          ys0 = hn::MulAdd(yv, s, ys0);
          cc0 = hn::MulAdd(c, c, cc0);
          cs0 = hn::MulAdd(c, s, cs0);
          VF cn = hn::NegMulAdd(s, rsv, hn::Mul(c, rcv));
          VF sn = hn::MulAdd(c, rsv, hn::Mul(s, rcv));
          if constexpr (kUnroll == 2) {
            c1 = hn::MulAdd(wv, cn, c1);
            s1 = hn::MulAdd(wv, sn, s1);
            yc1 = hn::MulAdd(yv, cn, yc1);
            ys1 = hn::MulAdd(yv, sn, ys1);
            cc1 = hn::MulAdd(cn, cn, cc1);
            cs1 = hn::MulAdd(cn, sn, cs1);
            const VF cn2 = hn::NegMulAdd(sn, rsv, hn::Mul(cn, rcv));
            sn = hn::MulAdd(cn, rsv, hn::Mul(sn, rcv));
            cn = cn2;
          }
          hn::Store(cn, df, st_c + j * L);
          hn::Store(sn, df, st_s + j * L);
        }
        AddSums(df, acc, stride, cg, sg, k0, yc0, ys0, cc0, cs0, c0, s0);
        if constexpr (kUnroll == 2) AddSums(df, acc, stride, cg, sg, k0 + L, yc1, ys1, cc1, cs1, c1, s1);
      }
    }
  }
}

}  // namespace

// Power (and window) of the chunks [c_begin, c_end) of the grid f0 + k df, k < nf.
void ExactChunks(const GlsData& d, double f0, double df, std::size_t nf, std::size_t c_begin, std::size_t c_end,
                 double* power, double* window) {
  const std::size_t L = hn::Lanes(DF());
  const std::size_t step = kUnroll * L;
  const std::size_t stride = (kChunk + step - 1) / step * step;
  const PointTables tb = MakeTables(d, df, L);
  const std::size_t m = d.n_groups();
  const std::size_t nq = 4 + 2 * m;
  auto acc = hwy::AllocateAligned<double>(nq * stride);
  auto st_c = hwy::AllocateAligned<double>(kTile * L);
  auto st_s = hwy::AllocateAligned<double>(kTile * L);
  std::vector<const double*> cg(m), sg(m);
  for (std::size_t c = c_begin; c < c_end; ++c) {
    const std::size_t k_begin = c * kChunk;
    const std::size_t count = std::min(kChunk, nf - k_begin);
    const std::size_t nfc = (count + step - 1) / step * step;
    std::fill(acc.get(), acc.get() + nq * stride, 0.0);
    ChunkSums(d, tb, f0 + df * static_cast<double>(k_begin), nfc, acc.get(), stride, st_c.get(), st_s.get());
    for (std::size_t g = 0; g < m; ++g) {
      cg[g] = acc.get() + (4 + 2 * g) * stride;
      sg[g] = acc.get() + (5 + 2 * g) * stride;
    }
    sums_to_power(d, acc.get(), acc.get() + stride, acc.get() + 2 * stride, acc.get() + 3 * stride, cg.data(),
                  sg.data(), count, power + k_begin, window ? window + k_begin : nullptr);
  }
}

}  // namespace apsides::detail::HWY_NAMESPACE
HWY_AFTER_NAMESPACE();

#if HWY_ONCE
namespace apsides::detail {
HWY_EXPORT(ExactChunks);

int resolve_threads(int threads) {
  if (threads > 0) return threads;
  const unsigned hw = std::thread::hardware_concurrency();
  return hw == 0 ? 1 : static_cast<int>(hw);
}

void sums_to_power(const GlsData& d, const double* yc, const double* ys, const double* cc,
                   const double* cs, const double* const* cg, const double* const* sg,
                   std::size_t n, double* power, double* window) {
  const std::size_t m = d.n_groups();
  for (std::size_t k = 0; k < n; ++k) {
    double cch = cc[k], ssh = 1.0 - cc[k], csh = cs[k];
    double ct = 0.0, stt = 0.0;
    for (std::size_t g = 0; g < m; ++g) {
      const double c = cg[g][k], s = sg[g][k], wg = d.group_weight[g];
      cch -= c * c / wg;
      ssh -= s * s / wg;
      csh -= c * s / wg;
      ct += c;
      stt += s;
    }
    const double den = cch * ssh - csh * csh;
    const double a = yc[k], b = ys[k];
    double p = 0.0;
    if (den > 0.0 && d.yy > 0.0) p = (ssh * a * a + cch * b * b - 2.0 * csh * a * b) / (d.yy * den);
    power[k] = std::clamp(p, 0.0, 1.0);
    if (window) window[k] = ct * ct + stt * stt;
  }
}

void exact_power(const GlsData& d, double f0, double df, std::size_t nf, int threads,
                 double* power, double* window) {
  if (nf == 0) return;
  kernels::simd_init();
  // One target for the whole call, whichever thread runs a chunk.
  const auto chunks = HWY_DYNAMIC_DISPATCH(ExactChunks);
  const std::size_t n_chunks = (nf + kChunk - 1) / kChunk;
  const int nt = std::max(1, std::min<int>(resolve_threads(threads), static_cast<int>(n_chunks)));
  if (nt == 1) {
    chunks(d, f0, df, nf, 0, n_chunks, power, window);
    return;
  }
  std::vector<std::thread> pool;
  for (int i = 0; i < nt; ++i) {
    const std::size_t a = n_chunks * static_cast<std::size_t>(i) / static_cast<std::size_t>(nt);
    const std::size_t b = n_chunks * static_cast<std::size_t>(i + 1) / static_cast<std::size_t>(nt);
    pool.emplace_back(chunks, std::cref(d), f0, df, nf, a, b, power, window);
  }
  for (auto& th : pool) th.join();
}

double direct_power(const GlsData& d, double f) {
  const std::size_t m = d.n_groups();
  std::vector<double> cg(m, 0.0), sg(m, 0.0);
  double yc = 0, ys = 0, cc = 0, cs = 0;
  const double two_pi = 2.0 * std::numbers::pi;
  for (std::size_t g = 0; g < m; ++g) {
    for (std::size_t i = d.group_begin[g]; i < d.group_begin[g + 1]; ++i) {
      const double ph = two_pi * d.t[i] * f;
      const double c = std::cos(ph), s = std::sin(ph), w = d.w[i];
      cg[g] += w * c;
      sg[g] += w * s;
      yc += w * d.y[i] * c;
      ys += w * d.y[i] * s;
      cc += w * c * c;
      cs += w * c * s;
    }
  }
  std::vector<const double*> pc(m), ps(m);
  for (std::size_t g = 0; g < m; ++g) {
    pc[g] = &cg[g];
    ps[g] = &sg[g];
  }
  double p = 0.0;
  sums_to_power(d, &yc, &ys, &cc, &cs, pc.data(), ps.data(), 1, &p, nullptr);
  return p;
}

}  // namespace apsides::detail
#endif  // HWY_ONCE
