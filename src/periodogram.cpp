// Periodogram front end: grid, normalisations, Baluev FAP, peaks, window, aliases,
// bootstrap, residual periodograms. The sums themselves are in periodogram_exact.cpp and
// periodogram_fast.cpp.
#include "apsides/periodogram.h"

#include <fmt/format.h>

#include <algorithm>
#include <boost/math/tools/minima.hpp>
#include <cmath>
#include <numbers>
#include <numeric>
#include <random>
#include <thread>

#include "apsides/error.h"
#include "periodogram_internal.h"

namespace apsides {

namespace detail {

GlsData prepare_gls(const std::vector<double>& t, const std::vector<double>& y,
                    const std::vector<double>& dy, const std::vector<int>& group, int n_groups) {
  const std::size_t n = t.size();
  GlsData d;
  std::vector<std::size_t> order(n);
  std::iota(order.begin(), order.end(), std::size_t{0});
  std::stable_sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) { return group[a] < group[b]; });
  d.t.resize(n);
  d.y.resize(n);
  d.w.resize(n);
  double tmin = n ? t[0] : 0.0, tmax = tmin;
  for (double v : t) {
    tmin = std::min(tmin, v);
    tmax = std::max(tmax, v);
  }
  const double tmid = 0.5 * (tmin + tmax);
  double wsum = 0.0;
  for (std::size_t i = 0; i < n; ++i) wsum += 1.0 / (dy[i] * dy[i]);
  d.weight_total = wsum;
  d.group_begin.assign(static_cast<std::size_t>(n_groups) + 1, 0);
  d.group_weight.assign(static_cast<std::size_t>(n_groups), 0.0);
  for (std::size_t j = 0; j < n; ++j) {
    const std::size_t i = order[j];
    d.t[j] = t[i] - tmid;
    d.w[j] = 1.0 / (dy[i] * dy[i]) / wsum;
    d.y[j] = y[i];
    d.group_begin[static_cast<std::size_t>(group[i]) + 1] = j + 1;
  }
  for (int g = 1; g <= n_groups; ++g)
    d.group_begin[static_cast<std::size_t>(g)] =
        std::max(d.group_begin[static_cast<std::size_t>(g)], d.group_begin[static_cast<std::size_t>(g) - 1]);
  d.yy = 0.0;
  for (int g = 0; g < n_groups; ++g) {
    const std::size_t a = d.group_begin[static_cast<std::size_t>(g)], b = d.group_begin[static_cast<std::size_t>(g) + 1];
    double wg = 0.0, wy = 0.0;
    for (std::size_t j = a; j < b; ++j) {
      wg += d.w[j];
      wy += d.w[j] * d.y[j];
    }
    d.group_weight[static_cast<std::size_t>(g)] = wg;
    const double mean = wg > 0 ? wy / wg : 0.0;
    for (std::size_t j = a; j < b; ++j) {
      d.y[j] -= mean;
      d.yy += d.w[j] * d.y[j] * d.y[j];
    }
  }
  return d;
}

}  // namespace detail

using detail::GlsData;

namespace {

constexpr double kAutoFastTerms = 2e8;

GlsData one_group(const std::vector<double>& t, const std::vector<double>& y, const std::vector<double>& dy) {
  return detail::prepare_gls(t, y, dy, std::vector<int>(t.size(), 0), 1);
}

bool use_fast(PeriodogramMethod method, std::size_t n, std::size_t nf) {
  if (method == PeriodogramMethod::kFast) return true;
  if (method == PeriodogramMethod::kExact) return false;
  return static_cast<double>(n) * static_cast<double>(nf) > kAutoFastTerms;
}

void engine_power(const GlsData& d, double f0, double df, std::size_t nf, bool fast, int threads,
                  double* power, double* window) {
  if (fast)
    detail::fast_power(d, f0, df, nf, threads, power, window);
  else
    detail::exact_power(d, f0, df, nf, threads, power, window);
}

double log_gamma_ratio(double n) {  // gamma(n) of Baluev: sqrt(2/n) Gamma(n/2) / Gamma((n-1)/2)
  return 0.5 * std::log(2.0 / n) + std::lgamma(0.5 * n) - std::lgamma(0.5 * (n - 1.0));
}

}  // namespace

std::string to_string(Normalization n) {
  switch (n) {
    case Normalization::kStandard: return "standard";
    case Normalization::kModel: return "model";
    case Normalization::kLog: return "log";
    case Normalization::kPsd: return "psd";
  }
  return "standard";
}

Normalization parse_normalization(const std::string& text, const std::string& where) {
  for (auto n : {Normalization::kStandard, Normalization::kModel, Normalization::kLog, Normalization::kPsd})
    if (text == to_string(n)) return n;
  throw InputError(fmt::format("{}: normalization is '{}'; it must be standard, model, log or psd", where, text));
}

std::string to_string(PeriodogramMethod m) {
  switch (m) {
    case PeriodogramMethod::kAuto: return "auto";
    case PeriodogramMethod::kExact: return "exact";
    case PeriodogramMethod::kFast: return "fast";
  }
  return "auto";
}

PeriodogramMethod parse_periodogram_method(const std::string& text, const std::string& where) {
  for (auto m : {PeriodogramMethod::kAuto, PeriodogramMethod::kExact, PeriodogramMethod::kFast})
    if (text == to_string(m)) return m;
  throw InputError(fmt::format("{}: method is '{}'; it must be auto, exact or fast", where, text));
}

std::string PeriodogramOptions::Validate() const {
  if (!(min_period_days >= 0.0) || !std::isfinite(min_period_days))
    return fmt::format("min_period_days = {}: must be >= 0 (0 = from the sampling)", min_period_days);
  if (!(max_period_days >= 0.0) || !std::isfinite(max_period_days))
    return fmt::format("max_period_days = {}: must be >= 0 (0 = 3 x baseline)", max_period_days);
  if (min_period_days > 0 && max_period_days > 0 && !(max_period_days > min_period_days))
    return fmt::format("max_period_days = {}: must be > min_period_days = {}", max_period_days, min_period_days);
  if (!(oversample >= 1.0) || !std::isfinite(oversample) || oversample > 1000.0)
    return fmt::format("oversample = {}: must be in [1, 1000]", oversample);
  if (n_peaks < 1) return fmt::format("n_peaks = {}: must be >= 1", n_peaks);
  if (n_window_peaks < 0) return fmt::format("n_window_peaks = {}: must be >= 0", n_window_peaks);
  if (bootstrap < 0 || bootstrap > 1000000) return fmt::format("bootstrap = {}: must be in [0, 1000000]", bootstrap);
  if (threads < 0) return fmt::format("threads = {}: must be >= 0 (0 = all cores)", threads);
  return "";
}

double convert_power(double p, Normalization to, double chi2_null) {
  switch (to) {
    case Normalization::kStandard: return p;
    case Normalization::kModel: return p < 1.0 ? p / (1.0 - p) : HUGE_VAL;
    case Normalization::kLog: return p < 1.0 ? -std::log1p(-p) : HUGE_VAL;
    case Normalization::kPsd: return 0.5 * chi2_null * p;
  }
  return p;
}

double baluev_fap(double z, std::size_t n, double fmax, const std::vector<double>& t,
                  const std::vector<double>& dy, int n_null) {
  if (!(z > 0.0)) return 1.0;
  if (z >= 1.0) return 0.0;
  const double nh = static_cast<double>(n) - n_null;      // dof of the null model
  const double nk = static_cast<double>(n) - n_null - 2;  // dof with the sinusoid
  if (nk <= 1.0) return 1.0;
  double wsum = 0.0, wt = 0.0;
  for (std::size_t i = 0; i < t.size(); ++i) {
    const double w = 1.0 / (dy[i] * dy[i]);
    wsum += w;
    wt += w * t[i];
  }
  const double mean = wt / wsum;
  double var = 0.0;
  for (std::size_t i = 0; i < t.size(); ++i) var += (t[i] - mean) * (t[i] - mean) / (dy[i] * dy[i]);
  var /= wsum;
  const double W = fmax * std::sqrt(4.0 * std::numbers::pi * var);
  const double log1mz = std::log1p(-z);
  const double fap_single = std::exp(0.5 * nk * log1mz);
  const double tau = std::exp(log_gamma_ratio(nh) + 0.5 * (nk - 1.0) * log1mz) * W * std::sqrt(0.5 * nh * z);
  // 1 - (1 - a) e^{-tau}, written to keep small values accurate.
  const double fap = fap_single - (1.0 - fap_single) * std::expm1(-tau);
  return std::clamp(fap, 0.0, 1.0);
}

double baluev_fap(double z, std::size_t n, double fmax, const std::vector<double>& t, const std::vector<double>& dy) {
  return baluev_fap(z, n, fmax, t, dy, 1);
}

std::vector<double> gls_power(const std::vector<double>& t, const std::vector<double>& y,
                              const std::vector<double>& dy, double f0, double df, std::size_t nf,
                              PeriodogramMethod method, int threads) {
  std::vector<double> power(nf, 0.0);
  if (t.size() < 3 || nf == 0) return power;
  const GlsData d = one_group(t, y, dy);
  engine_power(d, f0, df, nf, use_fast(method, t.size(), nf), threads, power.data(), nullptr);
  return power;
}

std::vector<double> gls_power_direct(const std::vector<double>& t, const std::vector<double>& y,
                                     const std::vector<double>& dy, const std::vector<double>& frequency_per_day) {
  // Zechmeister & Kuerster (2009) Eqs. (5)-(15), literally, on the data as given.
  const std::size_t n = t.size();
  double wsum = 0.0;
  for (double s : dy) wsum += 1.0 / (s * s);
  std::vector<double> out;
  out.reserve(frequency_per_day.size());
  for (double f : frequency_per_day) {
    double Y = 0, C = 0, S = 0, YYh = 0, YCh = 0, YSh = 0, CCh = 0, CSh = 0;
    for (std::size_t i = 0; i < n; ++i) {
      const double w = 1.0 / (dy[i] * dy[i]) / wsum;
      const double ph = 2.0 * std::numbers::pi * f * t[i];
      const double c = std::cos(ph), s = std::sin(ph);
      Y += w * y[i];
      C += w * c;
      S += w * s;
      YYh += w * y[i] * y[i];
      YCh += w * y[i] * c;
      YSh += w * y[i] * s;
      CCh += w * c * c;
      CSh += w * c * s;
    }
    const double SSh = 1.0 - CCh;
    const double YY = YYh - Y * Y, YC = YCh - Y * C, YS = YSh - Y * S;
    const double CC = CCh - C * C, SS = SSh - S * S, CS = CSh - C * S;
    const double D = CC * SS - CS * CS;
    out.push_back((SS * YC * YC + CC * YS * YS - 2.0 * CS * YC * YS) / (YY * D));
  }
  return out;
}

FrequencyGrid default_grid(const VelocityData& data, const PeriodogramOptions& options) {
  if (options.fixed_grid.nf > 0) return options.fixed_grid;
  const double T = data.baseline_days();
  FrequencyGrid g;
  if (!(T > 0.0)) return g;
  double fmin = options.max_period_days > 0 ? 1.0 / options.max_period_days : 1.0 / (3.0 * T);
  double fmax;
  if (options.min_period_days > 0) {
    fmax = 1.0 / options.min_period_days;
  } else {
    std::vector<double> t = data.time_days;
    std::sort(t.begin(), t.end());
    std::vector<double> gaps;
    for (std::size_t i = 1; i < t.size(); ++i)
      if (t[i] > t[i - 1]) gaps.push_back(t[i] - t[i - 1]);
    double q10 = 1.0;
    if (!gaps.empty()) {
      std::sort(gaps.begin(), gaps.end());
      q10 = gaps[gaps.size() / 10];
    }
    fmax = std::clamp(0.5 / q10, 2.0, 10.0);
  }
  g.df = 1.0 / (options.oversample * T);
  if (fmax <= fmin) return g;
  g.f0 = fmin;
  g.nf = static_cast<std::size_t>(std::floor((fmax - fmin) / g.df)) + 1;
  return g;
}

namespace {

struct Prepared {
  GlsData d;
  std::vector<double> t_raw, y_raw, dy_raw;
  std::vector<int> group;
  int n_groups = 1;
};

// Indices of local maxima of `v` (strict on the left), strongest first, at least
// `min_sep` grid steps apart, excluding indices below `first`.
std::vector<std::size_t> find_peaks(const std::vector<double>& v, std::size_t count, std::size_t min_sep,
                                    std::size_t first = 0) {
  std::vector<std::size_t> cand;
  for (std::size_t k = std::max<std::size_t>(first, 1); k + 1 < v.size(); ++k)
    if (v[k] > v[k - 1] && v[k] >= v[k + 1]) cand.push_back(k);
  if (v.size() >= 2 && first == 0 && v[0] > v[1]) cand.push_back(0);
  if (v.size() >= 2 && v.back() > v[v.size() - 2]) cand.push_back(v.size() - 1);
  std::sort(cand.begin(), cand.end(), [&](std::size_t a, std::size_t b) { return v[a] > v[b]; });
  std::vector<std::size_t> out;
  for (std::size_t k : cand) {
    bool ok = true;
    for (std::size_t j : out)
      if ((k > j ? k - j : j - k) < min_sep) ok = false;
    if (ok) out.push_back(k);
    if (out.size() >= count) break;
  }
  return out;
}

// Bootstrap FAPs of r's peaks: (velocity, uncertainty) pairs redrawn with replacement within each
// instrument, times kept; FAP = fraction of replicates whose highest power on the grid
// reaches the peak's. Replicate b uses its own generator seeded from (seed, b), and
// replicates are spread over threads, so the result does not depend on the thread count.
void bootstrap_faps(const Prepared& p, const PeriodogramOptions& options, const FrequencyGrid& grid, bool fast,
                    PeriodogramResult& r) {
  const std::size_t n = p.t_raw.size();
  const int B = options.bootstrap;
  std::vector<double> maxima(static_cast<std::size_t>(B));
  const int nt = std::max(1, std::min(detail::resolve_threads(options.threads), B));
  std::vector<std::vector<std::size_t>> members(static_cast<std::size_t>(p.n_groups));
  for (std::size_t i = 0; i < n; ++i) members[static_cast<std::size_t>(p.group[i])].push_back(i);
  auto work = [&](int w) {
    std::vector<double> y(n), dy(n), pw(grid.nf);
    for (int b = w; b < B; b += nt) {
      std::seed_seq ss{static_cast<unsigned>(options.seed & 0xffffffffu), static_cast<unsigned>(options.seed >> 32),
                       static_cast<unsigned>(b)};
      std::mt19937_64 rng(ss);
      for (const auto& mem : members) {
        std::uniform_int_distribution<std::size_t> pick(0, mem.size() - 1);
        for (std::size_t i : mem) {
          const std::size_t src = mem[pick(rng)];
          y[i] = p.y_raw[src];
          dy[i] = p.dy_raw[src];
        }
      }
      const GlsData d = detail::prepare_gls(p.t_raw, y, dy, p.group, p.n_groups);
      engine_power(d, grid.f0, grid.df, grid.nf, fast, 1, pw.data(), nullptr);
      maxima[static_cast<std::size_t>(b)] = *std::max_element(pw.begin(), pw.end());
    }
  };
  std::vector<std::thread> pool;
  for (int w = 0; w < nt; ++w) pool.emplace_back(work, w);
  for (auto& th : pool) th.join();
  for (Peak& pk : r.peaks) {
    const auto hits = std::count_if(maxima.begin(), maxima.end(), [&](double m) { return m >= pk.power_standard; });
    pk.fap_bootstrap = static_cast<double>(hits) / B;
  }
}
PeriodogramResult run(const Prepared& p, const VelocityData& data, const PeriodogramOptions& options) {
  if (const std::string err = options.Validate(); !err.empty()) throw InputError("periodogram options: " + err);
  const std::size_t n = p.t_raw.size();
  const std::size_t need = static_cast<std::size_t>(p.n_groups) + 3;
  if (n < need)
    throw InputError(fmt::format("{}: {} velocities from {} instrument(s); a periodogram needs at least {}",
                                 data.sources(), n, p.n_groups, need));
  const FrequencyGrid grid = default_grid(data, options);
  if (grid.nf < 3)
    throw InputError(fmt::format(
        "periodogram: the frequency grid is empty (baseline {:.6g} d, min period {:g} d, max period {:g} d)",
        data.baseline_days(), options.min_period_days, options.max_period_days));
  if (grid.nf > options.max_grid_points)
    throw InputError(fmt::format("periodogram: {} frequencies requested; at most {} (raise --min-period or lower "
                                 "--oversample)",
                                 grid.nf, options.max_grid_points));
  PeriodogramResult r;
  r.normalization = options.normalization;
  r.n_points = n;
  r.n_instruments = static_cast<std::size_t>(p.n_groups);
  r.baseline_days = data.baseline_days();
  r.min_frequency_per_day = grid.f0;
  r.max_frequency_per_day = grid.fmax();
  r.frequency_step_per_day = grid.df;
  r.bootstrap = options.bootstrap;
  const bool fast = use_fast(options.method, n, grid.nf);
  r.method_used = fast ? "fast" : "exact";
  r.offsets_note = p.n_groups > 1 ? fmt::format("{} instrument offsets fitted at every frequency", p.n_groups)
                                  : "floating mean fitted at every frequency";
  r.frequency_per_day.resize(grid.nf);
  for (std::size_t k = 0; k < grid.nf; ++k) r.frequency_per_day[k] = grid.f0 + grid.df * static_cast<double>(k);
  std::vector<double> pstd(grid.nf);
  r.window_power.resize(grid.nf);
  engine_power(p.d, grid.f0, grid.df, grid.nf, fast, options.threads, pstd.data(), r.window_power.data());

  const double chi2_null = p.d.yy * p.d.weight_total;
  r.power.resize(grid.nf);
  for (std::size_t k = 0; k < grid.nf; ++k) r.power[k] = convert_power(pstd[k], options.normalization, chi2_null);

  // Peaks: local maxima at least one peak width (1/T) apart, refined by Brent's method on
  // the direct sums within one grid step.
  const std::size_t width = std::max<std::size_t>(1, static_cast<std::size_t>(std::llround(options.oversample)));
  const auto idx = find_peaks(pstd, static_cast<std::size_t>(options.n_peaks), width);
  for (std::size_t k : idx) {
    Peak pk;
    double f = r.frequency_per_day[k], best = pstd[k];
    if (k > 0 && k + 1 < grid.nf) {
      const auto neg = [&](double x) { return -detail::direct_power(p.d, x); };
      const auto [fx, fv] = boost::math::tools::brent_find_minima(neg, f - grid.df, f + grid.df, 40);
      if (-fv > best) {
        f = fx;
        best = -fv;
      }
    }
    pk.frequency_per_day = f;
    pk.period_days = 1.0 / f;
    pk.power_standard = best;
    pk.power = convert_power(best, options.normalization, chi2_null);
    pk.fap = baluev_fap(best, n, r.max_frequency_per_day, p.t_raw, p.dy_raw, p.n_groups);
    r.peaks.push_back(pk);
  }

  // Window peaks, away from the zero-frequency main lobe (f > 2/T).
  const double T = r.baseline_days;
  std::size_t first = 0;
  while (first < grid.nf && r.frequency_per_day[first] <= 2.0 / T) ++first;
  for (std::size_t k : find_peaks(r.window_power, static_cast<std::size_t>(options.n_window_peaks), width, first)) {
    Peak w;
    w.frequency_per_day = r.frequency_per_day[k];
    w.period_days = 1.0 / w.frequency_per_day;
    w.power = w.power_standard = r.window_power[k];
    w.fap = -1.0;
    r.window_peaks.push_back(w);
  }

  // Alias flags: peak j may alias a stronger peak i through a strong window peak f_w when
  // f_j = |f_i +- f_w| within 3/4 of a peak width.
  const double tol = 0.75 / T;
  for (std::size_t j = 1; j < r.peaks.size(); ++j) {
    for (std::size_t i = 0; i < j && r.peaks[j].alias_of < 0; ++i) {
      for (const Peak& w : r.window_peaks) {
        if (w.power < 0.1) continue;
        const double fi = r.peaks[i].frequency_per_day, fj = r.peaks[j].frequency_per_day, fw = w.frequency_per_day;
        if (std::abs(fj - (fi + fw)) < tol || std::abs(fj - std::abs(fi - fw)) < tol) {
          r.peaks[j].alias_of = static_cast<int>(i);
          r.peaks[j].alias_window_frequency = fw;
          break;
        }
      }
    }
  }

  if (options.bootstrap > 0) bootstrap_faps(p, options, grid, fast, r);
  r.success = true;
  r.message = fmt::format("{} periodogram of {} points, {} frequencies from {:.6g} to {:.6g} per day", r.method_used, n,
                          grid.nf, grid.f0, r.max_frequency_per_day);
  return r;
}

Prepared prepare(const VelocityData& data, const std::vector<double>& y) {
  Prepared p;
  p.t_raw = data.time_days;
  p.y_raw = y;
  p.dy_raw = data.uncertainty_m_s;
  p.n_groups = std::max<int>(1, static_cast<int>(data.n_instruments()));
  p.group = data.instrument;
  if (p.group.size() != p.t_raw.size()) p.group.assign(p.t_raw.size(), 0);
  // Instruments without points would make empty groups: renumber the ones present.
  std::vector<int> map(static_cast<std::size_t>(p.n_groups), -1);
  int next = 0;
  for (int& g : p.group) {
    if (g < 0 || g >= p.n_groups) g = 0;
    if (map[static_cast<std::size_t>(g)] < 0) map[static_cast<std::size_t>(g)] = next++;
    g = map[static_cast<std::size_t>(g)];
  }
  p.n_groups = std::max(1, next);
  p.d = detail::prepare_gls(p.t_raw, p.y_raw, p.dy_raw, p.group, p.n_groups);
  return p;
}

}  // namespace

PeriodogramResult compute_periodogram(const VelocityData& data, const PeriodogramOptions& options) {
  const Prepared p = prepare(data, data.velocity_m_s);
  return run(p, data, options);
}

PeriodogramResult compute_residual_periodogram(const VelocityData& data, const std::vector<Planet>& planets,
                                               const PeriodogramOptions& options) {
  std::vector<double> y = data.velocity_m_s;
  for (const Planet& pl : planets)
    for (std::size_t i = 0; i < y.size(); ++i) y[i] -= planet_velocity(pl, data.time_days[i]);
  const Prepared p = prepare(data, y);
  PeriodogramResult r = run(p, data, options);
  std::string s = fmt::format("residuals after {} fixed planet(s):", planets.size());
  for (const Planet& pl : planets) s += fmt::format(" P = {:.6g} d, K = {:.4g} m/s;", pl.period_days, pl.semi_amplitude_m_s);
  r.residual_note = s;
  return r;
}

std::string PeriodogramResult::BriefReport() const {
  if (!success) return message;
  if (peaks.empty()) return message + "; no peak";
  const Peak& p = peaks.front();
  return fmt::format("{}; strongest peak P = {:.6g} d, power {:.4g}, FAP {:.3g}", message, p.period_days, p.power,
                     p.fap);
}

std::string PeriodogramResult::FullReport() const {
  std::string s = BriefReport() + "\n";
  if (!residual_note.empty()) s += residual_note + "\n";
  s += offsets_note + "\n";
  for (std::size_t i = 0; i < peaks.size(); ++i) {
    const Peak& p = peaks[i];
    s += fmt::format("{:3d} P = {:14.6f} d  f = {:.7f} /d  power {:.5g}  FAP {:.3g}{}\n", i + 1, p.period_days,
                     p.frequency_per_day, p.power, p.fap,
                     p.alias_of >= 0 ? fmt::format("  possible alias of #{}", p.alias_of + 1) : "");
  }
  return s;
}

}  // namespace apsides
