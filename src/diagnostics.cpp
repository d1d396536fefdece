#include "apsides/diagnostics.h"

#include <fftw3.h>

#include <algorithm>
#include <boost/math/distributions/normal.hpp>
#include <cmath>
#include <complex>
#include <limits>
#include <mutex>
#include <numeric>

namespace apsides {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

// FFTW's planner is not thread-safe; execution of a plan is.
std::mutex& fftw_planner_mutex() {
  static std::mutex m;
  return m;
}

std::size_t fft_size(std::size_t n) {
  std::size_t m = 1;
  while (m < 2 * n) m <<= 1;
  return m;
}

// Autocovariance sums divided by n (Geyer 1992's biased estimator), lags 0 .. n-1.
std::vector<double> autocovariance(std::span<const double> x) {
  const std::size_t n = x.size();
  std::vector<double> out(n, 0.0);
  if (n == 0) return out;
  const double mean = std::accumulate(x.begin(), x.end(), 0.0) / static_cast<double>(n);
  const std::size_t m = fft_size(n);
  double* buf = fftw_alloc_real(m);
  fftw_complex* spec = fftw_alloc_complex(m / 2 + 1);
  fftw_plan fwd, bwd;
  {
    std::lock_guard<std::mutex> lock(fftw_planner_mutex());
    fwd = fftw_plan_dft_r2c_1d(static_cast<int>(m), buf, spec, FFTW_ESTIMATE);
    bwd = fftw_plan_dft_c2r_1d(static_cast<int>(m), spec, buf, FFTW_ESTIMATE);
  }
  for (std::size_t i = 0; i < m; ++i) buf[i] = i < n ? x[i] - mean : 0.0;
  fftw_execute(fwd);
  for (std::size_t k = 0; k < m / 2 + 1; ++k) {
    spec[k][0] = spec[k][0] * spec[k][0] + spec[k][1] * spec[k][1];
    spec[k][1] = 0.0;
  }
  fftw_execute(bwd);
  // The backward transform is unnormalised (factor m).
  for (std::size_t t = 0; t < n; ++t) out[t] = buf[t] / (static_cast<double>(m) * static_cast<double>(n));
  {
    std::lock_guard<std::mutex> lock(fftw_planner_mutex());
    fftw_destroy_plan(fwd);
    fftw_destroy_plan(bwd);
  }
  fftw_free(buf);
  fftw_free(spec);
  return out;
}

AutocorrTime sokal_window(const std::vector<double>& rho, double c) {
  AutocorrTime r;
  if (rho.empty()) return r;
  double tau = -1.0;
  for (std::size_t m = 0; m < rho.size(); ++m) {
    tau += 2.0 * rho[m];
    if (static_cast<double>(m) >= c * tau) {
      r.tau = tau;
      r.window = static_cast<long>(m);
      r.reliable = true;
      return r;
    }
  }
  r.tau = tau;
  r.window = static_cast<long>(rho.size()) - 1;
  r.reliable = false;
  return r;
}

bool all_equal(const ChainSet& chains) {
  if (chains.empty() || chains[0].empty()) return true;
  const double v = chains[0][0];
  for (const auto& c : chains)
    for (double x : c)
      if (x != v) return false;
  return true;
}

std::size_t common_length(const ChainSet& chains) {
  std::size_t n = chains.empty() ? 0 : chains[0].size();
  for (const auto& c : chains) n = std::min(n, c.size());
  return n;
}

// Halves of each chain; an odd middle draw is dropped (as the `posterior` package does).
ChainSet split_chains(const ChainSet& chains) {
  const std::size_t n = common_length(chains);
  const std::size_t half = n / 2;
  ChainSet out;
  out.reserve(2 * chains.size());
  for (const auto& c : chains) {
    out.emplace_back(c.begin(), c.begin() + static_cast<long>(half));
    out.emplace_back(c.begin() + static_cast<long>(n - half), c.begin() + static_cast<long>(n));
  }
  return out;
}

// z = Phi^-1((r - 3/8) / (S + 1/4)) with average ranks for ties, over all draws together.
ChainSet z_scale(const ChainSet& chains) {
  std::size_t total = 0;
  for (const auto& c : chains) total += c.size();
  std::vector<std::pair<double, std::size_t>> v;
  v.reserve(total);
  for (const auto& c : chains)
    for (double x : c) v.emplace_back(x, v.size());
  std::vector<std::pair<double, std::size_t>> sorted = v;
  std::sort(sorted.begin(), sorted.end());
  std::vector<double> rank(total);
  for (std::size_t i = 0; i < total;) {
    std::size_t j = i;
    while (j + 1 < total && sorted[j + 1].first == sorted[i].first) ++j;
    const double r = 0.5 * static_cast<double>(i + j) + 1.0;  // average of 1-based ranks
    for (std::size_t k = i; k <= j; ++k) rank[sorted[k].second] = r;
    i = j + 1;
  }
  const boost::math::normal_distribution<double> unit;
  const double s = static_cast<double>(total);
  ChainSet out = chains;
  std::size_t idx = 0;
  for (auto& c : out)
    for (double& x : c) x = boost::math::quantile(unit, (rank[idx++] - 0.375) / (s + 0.25));
  return out;
}

double median_of(const ChainSet& chains) {
  std::vector<double> all;
  for (const auto& c : chains) all.insert(all.end(), c.begin(), c.end());
  const std::size_t n = all.size();
  std::sort(all.begin(), all.end());
  return n % 2 ? all[n / 2] : 0.5 * (all[n / 2 - 1] + all[n / 2]);
}

// R's default quantile (type 7).
double quantile_type7(const ChainSet& chains, double p) {
  std::vector<double> all;
  for (const auto& c : chains) all.insert(all.end(), c.begin(), c.end());
  std::sort(all.begin(), all.end());
  const double h = (static_cast<double>(all.size()) - 1.0) * p;
  const std::size_t lo = static_cast<std::size_t>(std::floor(h));
  const std::size_t hi = std::min(lo + 1, all.size() - 1);
  return all[lo] + (h - static_cast<double>(lo)) * (all[hi] - all[lo]);
}

double mean(const std::vector<double>& x) {
  return std::accumulate(x.begin(), x.end(), 0.0) / static_cast<double>(x.size());
}
double variance(const std::vector<double>& x) {  // with n - 1
  const double m = mean(x);
  double s = 0.0;
  for (double v : x) s += (v - m) * (v - m);
  return s / static_cast<double>(x.size() - 1);
}

// Gelman-Rubin statistic of already split chains.
double rhat_of(const ChainSet& chains) {
  const std::size_t n = common_length(chains);
  if (chains.size() < 2 || n < 2) return kNaN;
  std::vector<double> means, vars;
  for (const auto& c : chains) {
    means.push_back(mean(c));
    vars.push_back(variance(c));
  }
  const double nd = static_cast<double>(n);
  const double between = nd * variance(means);
  const double within = mean(vars);
  return std::sqrt((between / within + nd - 1.0) / nd);
}

// ESS of chains as given (no splitting), Geyer's initial monotone sequence.
double ess_of(const ChainSet& chains) {
  const std::size_t m = chains.size();
  const std::size_t n = common_length(chains);
  if (m == 0 || n < 3 || all_equal(chains)) return kNaN;
  std::vector<std::vector<double>> acov;
  std::vector<double> means;
  for (const auto& c : chains) {
    acov.push_back(autocovariance(std::span<const double>(c.data(), n)));
    means.push_back(std::accumulate(c.begin(), c.begin() + static_cast<long>(n), 0.0) / static_cast<double>(n));
  }
  const double nd = static_cast<double>(n);
  auto mean_acov = [&](std::size_t t) {
    double s = 0.0;
    for (const auto& a : acov) s += a[t];
    return s / static_cast<double>(m);
  };
  const double mean_var = mean_acov(0) * nd / (nd - 1.0);
  double var_plus = mean_var * (nd - 1.0) / nd;
  if (m > 1) var_plus += variance(means);
  std::vector<double> rho(n, 0.0);
  std::size_t t = 0;
  double rho_even = 1.0;
  rho[0] = rho_even;
  double rho_odd = 1.0 - (mean_var - mean_acov(1)) / var_plus;
  rho[1] = rho_odd;
  while (t + 5 < n && !std::isnan(rho_even + rho_odd) && rho_even + rho_odd > 0.0) {
    t += 2;
    rho_even = 1.0 - (mean_var - mean_acov(t)) / var_plus;
    rho_odd = 1.0 - (mean_var - mean_acov(t + 1)) / var_plus;
    if (rho_even + rho_odd >= 0.0) {
      rho[t] = rho_even;
      rho[t + 1] = rho_odd;
    }
  }
  const std::size_t max_t = t;
  if (rho_even > 0.0) rho[max_t] = rho_even;
  // Initial monotone sequence.
  t = 0;
  while (t + 4 <= max_t) {
    t += 2;
    if (rho[t] + rho[t + 1] > rho[t - 2] + rho[t - 1]) {
      rho[t] = 0.5 * (rho[t - 2] + rho[t - 1]);
      rho[t + 1] = rho[t];
    }
  }
  const double total = static_cast<double>(m) * nd;
  double tau_hat = -1.0 + rho[max_t];
  for (std::size_t i = 0; i < max_t; ++i) tau_hat += 2.0 * rho[i];
  tau_hat = std::max(tau_hat, 1.0 / std::log10(total));
  return total / tau_hat;
}

ChainSet fold(const ChainSet& chains) {
  const double med = median_of(chains);
  ChainSet out = chains;
  for (auto& c : out)
    for (double& x : c) x = std::abs(x - med);
  return out;
}

ChainSet indicator(const ChainSet& chains, double q) {
  ChainSet out = chains;
  for (auto& c : out)
    for (double& x : c) x = x <= q ? 1.0 : 0.0;
  return out;
}

bool too_short(const ChainSet& chains) { return chains.empty() || common_length(chains) < 4 || all_equal(chains); }

}  // namespace

std::vector<double> autocorrelation(std::span<const double> x) {
  std::vector<double> a = autocovariance(x);
  if (a.empty() || a[0] <= 0.0) {
    std::fill(a.begin(), a.end(), 0.0);
    if (!a.empty()) a[0] = 1.0;
    return a;
  }
  const double a0 = a[0];
  for (double& v : a) v /= a0;
  return a;
}

AutocorrTime integrated_autocorr_time(std::span<const double> x, double window_c) {
  return sokal_window(autocorrelation(x), window_c);
}

AutocorrTime integrated_autocorr_time(const ChainSet& chains, double window_c) {
  const std::size_t n = common_length(chains);
  if (chains.empty() || n == 0) return {};
  std::vector<double> rho(n, 0.0);
  for (const auto& c : chains) {
    const std::vector<double> r = autocorrelation(std::span<const double>(c.data(), n));
    for (std::size_t t = 0; t < n; ++t) rho[t] += r[t];
  }
  for (double& v : rho) v /= static_cast<double>(chains.size());
  return sokal_window(rho, window_c);
}

double bulk_rhat(const ChainSet& chains) {
  if (too_short(chains)) return kNaN;
  return rhat_of(z_scale(split_chains(chains)));
}

double tail_rhat(const ChainSet& chains) {
  if (too_short(chains)) return kNaN;
  return rhat_of(z_scale(split_chains(fold(chains))));
}

double split_rhat(const ChainSet& chains) {
  const double b = bulk_rhat(chains);
  const double t = tail_rhat(chains);
  if (std::isnan(b) || std::isnan(t)) return kNaN;
  return std::max(b, t);
}

double ess_bulk(const ChainSet& chains) {
  if (too_short(chains)) return kNaN;
  return ess_of(z_scale(split_chains(chains)));
}

double ess_basic(const ChainSet& chains) {
  if (too_short(chains)) return kNaN;
  return ess_of(split_chains(chains));
}

double ess_tail(const ChainSet& chains) {
  if (too_short(chains)) return kNaN;
  const double q05 = ess_basic(indicator(chains, quantile_type7(chains, 0.05)));
  const double q95 = ess_basic(indicator(chains, quantile_type7(chains, 0.95)));
  if (std::isnan(q05) || std::isnan(q95)) return kNaN;
  return std::min(q05, q95);
}

ParameterDiagnostics diagnose(const ChainSet& chains, double window_c) {
  ParameterDiagnostics d;
  d.rhat = split_rhat(chains);
  d.ess_bulk = ess_bulk(chains);
  d.ess_tail = ess_tail(chains);
  const AutocorrTime t = integrated_autocorr_time(chains, window_c);
  d.tau = t.tau;
  d.tau_reliable = t.reliable;
  return d;
}

}  // namespace apsides
