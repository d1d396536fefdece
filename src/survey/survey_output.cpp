// The survey's tables and population figure (survey.h).
#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <nlohmann/json.hpp>

#include "apsides/orbit.h"
#include "apsides/survey.h"

namespace apsides {
namespace {

using json = nlohmann::json;

// Round-trip precision, empty for NaN.
std::string cell(double x) { return std::isfinite(x) ? fmt::format("{:.10g}", x) : std::string(); }

// RFC 4180 quoting where needed.
std::string quoted(const std::string& s) {
  if (s.find_first_of(",\"\n") == std::string::npos) return s;
  std::string out = "\"";
  for (char c : s) out += c == '"' ? std::string("\"\"") : std::string(1, c);
  return out + "\"";
}

json num(double x) { return std::isfinite(x) ? json(x) : json(nullptr); }

// One row per planet; a star without planets (or failed) one row with empty planet columns.
template <typename Row>
void for_each_row(const std::vector<StarRecord>& records, Row row) {
  for (const StarRecord& r : records) {
    if (r.planets.empty()) row(r, nullptr);
    for (const SurveyPlanet& p : r.planets) row(r, &p);
  }
}

}  // namespace

std::string survey_csv(const std::vector<StarRecord>& records) {
  std::string out = "star,n_selected,planet,period_d,K_ms,ecc,msini_mearth,a_au,ln_bayes,fap,status,error\n";
  for_each_row(records, [&](const StarRecord& r, const SurveyPlanet* p) {
    out += fmt::format("{},{},{},{},{},{},{},{},{},{},{},{}\n", quoted(r.name), r.n_selected >= 0 ? std::to_string(r.n_selected) : "",
                       p ? quoted(p->label) : "", p ? cell(p->period_d) : "", p ? cell(p->K_ms) : "", p ? cell(p->ecc) : "",
                       p ? cell(p->msini_mearth) : "", p ? cell(p->a_au) : "", cell(r.ln_bayes), p ? cell(p->fap) : "",
                       r.status, quoted(r.error));
  });
  return out;
}

std::string survey_json(const std::vector<StarRecord>& records, SurveyStages stages) {
  json rows = json::array(), stars = json::array();
  std::size_t failed = 0;
  for_each_row(records, [&](const StarRecord& r, const SurveyPlanet* p) {
    rows.push_back({{"star", r.name},
                    {"n_selected", r.n_selected >= 0 ? json(r.n_selected) : json(nullptr)},
                    {"planet", p ? json(p->label) : json(nullptr)},
                    {"period_d", p ? num(p->period_d) : json(nullptr)},
                    {"K_ms", p ? num(p->K_ms) : json(nullptr)},
                    {"ecc", p ? num(p->ecc) : json(nullptr)},
                    {"msini_mearth", p ? num(p->msini_mearth) : json(nullptr)},
                    {"a_au", p ? num(p->a_au) : json(nullptr)},
                    {"ln_bayes", num(r.ln_bayes)},
                    {"fap", p ? num(p->fap) : json(nullptr)},
                    {"status", r.status},
                    {"error", r.error}});
  });
  for (const StarRecord& r : records) {
    failed += r.status == "failed";
    stars.push_back({{"star", r.name}, {"id", r.id}, {"project", r.project}, {"status", r.status}, {"error", r.error},
                     {"n_selected", r.n_selected >= 0 ? json(r.n_selected) : json(nullptr)},
                     {"host_mass_msun", num(r.host_mass_msun)}, {"folder", "stars/" + r.id}});
  }
  json j{{"stages", to_string(stages)}, {"n_stars", records.size()}, {"n_failed", failed}, {"rows", rows}, {"stars", stars},
         {"notes", {"one row per star and planet; a star with no planet or a failed star has one row with null planet columns",
                    "values are posterior medians (stages all) or maximum a posteriori (search)",
                    "ln_bayes = ln Z(n_selected) - ln Z(n_selected - 1); fap = Baluev FAP of the peak that admitted the planet"}}};
  return j.dump(2) + "\n";
}

std::string write_survey_figure(const std::vector<StarRecord>& records, const std::string& dir, FigureFormat format) {
  PopulationFigureData d;
  std::vector<double> hosts;
  for (const StarRecord& r : records) {
    if (r.status == "failed") continue;
    bool any = false;
    for (const SurveyPlanet& p : r.planets) {
      if (!(p.period_d > 0) || !std::isfinite(p.period_d) || (std::isnan(p.msini_mearth) && std::isnan(p.a_au))) continue;
      d.period_d.push_back(p.period_d);
      d.mass.push_back(p.msini_mearth > 0 ? p.msini_mearth : std::numeric_limits<double>::quiet_NaN());
      d.a_au.push_back(p.a_au > 0 ? p.a_au : std::numeric_limits<double>::quiet_NaN());
      any = true;
    }
    if (any && std::isfinite(r.host_mass_msun)) hosts.push_back(r.host_mass_msun);
  }
  if (d.period_d.empty()) return "";
  if (!hosts.empty()) {
    std::sort(hosts.begin(), hosts.end());
    const std::size_t n = hosts.size();
    const double m = n % 2 ? hosts[n / 2] : 0.5 * (hosts[n / 2 - 1] + hosts[n / 2]);
    const auto [lo, hi] = std::minmax_element(d.period_d.begin(), d.period_d.end());
    const double p0 = *lo / 3.0, p1 = *hi * 3.0;
    for (int i = 0; i <= 200; ++i) {
      const double p = p0 * std::pow(p1 / p0, i / 200.0);
      d.line_period_d.push_back(p);
      d.line_a_au.push_back(semi_major_axis_au(p, m, 0.0));  // Kepler's third law, P^2 proportional to a^3
    }
    d.line_label = fmt::format("P² ∝ a³ for the median host, {:.3g} M☉", m);
  }
  FigureOptions o;
  o.format = format;
  o.title = fmt::format("Survey: {} planet(s) around {} star(s)", d.period_d.size(), hosts.size());
  o.height_px = 1000;
  return write_population_figure(d, figure_path(dir, "population", format), o).path;
}

}  // namespace apsides
