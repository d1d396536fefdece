// Many stars (`apsides survey CATALOG --out DIR`): the same job on every star of a
// catalog, one star per compute thread (or per MPI rank under mpirun) at a time from a
// queue (parallel.h), each star's results in its own folder, a table of everything found.
//
// The catalog is a TOML file of our own keys (paths relative to the catalog):
//
//   stages = "scan,search"        # optional default for --stages
//   [[star]]
//   project = "stars/Lark-7/project.toml"   # required: a project file (project.h)
//   name = "Lark-7"               # optional; default: [star] name, else the file name
//
// or a folder: every *.toml in it, and every */project.toml one level down (sorted).
// Catalog errors (missing or unreadable catalog, no stars, unknown keys) are InputErrors;
// a star's own bad input (missing project file, bad data) fails that star only.
//
// Stages. `all` (default) runs `apsides analyze` (analysis.h) on the star; `scan,search`
// runs the periodogram and the planet search only (MAP orbits, no evidence: ln B empty);
// `search` the search alone; `scan` the periodogram alone (the strongest peak's period and
// FAP in the table, no planets).
//
// Outputs in DIR: stars/<id>/ (the stage outputs of each star: analyze's results.h5,
// summary.json, report.md and figures/, or periodogram.json and search.json) and
// stars/<id>/star.json, the star's record, written atomically last: a star is finished
// exactly when its record exists, whether it succeeded or failed (with its error).
// `resume` skips stars whose record was written for the same project text and stages.
// At the end: survey.csv and survey.json (one row per star and planet: star,
// n_selected, planet, period_d, K_ms, ecc, msini_mearth, a_au, ln_bayes, fap, status,
// error; a star with no planet or a failed star has one row with empty planet columns) and
// figures/population.<fmt> (m sin i against P, and a against P on log-log axes with
// P^2 proportional to a^3 for the median host mass). ln_bayes = ln Z(n) - ln Z(n - 1) of
// the selected n (analyze only); fap = the Baluev FAP of the residual peak that admitted
// the planet in the search. Values are posterior medians (analyze) or MAP (search).
// Under MPI, DIR must be on a file system every rank sees.
#pragma once

#include <functional>
#include <limits>
#include <string>
#include <vector>

#include "apsides/figures.h"
#include "apsides/parallel.h"

namespace apsides {

struct SurveyStar {
  std::string id;       // folder name under DIR/stars (unique; letters, digits, - _ .)
  std::string name;     // as shown in the table
  std::string project;  // path of the project file
  std::string origin;   // where the catalog names it ("catalog.toml:12" or the folder)
};

enum class SurveyStages { kAll, kScan, kSearch, kScanSearch };
std::string to_string(SurveyStages s);  // "all", "scan", "search", "scan,search"
// "all" (or "analyze"), "scan", "search", "scan,search" (either order); InputError naming
// `where` otherwise.
SurveyStages parse_survey_stages(const std::string& text, const std::string& where);

struct SurveyCatalog {
  std::string path;
  std::vector<SurveyStar> stars;
  std::string stages;  // the catalog's `stages` key ("" when absent)
};
// Reads a catalog file or folder (above). Throws InputError (missing, empty, bad keys).
SurveyCatalog load_catalog(const std::string& path);

struct SurveyOptions {
  std::string out_dir;
  SurveyStages stages = SurveyStages::kAll;
  bool resume = false;
  int threads = 2;            // stars run at once in each process (each star on one thread)
  FigureFormat format = FigureFormat::kPng;
  long max_steps = -1;        // analyze: > 0 overrides [sampler] max_steps
  int live_points = -1;       // analyze: > 0 overrides [evidence] live_points
  std::string Validate() const;
};

struct SurveyPlanet {
  std::string label;
  double period_d = std::numeric_limits<double>::quiet_NaN();
  double K_ms = std::numeric_limits<double>::quiet_NaN();
  double ecc = std::numeric_limits<double>::quiet_NaN();
  double msini_mearth = std::numeric_limits<double>::quiet_NaN();
  double a_au = std::numeric_limits<double>::quiet_NaN();
  double fap = std::numeric_limits<double>::quiet_NaN();
};

// One star's outcome: what star.json holds.
struct StarRecord {
  std::string id, name, project;
  std::string stages;        // to_string(SurveyStages)
  std::string key;           // fingerprint of the project text and stages (resume)
  std::string status = "failed";  // "ok" or "failed"
  std::string error;         // the one-line error of a failed star
  int n_selected = -1;       // -1: not determined (scan only, or failed)
  double ln_bayes = std::numeric_limits<double>::quiet_NaN();
  double host_mass_msun = std::numeric_limits<double>::quiet_NaN();
  std::vector<SurveyPlanet> planets;
  double seconds = 0.0;      // wall time of the star (not in the tables)

  std::string to_json() const;
  static StarRecord from_json(const std::string& text);  // throws on malformed text
};

// The fingerprint a star's record must carry to be reused.
std::string star_key(const SurveyStar& star, SurveyStages stages);
// Runs one star into out_dir/stars/<id>/ and writes its record there; never throws
// (failures are recorded).
StarRecord run_star(const SurveyStar& star, const SurveyOptions& options);

struct SurveyResult {
  std::vector<StarRecord> records;   // catalog order
  std::size_t reused = 0, failed = 0;
  std::string csv_path, json_path;
  std::vector<std::string> figures;
  FarmStats stats;
  std::string message = "Survey was not run.";
  std::string BriefReport() const;
};

// The survey. Under MPI every rank calls it; the root hands out stars and writes the
// tables (the other ranks get an empty result whose message says so). `session` null:
// this process's threads only. `on_star` (root) after each star finishes.
SurveyResult run_survey(const SurveyCatalog& catalog, const SurveyOptions& options,
                        const ParallelSession* session = nullptr,
                        const std::function<void(const StarRecord&, std::size_t done, std::size_t total)>& on_star = {});

// The tables from records (catalog order): CSV text and JSON text.
std::string survey_csv(const std::vector<StarRecord>& records);
std::string survey_json(const std::vector<StarRecord>& records, SurveyStages stages);
// The population figure of the successful stars' planets; "" when there is no planet.
std::string write_survey_figure(const std::vector<StarRecord>& records, const std::string& dir, FigureFormat format);

}  // namespace apsides
