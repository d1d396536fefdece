#include "activity/activity_json.h"

#include <cmath>

namespace apsides {

namespace {
nlohmann::json number_or_null(double x) { return std::isfinite(x) ? nlohmann::json(x) : nlohmann::json(nullptr); }
}  // namespace

nlohmann::json activity_json(const ActivityResult& r) {
  nlohmann::json j;
  j["indicators"] = nlohmann::json::array();
  for (const IndicatorPeriodogram& ip : r.periodograms) {
    nlohmann::json peaks = nlohmann::json::array();
    for (const Peak& p : ip.periodogram.peaks)
      peaks.push_back({{"period_d", p.period_days}, {"frequency_per_d", p.frequency_per_day}, {"power", p.power},
                       {"fap", p.fap}});
    j["indicators"].push_back({{"name", ip.name}, {"n_points", ip.n_points}, {"weighted", ip.weighted}, {"peaks", peaks}});
  }
  j["shared_signals"] = nlohmann::json::array();
  for (const SharedSignal& s : r.shared)
    j["shared_signals"].push_back({{"velocity_period_d", s.velocity_period_days},
                                   {"indicator", s.indicator},
                                   {"indicator_period_d", s.indicator_period_days},
                                   {"indicator_fap", s.indicator_fap},
                                   {"harmonic", s.harmonic},
                                   {"note", s.note()}});
  j["correlations"] = nlohmann::json::array();
  for (const IndicatorCorrelation& c : r.correlations)
    j["correlations"].push_back({{"indicator", c.indicator},
                                 {"instrument", c.instrument},
                                 {"against", c.against},
                                 {"n", c.n},
                                 {"pearson_r", number_or_null(c.pearson_r)},
                                 {"pearson_p", number_or_null(c.pearson_p)},
                                 {"spearman_rho", number_or_null(c.spearman_rho)},
                                 {"spearman_p", number_or_null(c.spearman_p)}});
  j["rotation_hint_d"] = number_or_null(r.rotation_hint_days);
  j["rotation_hint_source"] = r.rotation_hint_source;
  j["notes"] = r.notes;
  return j;
}

}  // namespace apsides
