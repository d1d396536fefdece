// The project file: one TOML file naming the star, the data, the model and the settings
// of every stage. Every key has a default, so a project can be three lines:
//
//   [[velocities]]
//   file = "rv.csv"
//
// Keys (defaults in brackets); unknown keys are input errors naming the key:
//   [star]        name [""], mass_msun [unset], mass_err_msun [0], radius_rsun [unset],
//                 radius_err_rsun [0]
//   [[velocities]] file (required, relative to the project file), instrument [from file],
//                 velocity_unit ["m/s"],
//                 time_offset [none: times must be full BJD] days added to every time of
//                   the file, for reduced times (2457000 for BJD - 2457000, 2400000.5 for
//                   MJD; 0 keeps times as given); the rule is in data.h, "Reduced times",
//                 repeats ["keep" | "average" | "error"] for a repeated (time, instrument)
//                   pair (data.h RepeatPolicy),
//                 indicators [every extra column] names of the extra columns kept as
//                   activity indicators (a name that is no column, or a column empty on
//                   every row, is an error),
//                 columns [from the header row] names of every column, in order, for a
//                   file without a header (first three: time, velocity, uncertainty)
//   [[transits]]  file (required), planet [the file's planet column, else "b"; given, it
//                 labels every row], fit_jitter [false], time_offset [none]
//
// The real files in tests/data/real read with at most three lines beyond `file`, e.g. a
// CDS fixed-width table with reduced times and activity indicators:
//   [[velocities]]
//   file = "l9859_harps_cloutier2019.dat"
//   time_offset = 2457000
//   columns = ["time", "velocity", "uncertainty", "halpha", "e_halpha", ...]
//   [search]      max_planets [3], min_period_d [auto], max_period_d [auto],
//                 oversample [10], fap_threshold [0.001]
//   [model]       planets [from search], trend ["none" | "linear" | "quadratic"],
//                 fit_jitter [true], eccentricity ["uniform" | "beta" | "circular"],
//                 periastron_outside_star [true], dynamics ["keplerian" | "nbody"],
//                 osculating_epoch [the data's reference epoch] (BJD_TDB; N-body only)
//   [nbody]       planets [the planets with transit times], step_fraction [1/30],
//                 step_days [0: from step_fraction], coplanar [true], inclination_deg [90]
//   [priors]      "<param>" = { dist = "...", ... } overriding defaults (prior.h)
//   [sampler]     walkers [0 = auto], max_steps [200000], ess_target [2000],
//                 rhat_max [1.01], min_tau_multiple [50], seed [1], checkpoint_steps [1000]
//   [evidence]    live_points [500], seed [1], bayes_threshold [5]
//   [limits]      enabled [false], period_cells [20], mass_cells [20], injections [20],
//                 seed [1], min_period_d [1], max_period_d [3 x baseline],
//                 min_msini_mearth, max_msini_mearth [0.1 x / 100 x the mass of K = rms],
//                 noise ["residuals" | "white"], recovery ["first_step" | "search" |
//                 "periodogram"], eccentricity ["beta" | "uniform" | "circular"]
//                 (injection-recovery completeness, limits.h)
#pragma once

#include <limits>
#include <map>
#include <limits>
#include <optional>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/keplerian_model.h"
#include "apsides/prior.h"

namespace apsides {

struct StarSpec {
  std::string name;
  std::optional<double> mass_msun;
  double mass_err_msun = 0.0;
  std::optional<double> radius_rsun;
  double radius_err_rsun = 0.0;
};

struct VelocitySource {
  std::string file;  // resolved path
  VelocityFileOptions options;  // instrument, unit, time_offset, repeats, indicators, columns
  std::string origin;  // "project.toml:LINE" of the block, for messages
};

struct TransitSource {
  std::string file;  // resolved path
  std::string planet;  // "" (no `planet` key): the file's planet column, else "b"
  bool fit_jitter = false;
  std::optional<double> time_offset_days;  // days added to every time (data.h, "Reduced times")
  std::string origin;  // "project.toml:LINE" of the block, for messages
};

struct SearchSettings {
  int max_planets = 3;
  std::optional<double> min_period_d;
  std::optional<double> max_period_d;
  double oversample = 10.0;
  double fap_threshold = 1e-3;
  double min_bic_improvement = 10.0;  // see SearchOptions (fit.h)
};

// How the planets move: independent Keplerian orbits (default), or interacting planets
// integrated as an N-body system (nbody_model.h).
enum class Dynamics { kKeplerian, kNbody };
std::string to_string(Dynamics d);

// [model] osculating_epoch and the [nbody] table (nbody_model.h documents the model).
struct NbodySettings {
  int n_planets = 0;                 // [nbody] planets; 0: the planets with transit times
  double osculating_epoch_bjd = std::numeric_limits<double>::quiet_NaN();  // NaN: the data's reference epoch
  double step_fraction = 1.0 / 30.0; // [nbody] step_fraction: WH step / innermost period
  double step_days = 0.0;            // [nbody] step_days: > 0 a fixed step (below half the innermost period)
  bool coplanar = true;              // [nbody] coplanar
  double inclination_deg = 90.0;     // [nbody] inclination_deg: the common inclination
  std::string Validate() const;      // "" or "nbody.field = value: must be ..."
};

struct ModelSettings {
  Dynamics dynamics = Dynamics::kKeplerian;  // [model] dynamics = "keplerian" | "nbody"
  std::optional<int> planets;
  Trend trend = Trend::kNone;
  bool fit_jitter = true;
  EccentricityPriorKind eccentricity = EccentricityPriorKind::kUniform;
  // Exclude orbits whose periastron lies inside the star (needs [star] mass_msun).
  bool periastron_outside_star = true;
  NoiseSettings noise;  // [noise] kind, kernel, per_instrument_amplitude
  // Centre of the GP's rotation-period prior ([noise] rotation_period_d, else the strongest
  // activity-indicator signal, activity.h) and where it came from; NaN: no hint.
  double rotation_hint_d = std::numeric_limits<double>::quiet_NaN();
  std::string rotation_hint_source;
};

// One [priors] entry, validated but not yet bound to a layout.
struct PriorSpec {
  std::string parameter;  // e.g. "b.period_d", "north.jitter_ms", "eccentricity"
  Prior prior;
  std::optional<EccentricityPrior> eccentricity;  // for "eccentricity" / "b.eccentricity"
  std::string origin;  // "project.toml:LINE" of the entry, for messages
};

struct SamplerSettings {
  int walkers = 0;  // 0: 4 x number of parameters, at least 32, even
  long max_steps = 200000;
  double ess_target = 2000.0;
  double rhat_max = 1.01;
  double min_tau_multiple = 50.0;
  unsigned long long seed = 1;
  long checkpoint_steps = 1000;
};

struct EvidenceSettings {
  int live_points = 500;
  unsigned long long seed = 1;
  double bayes_threshold = 5.0;
};

// [limits]: injection-recovery detection limits (limits.h documents each setting).
// What an injection is added to: the residuals of the model the search selects on the
// data, or white noise with the stated uncertainties and that model's fitted jitters.
enum class InjectionNoise { kResiduals, kWhite };
// How a recovery is decided: the search's first step (one-planet fit seeded at the
// strongest residual peak), the whole planet search, or a periodogram threshold alone.
enum class RecoveryTest { kFirstStep, kFullSearch, kPeriodogram };
std::string to_string(InjectionNoise n);   // "residuals", "white"
std::string to_string(RecoveryTest r);     // "first_step", "search", "periodogram"
// Parsers; throw InputError naming `where` for anything else.
InjectionNoise parse_injection_noise(const std::string& text, const std::string& where);
RecoveryTest parse_recovery_test(const std::string& text, const std::string& where);

struct LimitsSettings {
  bool enabled = false;  // `analyze` adds a detection-limits section to its report
  int period_cells = 20;
  int mass_cells = 20;
  int injections = 20;   // per cell
  unsigned long long seed = 1;
  std::optional<double> min_period_d, max_period_d;          // unset: 1 d, 3 x baseline
  std::optional<double> min_msini_mearth, max_msini_mearth;  // unset: from the residual rms
  InjectionNoise noise = InjectionNoise::kResiduals;
  RecoveryTest recovery = RecoveryTest::kFirstStep;
  EccentricityPriorKind eccentricity = EccentricityPriorKind::kBeta;  // Kipping 2013
};

struct Project {
  std::string path;  // the project file
  std::string text;  // its full text, kept for the results file
  StarSpec star;
  std::vector<VelocitySource> velocities;
  std::vector<TransitSource> transits;
  SearchSettings search;
  ModelSettings model;
  std::vector<PriorSpec> priors;
  SamplerSettings sampler;
  EvidenceSettings evidence;
  LimitsSettings limits;

  // Data held in memory instead of read from files (project_from_data; the Python module
  // also keeps a loaded project's data here). When set, load_velocities / load_transits
  // return them instead of reading `velocities` / `transits`.
  std::optional<VelocityData> velocity_data;
  std::optional<TransitData> transit_data;
  NbodySettings nbody;

  // Reads and combines every [[velocities]] file (a missing file is reported with the
  // project line naming it), then checks that every [priors] key naming an instrument
  // ("<instrument>.offset_ms", "<instrument>.jitter_ms") names one present in the data.
  VelocityData load_velocities() const;
  TransitData load_transits() const;     // all [[transits]] files, planet label per file
  // Planets (letter index, b = 0) whose [[transits]] block sets fit_jitter = true.
  std::vector<int> transit_jitter_planets() const;
};

// Reads and validates a project file; throws InputError ("file:line: key: problem").
Project load_project(const std::string& path);
// Same from a string (for tests); `base_dir` resolves relative data paths.
Project parse_project(const std::string& text, const std::string& path_for_messages,
                      const std::string& base_dir);

// A project whose data are given in memory (data_arrays.h) rather than named by
// [[velocities]] / [[transits]] blocks: `settings_toml` may hold every other table of a
// project file ([star], [search], [model], [priors], [sampler], [evidence]; "" for the
// defaults), validated as in a file named `name_for_messages`; a [[velocities]] or
// [[transits]] block in it is an input error. The [priors] instrument names are checked
// against `velocities` here. `text` (what a results file stores and a resumed run compares)
// is the settings plus a line describing the data and a checksum of them, so a run started
// on other numbers is not resumed.
Project project_from_data(VelocityData velocities, TransitData transits, const std::string& settings_toml,
                          const std::string& name_for_messages = "<arrays>");

}  // namespace apsides
