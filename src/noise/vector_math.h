// Internal: batch exp / sin / cos / log for the semiseparable GP's generators, compiled
// with the kernels' flags (-O3 -ffast-math, see cmake/apsides_flags.cmake) so that GCC
// calls glibc's vector math library. Accuracy: a few ulp (tests/gp_test.cpp holds the
// whole likelihood against a dense numpy Cholesky to 1e-8 relative).
#pragma once

#include <cstddef>

namespace apsides::gp::detail {

// out[i] = exp(-rate * dt[i]).
void exp_decay(const double* dt, std::size_t n, double rate, double* out);
// c[i] = cos(omega * t[i]), s[i] = sin(omega * t[i]).
void cos_sin(const double* t, std::size_t n, double omega, double* c, double* s);
// sum of ln x[i].
double sum_log(const double* x, std::size_t n);

}  // namespace apsides::gp::detail
