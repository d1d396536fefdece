// The exact periodogram engine: sums over every point at every frequency.
//
// Layout chosen for speed: 8 consecutive frequencies sit in the 8 lanes of one vector
// (GCC vector extension; AVX-512 on this machine, two AVX2 halves or SSE elsewhere), so
// the inner loop over points needs only broadcasts of per-point scalars. Each point keeps
// sqrt(w) cos/sin of its phase at the current 8 frequencies (so each of the six sums is
// one FMA per lane) and steps them by a rotation of 8 df (two multiplies and two FMAs per
// component). Two blocks of 8 frequencies are done
// per pass over the points to halve the loads and stores of the state. Points are taken in
// tiles small enough for L1, so memory never grows with N x Nf. Every 4096 frequencies the
// state is re-anchored on directly computed sin/cos, which bounds the drift of the
// recurrence (about 512 rotations: ~1e-13) -- and makes each chunk of 4096 frequencies
// independent of the others, so threads split chunks and the result is the same for any
// number of threads.
#include <algorithm>
#include <cmath>
#include <numbers>
#include <thread>
#include <vector>

#include "periodogram_internal.h"

namespace apsides::detail {
namespace {

constexpr int kLanes = 8;
using V = double __attribute__((vector_size(kLanes * sizeof(double))));
constexpr std::size_t kChunk = 4096;   // frequencies between re-anchors; multiple of 16
constexpr std::size_t kTile = 192;     // points per tile (state: 2 x 64 B per point)

inline V splat(double x) { return V{} + x; }

struct PointTables {
  std::vector<V> lane_c, lane_s;   // sqrt(w) cos/sin(2 pi t l df), l = 0..7
  std::vector<double> rot_c, rot_s;  // cos/sin(2 pi t 8 df)
  std::vector<double> sw, ysw;       // sqrt(w), y sqrt(w)
};

PointTables make_tables(const GlsData& d, double df) {
  const std::size_t n = d.t.size();
  PointTables tb;
  tb.lane_c.resize(n);
  tb.lane_s.resize(n);
  tb.rot_c.resize(n);
  tb.rot_s.resize(n);
  tb.sw.resize(n);
  tb.ysw.resize(n);
  const double two_pi = 2.0 * std::numbers::pi;
  for (std::size_t i = 0; i < n; ++i) {
    tb.sw[i] = std::sqrt(d.w[i]);
    tb.ysw[i] = d.y[i] * tb.sw[i];
    for (int l = 0; l < kLanes; ++l) {
      const double ph = two_pi * d.t[i] * (df * l);
      tb.lane_c[i][l] = tb.sw[i] * std::cos(ph);
      tb.lane_s[i][l] = tb.sw[i] * std::sin(ph);
    }
    const double ph8 = two_pi * d.t[i] * (df * kLanes);
    tb.rot_c[i] = std::cos(ph8);
    tb.rot_s[i] = std::sin(ph8);
  }
  return tb;
}

// Sums of one chunk of `nfc` frequencies (multiple of 16) starting at fa, added into
// `acc` (layout q * kChunk + k as in GlsSums).
void chunk_sums(const GlsData& d, const PointTables& tb, double fa, std::size_t nfc, double* acc,
                V* st_c, V* st_s) {
  const double two_pi = 2.0 * std::numbers::pi;
  const std::size_t m = d.n_groups();
  for (std::size_t g = 0; g < m; ++g) {
    double* cg = acc + (4 + 2 * g) * kChunk;
    double* sg = acc + (5 + 2 * g) * kChunk;
    for (std::size_t a = d.group_begin[g]; a < d.group_begin[g + 1]; a += kTile) {
      const std::size_t b = std::min(a + kTile, d.group_begin[g + 1]);
      const std::size_t nt = b - a;
      for (std::size_t j = 0; j < nt; ++j) {
        const double ph = two_pi * d.t[a + j] * fa;
        const double ca = std::cos(ph), sa = std::sin(ph);
        st_c[j] = ca * tb.lane_c[a + j] - sa * tb.lane_s[a + j];
        st_s[j] = sa * tb.lane_c[a + j] + ca * tb.lane_s[a + j];
      }
      const double* w = tb.sw.data() + a;
      const double* y = tb.ysw.data() + a;
      const double* rc = tb.rot_c.data() + a;
      const double* rs = tb.rot_s.data() + a;
      for (std::size_t k0 = 0; k0 < nfc; k0 += 2 * kLanes) {
        V c0{}, s0{}, yc0{}, ys0{}, cc0{}, cs0{};
        V c1{}, s1{}, yc1{}, ys1{}, cc1{}, cs1{};
        // State a + i b = sqrt(w) e^{i theta}: every sum is then one FMA per lane,
        // sum w c = sum sqrt(w) a, sum w y c = sum (y sqrt(w)) a, sum w c^2 = sum a^2 ...
        for (std::size_t j = 0; j < nt; ++j) {
          const V wv = splat(w[j]), yv = splat(y[j]);
          const V rcv = splat(rc[j]), rsv = splat(rs[j]);
          const V c = st_c[j], s = st_s[j];
          c0 += wv * c;
          s0 += wv * s;
          yc0 += yv * c;
          ys0 += yv * s;
          cc0 += c * c;
          cs0 += c * s;
          const V cn = c * rcv - s * rsv;
          const V sn = s * rcv + c * rsv;
          c1 += wv * cn;
          s1 += wv * sn;
          yc1 += yv * cn;
          ys1 += yv * sn;
          cc1 += cn * cn;
          cs1 += cn * sn;
          st_c[j] = cn * rcv - sn * rsv;
          st_s[j] = sn * rcv + cn * rsv;
        }
        for (int l = 0; l < kLanes; ++l) {
          const std::size_t k = k0 + l, k2 = k0 + kLanes + l;
          acc[0 * kChunk + k] += yc0[l];
          acc[1 * kChunk + k] += ys0[l];
          acc[2 * kChunk + k] += cc0[l];
          acc[3 * kChunk + k] += cs0[l];
          cg[k] += c0[l];
          sg[k] += s0[l];
          acc[0 * kChunk + k2] += yc1[l];
          acc[1 * kChunk + k2] += ys1[l];
          acc[2 * kChunk + k2] += cc1[l];
          acc[3 * kChunk + k2] += cs1[l];
          cg[k2] += c1[l];
          sg[k2] += s1[l];
        }
      }
    }
  }
}

}  // namespace

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
  const PointTables tb = make_tables(d, df);
  const std::size_t n_chunks = (nf + kChunk - 1) / kChunk;
  const int nt = std::max(1, std::min<int>(resolve_threads(threads), static_cast<int>(n_chunks)));
  const std::size_t m = d.n_groups();
  const std::size_t nq = 4 + 2 * m;
  auto work = [&](std::size_t c_begin, std::size_t c_end) {
    std::vector<double> acc(nq * kChunk);
    std::vector<V> st_c(kTile), st_s(kTile);
    std::vector<const double*> cg(m), sg(m);
    for (std::size_t c = c_begin; c < c_end; ++c) {
      const std::size_t k_begin = c * kChunk;
      const std::size_t count = std::min(kChunk, nf - k_begin);
      const std::size_t nfc = (count + 2 * kLanes - 1) / (2 * kLanes) * (2 * kLanes);
      std::fill(acc.begin(), acc.end(), 0.0);
      chunk_sums(d, tb, f0 + df * static_cast<double>(k_begin), nfc, acc.data(), st_c.data(), st_s.data());
      for (std::size_t g = 0; g < m; ++g) {
        cg[g] = acc.data() + (4 + 2 * g) * kChunk;
        sg[g] = acc.data() + (5 + 2 * g) * kChunk;
      }
      sums_to_power(d, acc.data(), acc.data() + kChunk, acc.data() + 2 * kChunk, acc.data() + 3 * kChunk,
                    cg.data(), sg.data(), count, power + k_begin, window ? window + k_begin : nullptr);
    }
  };
  if (nt == 1) {
    work(0, n_chunks);
    return;
  }
  std::vector<std::thread> pool;
  for (int i = 0; i < nt; ++i) {
    const std::size_t a = n_chunks * static_cast<std::size_t>(i) / static_cast<std::size_t>(nt);
    const std::size_t b = n_chunks * static_cast<std::size_t>(i + 1) / static_cast<std::size_t>(nt);
    pool.emplace_back(work, a, b);
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
