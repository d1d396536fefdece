// Internals of the periodogram shared by the exact (periodogram_exact.cpp) and fast
// (periodogram_fast.cpp) engines. Not part of the public API.
#pragma once

#include <cstddef>
#include <vector>

namespace apsides::detail {

// Data prepared for summing: times centred, weights normalised to sum 1, velocities
// centred on the weighted mean of their group, points ordered by group (instrument).
struct GlsData {
  std::vector<double> t;           // centred times (days)
  std::vector<double> y;           // group-centred velocities
  std::vector<double> w;           // weights 1/sigma^2, normalised to sum 1
  std::vector<std::size_t> group_begin;  // group g = [group_begin[g], group_begin[g + 1])
  std::vector<double> group_weight;      // sum of w in each group
  double yy = 0.0;                 // sum w y^2 (centred per group): chi2_0 / sum(1/sigma^2)
  double weight_total = 0.0;       // sum 1/sigma^2 before normalisation
  std::size_t n_groups() const { return group_weight.size(); }
};

// Builds GlsData from unordered (t, y, dy, group) with groups 0..m-1 (each non-empty).
GlsData prepare_gls(const std::vector<double>& t, const std::vector<double>& y,
                    const std::vector<double>& dy, const std::vector<int>& group, int n_groups);
// Per-frequency sums of one grid: for each frequency k, YC, YS, CC, CS (over all points,
// with the weights) and C_g, S_g per group. Converted to power by `sums_to_power`.
struct GlsSums {
  std::size_t nf = 0;
  std::size_t n_groups = 0;
  // Layout: q * stride + k, q = 0 YC, 1 YS, 2 CC, 3 CS, 4 + 2g C_g, 5 + 2g S_g.
  std::vector<double> v;
  std::size_t stride = 0;
  double* row(std::size_t q) { return v.data() + q * stride; }
  const double* row(std::size_t q) const { return v.data() + q * stride; }
};

// Standard-normalised power and window |sum w e^{i theta}|^2 from sums (window may be null).
void sums_to_power(const GlsData& d, const double* yc, const double* ys, const double* cc,
                   const double* cs, const double* const* cg, const double* const* sg,
                   std::size_t n, double* power, double* window);

// Exact engine: power (and window if non-null) on f0 + k df, k < nf.
void exact_power(const GlsData& d, double f0, double df, std::size_t nf, int threads,
                 double* power, double* window);
// Fast engine (spreading onto a regular grid + FFTW, periodogram_fast.cpp).
void fast_power(const GlsData& d, double f0, double df, std::size_t nf, int threads,
                double* power, double* window);
// Direct power at one frequency (any f), for peak refinement and tests.
double direct_power(const GlsData& d, double f);

int resolve_threads(int threads);

}  // namespace apsides::detail
