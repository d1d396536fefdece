// analyze_activity and the activity reports (activity.h).
#include <algorithm>
#include <cmath>

#include <fmt/format.h>

#include "apsides/activity.h"
#include "apsides/error.h"

namespace apsides {

namespace {

void add_correlations(const VelocityData& data, const std::string& name, const std::vector<double>& y,
                      const std::string& against, std::vector<IndicatorCorrelation>& out) {
  for (int k = 0; k < static_cast<int>(data.n_instruments()); ++k) {
    const IndicatorPoints pts = data.indicator_points(name, k);
    if (pts.size() < 5) continue;
    std::vector<double> yy(pts.size());
    for (std::size_t i = 0; i < pts.size(); ++i) yy[i] = y[pts.point[i]];
    IndicatorCorrelation c = correlate(pts.value, yy);
    c.indicator = name;
    c.instrument = data.instrument_names[static_cast<std::size_t>(k)];
    c.against = against;
    out.push_back(c);
  }
}

void find_rotation_hint(const ActivityOptions& options, const PeriodogramResult& velocities, ActivityResult& r) {
  const double pmax = options.rotation_max_days > 0 ? options.rotation_max_days : 0.5 * velocities.baseline_days;
  double best_fap = options.fap_level;
  for (const IndicatorPeriodogram& ip : r.periodograms)
    for (const Peak& pk : ip.periodogram.peaks)
      if (pk.fap < best_fap && pk.period_days >= options.rotation_min_days && pk.period_days <= pmax &&
          pk.alias_of < 0 && !at_sampling_frequency(velocities, pk.frequency_per_day)) {
        best_fap = pk.fap;
        r.rotation_hint_days = pk.period_days;
        r.rotation_hint_source = fmt::format("{} periodogram, peak at {:.4g} d, FAP {:.2g}", ip.name, pk.period_days, pk.fap);
      }
}

}  // namespace

ActivityResult analyze_activity(const VelocityData& data, const PeriodogramResult& velocities,
                                const PeriodogramOptions& periodogram_options, const ActivityOptions& options,
                                const std::vector<double>* residuals) {
  if (const std::string e = options.Validate(); !e.empty()) throw InputError("activity options: " + e);
  ActivityResult r;
  FrequencyGrid grid;
  grid.f0 = velocities.min_frequency_per_day;
  grid.df = velocities.frequency_step_per_day;
  grid.nf = velocities.frequency_per_day.size();
  PeriodogramOptions po = periodogram_options;
  po.n_peaks = options.n_peaks;
  for (const std::string& name : data.indicator_names()) {
    const IndicatorPoints all = data.indicator_points(name);
    std::size_t groups = 0;
    for (int k = 0; k < static_cast<int>(data.n_instruments()); ++k)
      if (data.indicator_points(name, k).size() > 0) ++groups;
    if (all.size() < std::max<std::size_t>(6, groups + 3)) {
      r.notes.push_back(fmt::format("indicator {}: {} values, too few for a periodogram", name, all.size()));
      continue;
    }
    r.periodograms.push_back(indicator_periodogram(data, name, grid, po));
    add_correlations(data, name, data.velocity_m_s, "velocities", r.correlations);
    if (residuals != nullptr && residuals->size() == data.size())
      add_correlations(data, name, *residuals, "residuals", r.correlations);
  }
  r.shared = shared_signals(velocities, r.periodograms, options.fap_level);
  find_rotation_hint(options, velocities, r);
  return r;
}

std::string ActivityResult::BriefReport() const {
  if (periodograms.empty()) return "no activity indicators";
  std::string s = fmt::format("{} activity indicator(s)", periodograms.size());
  if (std::isfinite(rotation_hint_days)) s += fmt::format("; strongest indicator signal {:.4g} d", rotation_hint_days);
  s += shared.empty() ? "; no velocity peak shared with an indicator"
                      : fmt::format("; {} velocity peak(s) shared with an indicator", shared.size());
  return s;
}

std::string ActivityResult::FullReport() const {
  std::string s = BriefReport() + "\n";
  for (const IndicatorPeriodogram& ip : periodograms) {
    s += fmt::format("indicator {} ({} values{}):", ip.name, ip.n_points, ip.weighted ? "" : ", unweighted");
    for (const Peak& pk : ip.periodogram.peaks)
      s += fmt::format("  {:.4g} d (FAP {:.2g})", pk.period_days, pk.fap);
    s += "\n";
  }
  for (const SharedSignal& sh : shared)
    s += fmt::format("velocity peak {:.6g} d: {}\n", sh.velocity_period_days, sh.note());
  if (!correlations.empty()) {
    s += fmt::format("{:<12} {:<12} {:<10} {:>5} {:>8} {:>9} {:>8} {:>9}\n", "indicator", "instrument", "against",
                     "n", "Pearson", "p", "Spearman", "p");
    for (const IndicatorCorrelation& c : correlations)
      s += fmt::format("{:<12} {:<12} {:<10} {:>5} {:>8.3f} {:>9.2g} {:>8.3f} {:>9.2g}\n", c.indicator, c.instrument,
                       c.against, c.n, c.pearson_r, c.pearson_p, c.spearman_rho, c.spearman_p);
  }
  for (const std::string& n : notes) s += n + "\n";
  return s;
}

}  // namespace apsides
