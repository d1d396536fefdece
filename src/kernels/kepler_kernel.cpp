// Vector Kepler solver, compiled once per SIMD target by Highway (foreach_target.h) and
// dispatched at run time (simd.h). The method is described in kepler_core-inl.h; its
// accuracy is proved under every target the CPU runs in tests/kepler_test.cpp.
#include <algorithm>
#include <cstddef>

#include "kernels/kepler_core.h"
#include "kernels/kernels.h"
#include "kernels/simd.h"

#undef HWY_TARGET_INCLUDE
#define HWY_TARGET_INCLUDE "kernels/kepler_kernel.cpp"
#include "hwy/foreach_target.h"  // IWYU pragma: keep

#include "hwy/highway.h"
#include "kernels/kepler_core-inl.h"

HWY_BEFORE_NAMESPACE();
namespace apsides::kernels::HWY_NAMESPACE {

void KeplerSinCos(const double* HWY_RESTRICT M, std::size_t n, double e, double* HWY_RESTRICT sin_E,
                  double* HWY_RESTRICT cos_E) {
  const DF d;
  detail::KeplerBlock b;
  for (std::size_t start = 0; start < n; start += detail::kBlock) {
    const std::size_t nb = std::min(detail::kBlock, n - start);
    const std::size_t n_pad = PaddedCount(nb);
    for (std::size_t i = 0; i < n_pad; i += hn::Lanes(d)) {
      hn::Store(ReduceSymmetric(d, LoadPadded(d, M + start, i, nb, 0.0)), d, b.m + i);
    }
    SolveBlock<false>(b, e, n_pad, [&](std::size_t i, VF, VF s, VF c) {
      StorePadded(d, s, sin_E + start, i, nb);
      StorePadded(d, c, cos_E + start, i, nb);
    });
  }
}

void KeplerBatch(const double* HWY_RESTRICT M, const double* HWY_RESTRICT e, std::size_t n,
                 double* HWY_RESTRICT E) {
  const DF d;
  const VF zero = hn::Zero(d), two_pi = hn::Set(d, detail::kTwoPi);
  detail::KeplerBlock b;
  for (std::size_t start = 0; start < n; start += detail::kBlock) {
    const std::size_t nb = std::min(detail::kBlock, n - start);
    const std::size_t n_pad = PaddedCount(nb);
    for (std::size_t i = 0; i < n_pad; i += hn::Lanes(d)) {
      hn::Store(ReduceSymmetric(d, LoadPadded(d, M + start, i, nb, 0.0)), d, b.m + i);
      hn::Store(LoadPadded(d, e + start, i, nb, 0.0), d, b.e + i);
    }
    SolveBlock<true>(b, 0.0, n_pad, [&](std::size_t i, VF Ei, VF, VF) {
      // [-pi, pi] -> [0, 2 pi); adding 0 keeps -0.0 from coming out.
      StorePadded(d, hn::Add(Ei, hn::IfThenElseZero(hn::Lt(Ei, zero), two_pi)), E + start, i, nb);
    });
  }
}

void SinCosBatch(const double* HWY_RESTRICT x, std::size_t n, double* HWY_RESTRICT s, double* HWY_RESTRICT c) {
  const DF d;
  for (std::size_t i = 0; i < n; i += hn::Lanes(d)) {
    VF vs, vc;
    SinCos(d, LoadPadded(d, x, i, n, 0.0), vs, vc);
    StorePadded(d, vs, s, i, n);
    StorePadded(d, vc, c, i, n);
  }
}

}  // namespace apsides::kernels::HWY_NAMESPACE
HWY_AFTER_NAMESPACE();

#if HWY_ONCE
namespace apsides::kernels {
HWY_EXPORT(KeplerSinCos);
HWY_EXPORT(KeplerBatch);
HWY_EXPORT(SinCosBatch);

void kepler_sincos(const double* M, std::size_t n, double e, double* sin_E, double* cos_E) {
  simd_init();
  HWY_DYNAMIC_DISPATCH(KeplerSinCos)(M, n, e, sin_E, cos_E);
}

void kepler_batch(const double* M, const double* e, std::size_t n, double* E) {
  simd_init();
  HWY_DYNAMIC_DISPATCH(KeplerBatch)(M, e, n, E);
}

void sincos_batch(const double* x, std::size_t n, double* s, double* c) {
  simd_init();
  HWY_DYNAMIC_DISPATCH(SinCosBatch)(x, n, s, c);
}

}  // namespace apsides::kernels
#endif  // HWY_ONCE
