// One star of a survey, and the survey over threads and ranks (survey.h).
#include "apsides/survey.h"

#include <H5Cpp.h>
#include <fmt/format.h>

#include <chrono>
#include <cmath>
#include <cstdint>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>

#include "apsides/analysis.h"
#include "apsides/error.h"
#include "apsides/fit.h"
#include "apsides/periodogram.h"
#include "apsides/project.h"
#include "apsides/results_file.h"

namespace apsides {
namespace fs = std::filesystem;
using json = nlohmann::json;
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

json num(double x) { return std::isfinite(x) ? json(x) : json(nullptr); }
double get_num(const json& j, const char* key) {
  const auto it = j.find(key);
  return it == j.end() || !it->is_number() ? kNaN : it->get<double>();
}

std::string read_text(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) return "";
  std::stringstream ss;
  ss << in.rdbuf();
  return ss.str();
}

void write_text_atomic(const std::string& path, const std::string& text) {
  const std::string tmp = path + ".tmp-apsides";
  {
    std::ofstream out(tmp, std::ios::binary | std::ios::trunc);
    if (!out) throw InputError(fmt::format("{}: cannot be written", path));
    out << text;
    out.flush();
    if (!out) throw InputError(fmt::format("{}: write failed", path));
  }
  fs::rename(tmp, path);
}

// The admitting FAP of the search step whose peak lies nearest in frequency to P.
double admitting_fap(double period_d, const std::vector<double>& step_periods, const std::vector<double>& step_faps) {
  double best = kNaN, distance = std::numeric_limits<double>::infinity();
  for (std::size_t k = 0; k < step_periods.size() && k < step_faps.size(); ++k) {
    if (!std::isfinite(step_periods[k])) continue;
    const double d = std::fabs(1.0 / step_periods[k] - 1.0 / period_d);
    if (d < distance) {
      distance = d;
      best = step_faps[k];
    }
  }
  return best;
}

json peaks_json(const PeriodogramResult& r) {
  json peaks = json::array();
  for (const Peak& p : r.peaks)
    peaks.push_back({{"period_d", p.period_days}, {"frequency_per_d", p.frequency_per_day}, {"power", p.power}, {"fap", num(p.fap)}});
  return peaks;
}

// The periodogram and/or the planet search (MAP), outputs in dir.
void run_quick_stages(const Project& pr, SurveyStages stages, const fs::path& dir, StarRecord& rec) {
  const VelocityData data = pr.load_velocities();
  const TransitData transits = pr.load_transits();
  if (stages == SurveyStages::kScan || stages == SurveyStages::kScanSearch) {
    PeriodogramOptions po;
    if (pr.search.min_period_d) po.min_period_days = *pr.search.min_period_d;
    if (pr.search.max_period_d) po.max_period_days = *pr.search.max_period_d;
    po.oversample = pr.search.oversample;
    po.threads = 1;
    const PeriodogramResult scan = compute_periodogram(data, po);
    write_text_atomic((dir / "periodogram.json").string(),
                      json{{"peaks", peaks_json(scan)}, {"message", scan.message}}.dump(2) + "\n");
    if (stages == SurveyStages::kScan && !scan.peaks.empty()) {
      SurveyPlanet peak;
      peak.label = "peak";
      peak.period_d = scan.peaks[0].period_days;
      peak.fap = scan.peaks[0].fap;
      rec.planets.push_back(peak);
    }
  }
  if (stages == SurveyStages::kScan) return;
  const SearchResult r = search_planets(search_problem(pr, data, transits), search_options(pr));
  rec.n_selected = r.selected_n_planets;
  std::vector<double> step_p, step_fap;
  json steps = json::array();
  for (const SearchStep& s : r.steps) {
    step_p.push_back(s.admitting_period_days);
    step_fap.push_back(s.admitting_fap);
    steps.push_back({{"n_planets", s.n_planets}, {"ln_like", num(s.log_likelihood)}, {"bic", num(s.bic)},
                     {"admitting_fap", num(s.admitting_fap)}, {"admitting_period_d", num(s.admitting_period_days)}});
  }
  json planets = json::array();
  for (const PlanetSummary& p : derive_planets(r.best(), pr.star.mass_msun)) {
    SurveyPlanet sp{p.label, p.period_d, p.K_ms, p.ecc, p.msini_mearth, p.a_au, admitting_fap(p.period_d, step_p, step_fap)};
    rec.planets.push_back(sp);
    planets.push_back({{"label", p.label}, {"period_d", num(p.period_d)}, {"K_ms", num(p.K_ms)}, {"ecc", num(p.ecc)},
                       {"omega_deg", num(p.omega_deg)}, {"t_conj_bjd", num(p.t_conj_bjd)}, {"msini_mearth", num(p.msini_mearth)},
                       {"a_au", num(p.a_au)}});
  }
  write_text_atomic((dir / "search.json").string(),
                    json{{"selected_n_planets", r.selected_n_planets}, {"message", r.message}, {"steps", steps},
                         {"planets", planets}, {"values", "maximum a posteriori (no sampling)"}}
                            .dump(2) + "\n");
}

// `apsides analyze` on the star; the table's values from its summary and results file.
void run_full_analysis(const Project& pr, const SurveyOptions& options, const fs::path& dir, StarRecord& rec) {
  AnalysisOptions o;
  o.out_dir = dir.string();
  o.resume = options.resume;
  o.format = options.format;
  o.threads = 1;
  o.max_steps = options.max_steps;
  o.live_points = options.live_points;
  const AnalysisOutcome out = run_analysis(pr, o);
  const json s = json::parse(read_text(out.summary_path));
  rec.n_selected = s.at("selected_n_planets").get<int>();
  if (!out.converged) rec.status = "not_converged";
  double lz_sel = kNaN, lz_prev = kNaN;
  for (const json& row : s.at("comparison")) {
    const int n = row.at("n_planets").get<int>();
    if (n == rec.n_selected) lz_sel = get_num(row, "ln_evidence");
    if (n == rec.n_selected - 1) lz_prev = get_num(row, "ln_evidence");
  }
  rec.ln_bayes = lz_sel - lz_prev;
  std::vector<double> step_p, step_fap;
  {
    ResultsFile f(out.results_path, ResultsFile::Mode::kReadOnly);
    if (f.exists("/search/admitting_fap")) {
      step_fap = f.read_vector("/search/admitting_fap");
      step_p = f.read_vector("/search/admitting_period_d");
    }
  }
  auto median = [](const json& p, const char* key) {
    const auto it = p.find(key);
    return it == p.end() || !it->is_object() ? kNaN : get_num(*it, "median");
  };
  for (const json& p : s.at("planets")) {
    SurveyPlanet sp;
    sp.label = p.at("label").get<std::string>();
    sp.period_d = median(p, "period_d");
    sp.K_ms = median(p, "K_ms");
    sp.ecc = median(p, "ecc");
    sp.msini_mearth = median(p, "msini_mearth");
    sp.a_au = median(p, "a_au");
    sp.fap = admitting_fap(sp.period_d, step_p, step_fap);
    rec.planets.push_back(sp);
  }
}

// One line: the first line of a message.
std::string one_line(const std::string& s) { return s.substr(0, s.find('\n')); }

}  // namespace

std::string SurveyOptions::Validate() const {
  if (out_dir.empty()) return "out_dir is empty";
  if (threads < 1 || threads > 1024) return fmt::format("threads = {}: must be in [1, 1024]", threads);
  return "";
}

std::string StarRecord::to_json() const {
  json planets_j = json::array();
  for (const SurveyPlanet& p : planets)
    planets_j.push_back({{"label", p.label}, {"period_d", num(p.period_d)}, {"K_ms", num(p.K_ms)}, {"ecc", num(p.ecc)},
                         {"msini_mearth", num(p.msini_mearth)}, {"a_au", num(p.a_au)}, {"fap", num(p.fap)}});
  json j{{"id", id}, {"name", name}, {"project", project}, {"stages", stages}, {"key", key}, {"status", status},
         {"error", error}, {"n_selected", n_selected}, {"ln_bayes", num(ln_bayes)}, {"host_mass_msun", num(host_mass_msun)},
         {"planets", planets_j}, {"seconds", seconds}};
  return j.dump(2) + "\n";
}

StarRecord StarRecord::from_json(const std::string& text) {
  const json j = json::parse(text);
  StarRecord r;
  r.id = j.at("id").get<std::string>();
  r.name = j.at("name").get<std::string>();
  r.project = j.at("project").get<std::string>();
  r.stages = j.at("stages").get<std::string>();
  r.key = j.at("key").get<std::string>();
  r.status = j.at("status").get<std::string>();
  r.error = j.at("error").get<std::string>();
  r.n_selected = j.at("n_selected").get<int>();
  r.ln_bayes = get_num(j, "ln_bayes");
  r.host_mass_msun = get_num(j, "host_mass_msun");
  r.seconds = get_num(j, "seconds");
  for (const json& p : j.at("planets"))
    r.planets.push_back({p.at("label").get<std::string>(), get_num(p, "period_d"), get_num(p, "K_ms"), get_num(p, "ecc"),
                         get_num(p, "msini_mearth"), get_num(p, "a_au"), get_num(p, "fap")});
  return r;
}

std::string star_key(const SurveyStar& star, SurveyStages stages) {
  std::uint64_t h = 1469598103934665603ULL;  // FNV-1a
  for (unsigned char c : "apsides-survey-v1|" + to_string(stages) + "|" + star.project + "|" + read_text(star.project))
    h = (h ^ c) * 1099511628211ULL;
  return fmt::format("{:016x}", h);
}

StarRecord run_star(const SurveyStar& star, const SurveyOptions& options) {
  const auto t0 = std::chrono::steady_clock::now();
  StarRecord rec;
  rec.id = star.id;
  rec.name = star.name;
  rec.project = star.project;
  rec.stages = to_string(options.stages);
  rec.key = star_key(star, options.stages);
  const fs::path dir = fs::path(options.out_dir) / "stars" / star.id;
  try {
    std::error_code ec;
    fs::create_directories(dir, ec);
    if (!fs::is_directory(dir)) throw InputError(fmt::format("{}: cannot create the star's folder", dir.string()));
    const Project pr = load_project(star.project);
    if (pr.star.mass_msun) rec.host_mass_msun = *pr.star.mass_msun;
    rec.status = "ok";
    if (options.stages == SurveyStages::kAll) run_full_analysis(pr, options, dir, rec);
    else run_quick_stages(pr, options.stages, dir, rec);
  } catch (const InputError& e) {
    rec.status = "failed";
    rec.error = one_line(e.what());
  } catch (const H5::Exception& e) {
    rec.status = "failed";
    rec.error = one_line(fmt::format("HDF5 error in {}: {}", e.getFuncName(), e.getDetailMsg()));
  } catch (const std::exception& e) {
    rec.status = "failed";
    rec.error = one_line(e.what());
  }
  if (rec.status == "failed") {
    rec.planets.clear();
    rec.n_selected = -1;
    rec.ln_bayes = kNaN;
  }
  rec.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  try {
    write_text_atomic((dir / "star.json").string(), rec.to_json());
  } catch (const std::exception& e) {
    rec.status = "failed";
    rec.error = one_line(e.what());
  }
  return rec;
}

std::string SurveyResult::BriefReport() const {
  return fmt::format("Survey: {} star(s), {} failed, {} reused from an earlier run.", records.size(), failed, reused);
}

SurveyResult run_survey(const SurveyCatalog& catalog, const SurveyOptions& options, const ParallelSession* session,
                        const std::function<void(const StarRecord&, std::size_t, std::size_t)>& on_star) {
  if (const std::string msg = options.Validate(); !msg.empty()) throw InputError("survey: " + msg);
  if (catalog.stars.empty()) throw InputError(fmt::format("{}: the catalog lists no stars", catalog.path));
  const bool root = !session || session->is_root();
  SurveyResult result;
  result.records.resize(catalog.stars.size());
  std::vector<long> pending;
  const fs::path dir(options.out_dir);
  if (root) {
    std::error_code ec;
    fs::create_directories(dir / "stars", ec);
    fs::create_directories(dir / "figures", ec);
    if (!fs::is_directory(dir / "stars")) throw InputError(fmt::format("{}: cannot create the output directory", options.out_dir));
    for (std::size_t i = 0; i < catalog.stars.size(); ++i) {
      const SurveyStar& s = catalog.stars[i];
      bool reuse = false;
      if (options.resume) {
        const std::string text = read_text((dir / "stars" / s.id / "star.json").string());
        try {
          if (!text.empty()) {
            StarRecord r = StarRecord::from_json(text);
            reuse = r.key == star_key(s, options.stages) && r.id == s.id;
            if (reuse) result.records[i] = std::move(r);
          }
        } catch (const std::exception&) {
          reuse = false;  // a damaged record: run the star again
        }
      }
      if (reuse) ++result.reused;
      else pending.push_back(static_cast<long>(i));
    }
  }
  std::size_t done = result.reused;
  FarmOptions fo;
  fo.threads = options.threads;
  result.stats = run_farm(
      session, pending,
      [&](long i) { return run_star(catalog.stars[static_cast<std::size_t>(i)], options).to_json(); },
      [&](long i, const std::string& bytes) {
        result.records[static_cast<std::size_t>(i)] = StarRecord::from_json(bytes);
        ++done;
        if (on_star) on_star(result.records[static_cast<std::size_t>(i)], done, catalog.stars.size());
      },
      [] {}, fo);
  if (!root) {
    result.message = fmt::format("Rank {}: ran survey stars; rank 0 writes the tables.", session->rank());
    return result;
  }
  for (const StarRecord& r : result.records) result.failed += r.status == "failed";
  result.csv_path = (dir / "survey.csv").string();
  result.json_path = (dir / "survey.json").string();
  write_text_atomic(result.csv_path, survey_csv(result.records));
  write_text_atomic(result.json_path, survey_json(result.records, options.stages));
  if (const std::string f = write_survey_figure(result.records, (dir / "figures").string(), options.format); !f.empty())
    result.figures.push_back(f);
  result.message = fmt::format("Survey of {} star(s) ({} run now, {} reused, {} failed) on {} rank(s) x {} thread(s) in {:.1f} s.",
                               result.records.size(), result.stats.units_done, result.reused, result.failed,
                               session ? session->size() : 1, options.threads, result.stats.wall_seconds);
  return result;
}

}  // namespace apsides
