// Vectorisable Kepler solver. Compiled with APSIDES_KERNEL_FLAGS (see
// cmake/apsides_flags.cmake) so that GCC calls glibc's vector sin and cbrt (libmvec)
// from these loops; the method is described in kepler_core.h, its accuracy is proved
// in tests/kepler_test.cpp.
#include <algorithm>
#include <cmath>

#include "kepler_core.h"
#include "kernels.h"

namespace apsides::kernels {
using detail::kBlock;
using detail::kTwoPi;

void kepler_sincos(const double* __restrict M, std::size_t n, double e, double* __restrict sin_E,
                   double* __restrict cos_E) {
  detail::KeplerBlock b;
  for (std::size_t start = 0; start < n; start += kBlock) {
    const std::size_t nb = std::min(kBlock, n - start);
    const double* __restrict Mb = M + start;
    double* __restrict sb = sin_E + start;
    double* __restrict cb = cos_E + start;
    for (std::size_t i = 0; i < nb; ++i) b.m[i] = detail::reduce_symmetric(Mb[i]);
    detail::solve_block<false>(b, &e, nb, [&](std::size_t i, double, double s, double c) {
      sb[i] = s;
      cb[i] = c;
    });
  }
}

void kepler_batch(const double* __restrict M, const double* __restrict e, std::size_t n,
                  double* __restrict E) {
  detail::KeplerBlock b;
  for (std::size_t start = 0; start < n; start += kBlock) {
    const std::size_t nb = std::min(kBlock, n - start);
    const double* __restrict Mb = M + start;
    double* __restrict Eb = E + start;
    for (std::size_t i = 0; i < nb; ++i) b.m[i] = detail::reduce_symmetric(Mb[i]);
    detail::solve_block<true>(b, e + start, nb, [&](std::size_t i, double Ei, double, double) {
      Eb[i] = Ei + (Ei < 0.0 ? kTwoPi : 0.0);  // no -0.0 out
    });
  }
}

void sincos_batch(const double* __restrict x, std::size_t n, double* __restrict s,
                  double* __restrict c) {
  // Two loops: in one, GCC would fuse sin and cos into a scalar sincos() call.
  for (std::size_t i = 0; i < n; ++i) s[i] = std::sin(x[i]);
  for (std::size_t i = 0; i < n; ++i) c[i] = std::cos(x[i]);
}

}  // namespace apsides::kernels
