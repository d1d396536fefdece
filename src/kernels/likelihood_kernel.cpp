// Velocity and likelihood kernels, compiled once per SIMD target by Highway and
// dispatched at run time (simd.h). Accuracy against the scalar reference is proved under
// every target the CPU runs in tests/keplerian_model_test.cpp.
#include <algorithm>
#include <cmath>
#include <cstddef>

#include "kernels/kepler_core.h"
#include "kernels/kernels.h"
#include "kernels/simd.h"

#undef HWY_TARGET_INCLUDE
#define HWY_TARGET_INCLUDE "kernels/likelihood_kernel.cpp"
#include "hwy/foreach_target.h"  // IWYU pragma: keep

#include "hwy/highway.h"
#include "kernels/kepler_core-inl.h"

#ifndef APSIDES_LIKELIHOOD_KERNEL_ONCE
#define APSIDES_LIKELIHOOD_KERNEL_ONCE
namespace apsides::kernels::detail {
constexpr double kLn2Pi = 1.83787706640934548356;

// Coefficients of v = (A (cos E - e) - B sin E) / (1 - e cos E) + C, which is
// K [cos(nu + w) + e cos w] with cos nu = (cos E - e)/(1 - e cos E) and
// sin nu = sqrt(1 - e^2) sin E / (1 - e cos E): one division per point, no true anomaly.
struct Prepared {
  double n, M0, e, A, B, C;
};

inline Prepared prepare(const KeplerTerm& p, double sign) {
  const double cw = std::cos(p.omega_rad), sw = std::sin(p.omega_rad);
  const double K = sign * p.semi_amplitude_m_s, e = p.ecc;
  return {p.mean_motion_rad_per_day, p.mean_anomaly_at_zero, e, K * cw, K * std::sqrt((1.0 - e) * (1.0 + e)) * sw,
          K * e * cw};
}
}  // namespace apsides::kernels::detail
#endif

HWY_BEFORE_NAMESPACE();
namespace apsides::kernels::HWY_NAMESPACE {
namespace {

// out[i] += v_i of one planet (already signed in `p`), a block of kBlock points at a time.
void Accumulate(const double* HWY_RESTRICT t, std::size_t n, const detail::Prepared& p,
                double* HWY_RESTRICT out, detail::KeplerBlock& b) {
  const DF d;
  const std::size_t L = hn::Lanes(d);
  const VF e = hn::Set(d, p.e), A = hn::Set(d, p.A), B = hn::Set(d, p.B), C = hn::Set(d, p.C);
  const VF mean_motion = hn::Set(d, p.n), M0 = hn::Set(d, p.M0), one = hn::Set(d, 1.0);
  for (std::size_t start = 0; start < n; start += detail::kBlock) {
    const std::size_t nb = std::min(detail::kBlock, n - start);
    const std::size_t n_pad = PaddedCount(nb);
    for (std::size_t i = 0; i < n_pad; i += L) {
      const VF ti = LoadPadded(d, t + start, i, nb, 0.0);
      hn::Store(ReduceSymmetric(d, hn::MulAdd(mean_motion, ti, M0)), d, b.m + i);
    }
    double* HWY_RESTRICT ob = out + start;
    SolveBlock<false>(b, p.e, n_pad, [&](std::size_t i, VF, VF sE, VF cE) {
      const VF v = hn::Add(hn::Div(hn::NegMulAdd(B, sE, hn::Mul(A, hn::Sub(cE, e))), hn::NegMulAdd(e, cE, one)), C);
      StorePadded(d, hn::Add(LoadPadded(d, ob, i, nb, 0.0), v), ob, i, nb);
    });
  }
}

// Sums over residuals r (n values): sum r^2/var and (kLogDet) sum ln var, with
// var = sigma2 + jitter2; lanes summed at the end.
struct Sums {
  double chi2 = 0.0, log_det = 0.0;
};
template <bool kLogDet>
Sums ChiSquareAndLogDet(const double* HWY_RESTRICT r, const double* HWY_RESTRICT sigma2, std::size_t n,
                        double jitter2) {
  const DF d;
  const std::size_t L = hn::Lanes(d);
  const VF jit = hn::Set(d, jitter2);
  VF chi2 = hn::Zero(d), logdet = hn::Zero(d);
  std::size_t i = 0;
  for (; i + L <= n; i += L) {
    const VF var = hn::Add(hn::LoadU(d, sigma2 + i), jit);
    const VF ri = hn::LoadU(d, r + i);
    chi2 = hn::Add(chi2, hn::Div(hn::Mul(ri, ri), var));
    if constexpr (kLogDet) logdet = hn::Add(logdet, hn::Log(d, var));
  }
  Sums s{hn::GetLane(hn::SumOfLanes(d, chi2)), hn::GetLane(hn::SumOfLanes(d, logdet))};
  for (; i < n; ++i) {
    const double var = sigma2[i] + jitter2;
    s.chi2 += r[i] * r[i] / var;
    if constexpr (kLogDet) s.log_det += std::log(var);
  }
  return s;
}

}  // namespace

void AddKeplerians(const double* HWY_RESTRICT t, std::size_t n, const KeplerTerm* planets, int n_planets,
                   double* HWY_RESTRICT out) {
  detail::KeplerBlock b;
  for (int k = 0; k < n_planets; ++k) Accumulate(t, n, detail::prepare(planets[k], 1.0), out, b);
}

double BlockLnLike(const double* HWY_RESTRICT t, const double* HWY_RESTRICT y, const double* HWY_RESTRICT sigma2,
                   std::size_t n, const KeplerTerm* planets, int n_planets, double offset, double jitter2, double c1,
                   double c2, double* HWY_RESTRICT scratch) {
  double* HWY_RESTRICT r = scratch;
  for (std::size_t i = 0; i < n; ++i) r[i] = y[i] - offset - (c1 + c2 * t[i]) * t[i];
  detail::KeplerBlock b;
  for (int k = 0; k < n_planets; ++k) Accumulate(t, n, detail::prepare(planets[k], -1.0), r, b);
  const Sums s = ChiSquareAndLogDet<true>(r, sigma2, n, jitter2);
  return -0.5 * (s.chi2 + s.log_det + static_cast<double>(n) * detail::kLn2Pi);
}

OffsetFreeFit BlockOffsetFit(const double* HWY_RESTRICT t, const double* HWY_RESTRICT y,
                             const double* HWY_RESTRICT sigma2, std::size_t n, const KeplerTerm* planets,
                             int n_planets, double jitter2, double c1, double c2, double* HWY_RESTRICT scratch) {
  double* HWY_RESTRICT r = scratch;
  for (std::size_t i = 0; i < n; ++i) r[i] = y[i] - (c1 + c2 * t[i]) * t[i];
  detail::KeplerBlock b;
  for (int k = 0; k < n_planets; ++k) Accumulate(t, n, detail::prepare(planets[k], -1.0), r, b);
  const DF d;
  const std::size_t L = hn::Lanes(d);
  const VF jit = hn::Set(d, jitter2), one = hn::Set(d, 1.0);
  VF s_inv = hn::Zero(d), s_r = hn::Zero(d), s_log = hn::Zero(d);
  std::size_t i = 0;
  for (; i + L <= n; i += L) {
    const VF var = hn::Add(hn::LoadU(d, sigma2 + i), jit);
    const VF inv = hn::Div(one, var);
    s_inv = hn::Add(s_inv, inv);
    s_r = hn::MulAdd(hn::LoadU(d, r + i), inv, s_r);
    s_log = hn::Add(s_log, hn::Log(d, var));
  }
  OffsetFreeFit f;
  f.sum_inverse_variance = hn::GetLane(hn::SumOfLanes(d, s_inv));
  double sr = hn::GetLane(hn::SumOfLanes(d, s_r));
  f.log_det = hn::GetLane(hn::SumOfLanes(d, s_log));
  for (; i < n; ++i) {
    const double var = sigma2[i] + jitter2;
    f.sum_inverse_variance += 1.0 / var;
    sr += r[i] / var;
    f.log_det += std::log(var);
  }
  f.offset = sr / f.sum_inverse_variance;
  // Second pass about the best offset: no cancellation however large the offset is.
  for (std::size_t j = 0; j < n; ++j) r[j] -= f.offset;
  f.chi2_min = ChiSquareAndLogDet<false>(r, sigma2, n, jitter2).chi2;
  return f;
}

}  // namespace apsides::kernels::HWY_NAMESPACE
HWY_AFTER_NAMESPACE();

#if HWY_ONCE
namespace apsides::kernels {
HWY_EXPORT(AddKeplerians);
HWY_EXPORT(BlockLnLike);
HWY_EXPORT(BlockOffsetFit);

void add_keplerians(const double* t, std::size_t n, const KeplerTerm* planets, int n_planets, double* out) {
  simd_init();
  HWY_DYNAMIC_DISPATCH(AddKeplerians)(t, n, planets, n_planets, out);
}

double block_lnlike(const double* t, const double* y, const double* sigma2, std::size_t n,
                    const KeplerTerm* planets, int n_planets, double offset, double jitter2, double c1, double c2,
                    double* scratch) {
  simd_init();
  return HWY_DYNAMIC_DISPATCH(BlockLnLike)(t, y, sigma2, n, planets, n_planets, offset, jitter2, c1, c2, scratch);
}

OffsetFreeFit block_offset_fit(const double* t, const double* y, const double* sigma2, std::size_t n,
                               const KeplerTerm* planets, int n_planets, double jitter2, double c1, double c2,
                               double* scratch) {
  simd_init();
  return HWY_DYNAMIC_DISPATCH(BlockOffsetFit)(t, y, sigma2, n, planets, n_planets, jitter2, c1, c2, scratch);
}

}  // namespace apsides::kernels
#endif  // HWY_ONCE
