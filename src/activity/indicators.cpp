// Indicator periodograms, shared velocity peaks, correlations (activity.h).
#include "apsides/activity.h"

#include <algorithm>
#include <cmath>
#include <numeric>

#include <boost/math/distributions/students_t.hpp>
#include <fmt/format.h>

#include "apsides/error.h"

namespace apsides {

std::string ActivityOptions::Validate() const {
  if (!(fap_level > 0.0 && fap_level < 1.0)) return fmt::format("fap_level = {}: must be in (0, 1)", fap_level);
  if (n_peaks < 1) return fmt::format("n_peaks = {}: must be >= 1", n_peaks);
  if (!(rotation_min_days > 0.0)) return fmt::format("rotation_min_days = {}: must be > 0", rotation_min_days);
  if (!(rotation_max_days >= 0.0)) return fmt::format("rotation_max_days = {}: must be >= 0", rotation_max_days);
  return "";
}

std::string SharedSignal::note() const {
  if (harmonic)
    return fmt::format("half of {}'s {:.4g} d (first harmonic of a signal in {}, FAP {:.2g})", indicator,
                       indicator_period_days, indicator, indicator_fap);
  return fmt::format("also in {} at {:.4g} d (FAP {:.2g})", indicator, indicator_period_days, indicator_fap);
}

namespace {

// The indicator's points as a velocity-shaped data set: one zero point per instrument in
// the periodogram, weights from the indicator's uncertainties when every point has one.
VelocityData indicator_as_series(const VelocityData& data, const IndicatorPoints& pts, bool& weighted) {
  VelocityData s;
  s.reference_epoch_bjd = data.reference_epoch_bjd;
  s.instrument_names = data.instrument_names;
  s.time_days = pts.time_days;
  s.velocity_m_s = pts.value;
  s.instrument = pts.instrument;
  weighted = std::all_of(pts.uncertainty.begin(), pts.uncertainty.end(),
                         [](double u) { return std::isfinite(u) && u > 0.0; });
  s.uncertainty_m_s = weighted ? pts.uncertainty : std::vector<double>(pts.size(), 1.0);
  for (std::size_t i = 0; i < pts.size(); ++i) s.origin.push_back(data.origin.at(pts.point[i]));
  return s;
}

std::vector<double> average_ranks(const std::vector<double>& v) {
  std::vector<std::size_t> idx(v.size());
  std::iota(idx.begin(), idx.end(), 0);
  std::sort(idx.begin(), idx.end(), [&](std::size_t a, std::size_t b) { return v[a] < v[b]; });
  std::vector<double> rank(v.size());
  for (std::size_t i = 0; i < idx.size();) {
    std::size_t j = i;
    while (j + 1 < idx.size() && v[idx[j + 1]] == v[idx[i]]) ++j;
    const double r = 0.5 * static_cast<double>(i + j) + 1.0;  // ties share their average rank
    for (std::size_t k = i; k <= j; ++k) rank[idx[k]] = r;
    i = j + 1;
  }
  return rank;
}

double pearson(const std::vector<double>& x, const std::vector<double>& y) {
  const double n = static_cast<double>(x.size());
  const double mx = std::accumulate(x.begin(), x.end(), 0.0) / n;
  const double my = std::accumulate(y.begin(), y.end(), 0.0) / n;
  double sxy = 0.0, sxx = 0.0, syy = 0.0;
  for (std::size_t i = 0; i < x.size(); ++i) {
    sxy += (x[i] - mx) * (y[i] - my);
    sxx += (x[i] - mx) * (x[i] - mx);
    syy += (y[i] - my) * (y[i] - my);
  }
  if (!(sxx > 0.0 && syy > 0.0)) return std::numeric_limits<double>::quiet_NaN();
  return std::clamp(sxy / std::sqrt(sxx * syy), -1.0, 1.0);
}

// Two-sided p-value of a correlation coefficient r from n pairs: t = r sqrt((n-2)/(1-r^2)).
double correlation_p(double r, std::size_t n) {
  if (!std::isfinite(r) || n < 3) return std::numeric_limits<double>::quiet_NaN();
  if (std::abs(r) >= 1.0) return 0.0;
  const double dof = static_cast<double>(n - 2);
  const double t = std::abs(r) * std::sqrt(dof / (1.0 - r * r));
  return 2.0 * boost::math::cdf(boost::math::complement(boost::math::students_t(dof), t));
}

}  // namespace

IndicatorCorrelation correlate(const std::vector<double>& x, const std::vector<double>& y) {
  if (x.size() != y.size()) throw std::invalid_argument("correlate: sizes differ");
  std::vector<double> a, b;
  for (std::size_t i = 0; i < x.size(); ++i)
    if (std::isfinite(x[i]) && std::isfinite(y[i])) {
      a.push_back(x[i]);
      b.push_back(y[i]);
    }
  IndicatorCorrelation c;
  c.n = a.size();
  if (c.n < 3) return c;
  c.pearson_r = pearson(a, b);
  c.pearson_p = correlation_p(c.pearson_r, c.n);
  c.spearman_rho = pearson(average_ranks(a), average_ranks(b));
  c.spearman_p = correlation_p(c.spearman_rho, c.n);
  return c;
}

IndicatorPeriodogram indicator_periodogram(const VelocityData& data, const std::string& name,
                                           const FrequencyGrid& grid, const PeriodogramOptions& options) {
  const IndicatorPoints pts = data.indicator_points(name);
  IndicatorPeriodogram ip;
  ip.name = name;
  ip.n_points = pts.size();
  const VelocityData series = indicator_as_series(data, pts, ip.weighted);
  PeriodogramOptions o = options;
  o.fixed_grid = grid;
  o.bootstrap = 0;
  ip.periodogram = compute_periodogram(series, o);
  return ip;
}

bool at_sampling_frequency(const PeriodogramResult& velocities, double f) {
  const double width = velocities.baseline_days > 0 ? 1.0 / velocities.baseline_days : 0.0;
  for (const Peak& w : velocities.window_peaks)
    if (w.power >= 0.1 && std::abs(f - w.frequency_per_day) < width) return true;
  return false;
}

std::vector<SharedSignal> shared_signals(const PeriodogramResult& velocities,
                                         const std::vector<IndicatorPeriodogram>& indicators, double fap_level) {
  std::vector<SharedSignal> out;
  const double width = velocities.baseline_days > 0 ? 1.0 / velocities.baseline_days : 0.0;
  for (std::size_t v = 0; v < velocities.peaks.size(); ++v) {
    const double fv = velocities.peaks[v].frequency_per_day;
    for (const IndicatorPeriodogram& ip : indicators)
      for (const Peak& pk : ip.periodogram.peaks) {
        if (!(pk.fap < fap_level) || pk.alias_of >= 0 || at_sampling_frequency(velocities, pk.frequency_per_day)) continue;
        const bool same = std::abs(fv - pk.frequency_per_day) < width;
        const bool harmonic = !same && std::abs(fv - 2.0 * pk.frequency_per_day) < width;
        if (!same && !harmonic) continue;
        out.push_back({static_cast<int>(v), velocities.peaks[v].period_days, ip.name, pk.period_days, pk.fap, harmonic});
        break;  // one flag per (velocity peak, indicator): its strongest matching peak
      }
  }
  return out;
}

std::string rotation_caution(double period_days, double rotation_days) {
  if (!(std::isfinite(period_days) && std::isfinite(rotation_days) && rotation_days > 0)) return "";
  for (int h = 1; h <= 2; ++h)
    if (std::abs(period_days - rotation_days / h) < 0.05 * rotation_days / h)
      return h == 1 ? fmt::format("P = {:.4g} d is at the star's rotation period ({:.4g} d): likely activity, "
                                  "not a planet, unless shown otherwise",
                                  period_days, rotation_days)
                    : fmt::format("P = {:.4g} d is at P_rot/{} of the star's rotation ({:.4g} d): possibly activity",
                                  period_days, h, rotation_days);
  return "";
}

}  // namespace apsides
