// Batch elementary functions for the semiseparable GP (see vector_math.h). Plain loops
// that GCC vectorises with libmvec under -O3 -ffast-math.
#include "noise/vector_math.h"

#include <cmath>

namespace apsides::gp::detail {

void exp_decay(const double* __restrict dt, std::size_t n, double rate, double* __restrict out) {
  for (std::size_t i = 0; i < n; ++i) out[i] = std::exp(-rate * dt[i]);
}

void cos_sin(const double* __restrict t, std::size_t n, double omega, double* __restrict c,
             double* __restrict s) {
  // Two loops: in one, GCC would fuse them into a scalar sincos() call.
  for (std::size_t i = 0; i < n; ++i) c[i] = std::cos(omega * t[i]);
  for (std::size_t i = 0; i < n; ++i) s[i] = std::sin(omega * t[i]);
}

double sum_log(const double* __restrict x, std::size_t n) {
  double sum = 0.0;
  for (std::size_t i = 0; i < n; ++i) sum += std::log(x[i]);
  return sum;
}

}  // namespace apsides::gp::detail
