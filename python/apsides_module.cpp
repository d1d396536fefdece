// apsides._apsides: the Python binding of the apsides library (pybind11).
//
// A thin layer: every computation is a call into apsides::core, the library the command
// line uses. Arrays cross without copies where the layout allows (contiguous float64 in;
// results handed to numpy together with the std::vector that owns them). The stage calls
// (fit, sample, compare, analyze) return the same JSON documents as the commands' --json,
// built by the same library functions (json_outputs.h, analysis.h) and parsed by Python's
// json module. Long calls release the GIL. apsides::InputError becomes
// apsides.InputError, a subclass of ValueError, with the library's one-line message.
// The documented public API is apsides/__init__.py, which re-exports these.
#include <H5Cpp.h>
#include <fmt/format.h>
#include <pybind11/numpy.h>
#include <pybind11/pybind11.h>
#include <pybind11/stl.h>

#include <chrono>
#include <cmath>
#include <fstream>
#include <limits>
#include <memory>
#include <optional>
#include <set>
#include <stdexcept>
#include <sstream>
#include <string>
#include <vector>

#include "apsides/analysis.h"
#include "apsides/data_arrays.h"
#include "apsides/ephemeris.h"
#include "apsides/error.h"
#include "apsides/json_outputs.h"
#include "apsides/kepler.h"
#include "apsides/keplerian_model.h"
#include "apsides/orbit.h"
#include "apsides/periodogram.h"
#include "apsides/posterior.h"
#include "apsides/posterior_model.h"
#include "apsides/progress.h"
#include "apsides/project.h"
#include "apsides/project_stages.h"
#include "apsides/results_file.h"
#include "apsides/sampling_run.h"

namespace py = pybind11;
using namespace pybind11::literals;

namespace apsides::python {
namespace {

using Array = py::array_t<double, py::array::c_style | py::array::forcecast>;

// ---- Arrays and small helpers -------------------------------------------------------------

// A numpy array that takes over a vector's storage (no copy); numpy frees it.
py::array_t<double> to_numpy(std::vector<double>&& values, std::vector<py::ssize_t> shape) {
  auto* owned = new std::vector<double>(std::move(values));
  py::capsule owner(owned, [](void* p) { delete static_cast<std::vector<double>*>(p); });
  return py::array_t<double>(shape, owned->data(), owner);
}
py::array_t<double> to_numpy(std::vector<double>&& values) {
  const auto n = static_cast<py::ssize_t>(values.size());
  return to_numpy(std::move(values), {n});
}

std::span<const double> span_of(const Array& a) { return {a.data(), static_cast<std::size_t>(a.size())}; }
std::vector<py::ssize_t> shape_of(const py::array& a) { return {a.shape(), a.shape() + a.ndim()}; }

py::object json_value(const std::string& text) { return py::module_::import("json").attr("loads")(text); }

void require(bool ok, const std::string& message) {
  if (!ok) throw InputError(message);
}

// The library's Project behind a Python object: an apsides.Project (its `_core`) or a core.
std::shared_ptr<Project> project_of(const py::object& obj) {
  py::object core = py::hasattr(obj, "_core") ? obj.attr("_core") : obj;
  try {
    return core.cast<std::shared_ptr<Project>>();
  } catch (const py::cast_error&) {
    throw py::type_error("expected an apsides.Project (Project.from_toml(path) or Project(velocities=...))");
  }
}

// Optional integer / number arguments: None or a value in range, else InputError naming it.
std::optional<long> opt_int(const std::optional<long>& v, const char* name, long lo, long hi) {
  if (v) require(*v >= lo && *v <= hi, fmt::format("{} = {}: must be between {} and {}", name, *v, lo, hi));
  return v;
}

// ---- Progress and Ctrl-C ----------------------------------------------------------------

// Polled from the thread running a long call (GIL released): every 0.2 s it takes the GIL
// and lets Python run its signal handlers. A KeyboardInterrupt is kept and raised once the
// library has stopped cleanly (a sampling run checkpoints first).
class InterruptWatch {
 public:
  bool stop_requested() {
    if (error_) return true;
    const auto now = std::chrono::steady_clock::now();
    if (now - last_ < std::chrono::milliseconds(200)) return false;
    last_ = now;
    py::gil_scoped_acquire gil;
    if (PyErr_CheckSignals() != 0) error_ = std::make_unique<py::error_already_set>();
    return error_ != nullptr;
  }
  void raise_if_interrupted() {
    if (error_) throw *error_;
  }

 private:
  std::chrono::steady_clock::time_point last_ = std::chrono::steady_clock::now();
  std::unique_ptr<py::error_already_set> error_;
};

// The sampling bar of `apsides sample` and `apsides analyze`.
std::function<void(long, long, const std::string&)> sampling_bar(const std::shared_ptr<std::unique_ptr<ProgressBar>>& bar,
                                                                 bool quiet) {
  return [bar, quiet](long step, long max_steps, const std::string& status) {
    if (!*bar) *bar = std::make_unique<ProgressBar>("sampling", static_cast<double>(max_steps), quiet);
    (*bar)->update(static_cast<double>(step), status);
    if (step >= max_steps) (*bar)->finish(status);
  };
}

// ---- Kepler, velocity, mass ---------------------------------------------------------------

py::object solve_kepler_py(Array M, Array e) {
  const bool scalar = M.ndim() == 0 && e.ndim() == 0;
  if (shape_of(M) != shape_of(e)) {
    py::module_ np = py::module_::import("numpy");
    py::tuple b = np.attr("broadcast_arrays")(M, e);
    M = Array::ensure(np.attr("ascontiguousarray")(b[0]));
    e = Array::ensure(np.attr("ascontiguousarray")(b[1]));
  }
  const std::size_t n = static_cast<std::size_t>(M.size());
  const double* m = M.data();
  const double* ecc = e.data();
  for (std::size_t i = 0; i < n; ++i) {
    require(std::isfinite(m[i]), fmt::format("M[{}] = {}: must be finite", i, m[i]));
    require(ecc[i] >= 0.0 && ecc[i] < 1.0, fmt::format("e[{}] = {}: an eccentricity must be in [0, 1)", i, ecc[i]));
  }
  std::vector<double> E(n);
  {
    py::gil_scoped_release release;
    solve_kepler_batch({m, n}, {ecc, n}, E);
  }
  if (scalar) return py::float_(E[0]);
  return to_numpy(std::move(E), shape_of(M));
}

void check_orbit(double P, double K, double e, double omega) {
  require(std::isfinite(P) && P > 0.0, fmt::format("P = {}: the period must be > 0 (days)", P));
  require(std::isfinite(K) && K >= 0.0, fmt::format("K = {}: the semi-amplitude must be >= 0 (m/s)", K));
  require(e >= 0.0 && e < 1.0, fmt::format("e = {}: an eccentricity must be in [0, 1)", e));
  require(std::isfinite(omega), fmt::format("omega = {}: must be finite (radians)", omega));
}

py::object radial_velocity_py(Array t, double P, double K, double e, double omega, double t_conj) {
  check_orbit(P, K, e, omega);
  require(std::isfinite(t_conj), fmt::format("t_conj = {}: must be finite (BJD_TDB, days)", t_conj));
  const std::size_t n = static_cast<std::size_t>(t.size());
  const double* tt = t.data();
  for (std::size_t i = 0; i < n; ++i) require(std::isfinite(tt[i]), fmt::format("t[{}] = {}: must be finite", i, tt[i]));
  std::vector<double> v(n);
  {
    py::gil_scoped_release release;
    // Times relative to a whole day near t_conj: a full BJD keeps its precision.
    const double ref = std::floor(t_conj);
    const Planet planet = Planet::from_elements(P, K, e, omega, t_conj - ref);
    for (std::size_t i = 0; i < n; ++i) v[i] = planet_velocity(planet, tt[i] - ref);
  }
  if (t.ndim() == 0) return py::float_(v[0]);
  return to_numpy(std::move(v), shape_of(t));
}

double minimum_mass_one(double P, double K, double e, double star_mass, std::string unit) {
  require(unit == "mjup" || unit == "mearth" || unit == "msun",
          fmt::format("unit = '{}': must be \"mjup\", \"mearth\" or \"msun\"", unit));
  check_orbit(P, K, e, 0.0);
  require(std::isfinite(star_mass) && star_mass > 0.0,
          fmt::format("star_mass = {}: the star's mass must be > 0 (solar masses)", star_mass));
  const double m = minimum_mass_msun(P, K, e, star_mass);
  if (unit == "mjup") return msun_to_mjup(m);
  if (unit == "mearth") return msun_to_mearth(m);
  return m;
}

// ---- Projects -------------------------------------------------------------------------------

std::shared_ptr<Project> load_project_py(const std::string& path) {
  auto pr = std::make_shared<Project>();
  {
    py::gil_scoped_release release;
    *pr = load_project(path);
    // Loaded once: every stage then uses these (Project::load_velocities returns them).
    pr->velocity_data = pr->load_velocities();
    pr->transit_data = pr->load_transits();
  }
  return pr;
}

std::shared_ptr<Project> project_from_arrays_py(Array time, Array velocity, Array uncertainty,
                                                std::vector<std::string> instrument, const std::string& unit,
                                                Array t_epoch, Array t_time, Array t_uncertainty,
                                                std::vector<std::string> t_planet, const std::string& settings,
                                                const std::string& name) {
  VelocityArrays va;
  va.time_bjd = span_of(time);
  va.velocity = span_of(velocity);
  va.uncertainty = span_of(uncertainty);
  va.instrument = std::move(instrument);
  va.unit = parse_velocity_unit(unit, "velocity_unit");
  TransitArrays ta;
  ta.epoch = span_of(t_epoch);
  ta.time_bjd = span_of(t_time);
  ta.uncertainty_days = span_of(t_uncertainty);
  ta.planet = std::move(t_planet);
  auto pr = std::make_shared<Project>();
  py::gil_scoped_release release;
  *pr = project_from_data(velocity_data_from_arrays(va), transit_data_from_arrays(ta), settings, name);
  return pr;
}

// `apsides ephemeris`: the transit times of a file (`path`) or of arrays, one planet.
py::object ephemeris_py(const std::string& path, Array t_epoch, Array t_time, Array t_uncertainty,
                        std::vector<std::string> t_planet, std::string planet, int next, std::optional<double> from_bjd,
                        std::optional<double> to_bjd, long long epoch, bool scale_errors, double outlier_sigma,
                        bool drop_outliers, double companion_period, const std::string& model, bool ttv) {
  EphemerisOptions opt;
  opt.user_epoch = epoch;
  opt.scale_errors = scale_errors;
  opt.outlier_sigma = outlier_sigma;
  opt.drop_outliers = drop_outliers;
  opt.search_ttv = ttv;
  opt.companion_period_days = companion_period;
  require(next >= 0, fmt::format("next = {}: must be >= 0", next));
  require(!to_bjd || from_bjd, "to_bjd needs from_bjd");
  opt.n_next = next;
  opt.from_bjd = from_bjd.value_or(std::numeric_limits<double>::quiet_NaN());
  opt.to_bjd = to_bjd.value_or(std::numeric_limits<double>::quiet_NaN());
  opt.prediction_model = parse_ephemeris_model(model, "model");
  if (const std::string e = opt.Validate(); !e.empty()) throw InputError(e);
  std::string text;
  {
    py::gil_scoped_release release;
    TransitData all;
    if (!path.empty()) {
      all = read_transit_file(path, TransitFileOptions{});
    } else {
      TransitArrays ta;
      ta.epoch = span_of(t_epoch);
      ta.time_bjd = span_of(t_time);
      ta.uncertainty_days = span_of(t_uncertainty);
      ta.planet = std::move(t_planet);
      all = transit_data_from_arrays(ta);
    }
    const std::string name = path.empty() ? std::string("transits") : path;
    std::set<std::string> labels(all.planet.begin(), all.planet.end());
    std::string known;
    for (const auto& l : labels) known += (known.empty() ? "" : ", ") + (l.empty() ? "(none)" : l);
    TransitData data;
    if (!planet.empty()) {
      require(labels.count(planet) > 0, fmt::format("planet = {}: {} has no transits of that planet (labels: {})",
                                                     planet, name, known));
      data = all.for_planet(planet);
    } else {
      require(labels.size() <= 1, fmt::format("{}: holds transits of several planets ({}); choose one with planet=", name, known));
      data = all;
      planet = labels.empty() ? "" : *labels.begin();
    }
    const EphemerisResult r = fit_ephemeris(data, opt);
    if (r.termination != "converged") throw std::runtime_error(r.message);
    text = ephemeris_json(r, name, planet, all.ignored_columns);
  }
  return json_value(text);
}

py::dict velocities_dict(const Project& pr) {
  const VelocityData d = pr.load_velocities();
  std::vector<double> t(d.size());
  for (std::size_t i = 0; i < d.size(); ++i) t[i] = d.reference_epoch_bjd + d.time_days[i];
  py::list inst;
  for (int i : d.instrument) inst.append(d.instrument_names[static_cast<std::size_t>(i)]);
  return py::dict("time_bjd"_a = to_numpy(std::move(t)), "time_days"_a = to_numpy(std::vector<double>(d.time_days)),
                  "velocity_ms"_a = to_numpy(std::vector<double>(d.velocity_m_s)),
                  "uncertainty_ms"_a = to_numpy(std::vector<double>(d.uncertainty_m_s)),
                  "instrument"_a = py::module_::import("numpy").attr("array")(inst, "dtype"_a = "U"),
                  "reference_epoch_bjd"_a = d.reference_epoch_bjd);
}

py::dict transits_dict(const Project& pr) {
  const TransitData d = pr.load_transits();
  std::vector<double> t(d.size()), epoch(d.size());
  for (std::size_t i = 0; i < d.size(); ++i) {
    t[i] = d.reference_epoch_bjd + d.time_days[i];
    epoch[i] = static_cast<double>(d.epoch[i]);
  }
  return py::dict("epoch"_a = py::module_::import("numpy").attr("asarray")(to_numpy(std::move(epoch)), "dtype"_a = "int64"),
                  "time_bjd"_a = to_numpy(std::move(t)), "time_days"_a = to_numpy(std::vector<double>(d.time_days)),
                  "uncertainty_d"_a = to_numpy(std::vector<double>(d.uncertainty_days)),
                  "planet"_a = py::module_::import("numpy").attr("array")(py::cast(d.planet), "dtype"_a = "U"),
                  "reference_epoch_bjd"_a = d.reference_epoch_bjd);
}

// ---- Stages ---------------------------------------------------------------------------------

py::tuple periodogram_py(const py::object& project, std::optional<double> min_period, std::optional<double> max_period,
                         double oversample, const std::string& normalization, const std::string& method, int peaks,
                         int window_peaks, int bootstrap, unsigned long long seed, int threads) {
  const auto pr = project_of(project);
  PeriodogramOptions opt;
  if (min_period) opt.min_period_days = *min_period;
  if (max_period) opt.max_period_days = *max_period;
  require(!min_period || *min_period > 0.0, fmt::format("min_period = {}: must be > 0 (days)", *min_period));
  require(!max_period || *max_period > 0.0, fmt::format("max_period = {}: must be > 0 (days)", *max_period));
  opt.oversample = oversample;
  opt.normalization = parse_normalization(normalization, "normalization");
  opt.method = parse_periodogram_method(method, "method");
  opt.n_peaks = peaks;
  opt.n_window_peaks = window_peaks;
  opt.bootstrap = bootstrap;
  opt.seed = seed;
  opt.threads = threads;
  if (const std::string e = opt.Validate(); !e.empty()) throw InputError(e);
  PeriodogramResult r;
  std::string doc;
  {
    py::gil_scoped_release release;
    const VelocityData data = pr->load_velocities();
    r = compute_periodogram(data, opt);
    doc = scan_json(r, data);
  }
  return py::make_tuple(json_value(doc), to_numpy(std::move(r.frequency_per_day)), to_numpy(std::move(r.power)),
                        to_numpy(std::move(r.window_power)));
}

py::object fit_py(const py::object& project, std::optional<long> planets, bool search, std::optional<long> max_planets,
                  std::optional<double> fap_threshold, std::optional<double> min_bic_improvement) {
  const auto pr = project_of(project);
  opt_int(planets, "planets", 0, 9);
  opt_int(max_planets, "max_planets", 0, 9);
  require(!(planets && search), "give planets=N or search=True, not both");
  require(!fap_threshold || (*fap_threshold > 0.0 && *fap_threshold < 1.0),
          fmt::format("fap_threshold = {}: must be in (0, 1)", fap_threshold.value_or(0.0)));
  require(!min_bic_improvement || *min_bic_improvement >= 0.0,
          fmt::format("min_bic_improvement = {}: must be >= 0", min_bic_improvement.value_or(0.0)));
  std::string doc;
  {
    py::gil_scoped_release release;
    SearchProblem sp = search_problem(*pr, pr->load_velocities(), pr->load_transits());
    if (max_planets) sp.search.max_planets = static_cast<int>(*max_planets);
    if (fap_threshold) sp.search.fap_threshold = *fap_threshold;
    if (min_bic_improvement) sp.search.min_bic_improvement = *min_bic_improvement;
    // As `apsides fit`: planets=N, else [model] planets, else the search.
    std::optional<int> n;
    if (planets) n = static_cast<int>(*planets);
    else if (!search && pr->model.planets) n = *pr->model.planets;
    doc = fit_json(run_fit(sp, n), sp);
  }
  return json_value(doc);
}

py::object sample_py(const py::object& project, const std::string& out, std::optional<long> planets, bool resume,
                     std::optional<long> max_steps, std::optional<long> walkers, std::optional<long> seed, int threads,
                     bool quiet) {
  const auto pr = project_of(project);
  opt_int(planets, "planets", 0, 9);
  opt_int(max_steps, "max_steps", 1, 1000000000L);
  opt_int(walkers, "walkers", 4, 100000);
  opt_int(seed, "seed", 0, std::numeric_limits<long>::max());
  require(threads >= 1 && threads <= 64, fmt::format("threads = {}: must be between 1 and 64", threads));
  require(!out.empty(), "out: give the results file to write (HDF5)");
  SamplingRunOptions o;
  o.out_path = out;
  o.resume = resume;
  o.max_steps = max_steps.value_or(-1);
  o.walkers = static_cast<int>(walkers.value_or(-1));
  o.seed = seed.value_or(-1);
  o.threads = threads;
  if (planets) o.n_planets = static_cast<int>(*planets);
  auto bar = std::make_shared<std::unique_ptr<ProgressBar>>();
  o.progress = sampling_bar(bar, quiet);
  InterruptWatch watch;
  o.should_stop = [&watch] { return watch.stop_requested(); };
  SamplingRun run;
  {
    py::gil_scoped_release release;
    run = sample_project(*pr, o);
    if (*bar) (*bar)->finish();
    bar->reset();
  }
  if (!quiet && !run.note.empty()) py::print(run.note, "file"_a = py::module_::import("sys").attr("stderr"));
  if (!run.failure.empty()) throw std::runtime_error(run.failure);
  if (run.result.termination == SamplerTermination::kFailed)
    throw std::runtime_error("sampling failed: " + run.result.message);
  watch.raise_if_interrupted();
  return json_value(sampling_json(run.result));
}

py::object compare_py(const py::object& project, std::optional<long> max_planets, long min_planets,
                      std::optional<long> live_points, std::optional<long> seed, std::optional<double> threshold,
                      int threads, long slice_steps, std::optional<double> jumps_per_step,
                      const std::optional<std::string>& out, bool quiet) {
  const auto pr = project_of(project);
  opt_int(max_planets, "max_planets", 0, 9);
  opt_int(min_planets, "min_planets", 0, 9);
  opt_int(live_points, "live_points", 20, 100000);
  opt_int(seed, "seed", 0, std::numeric_limits<long>::max());
  require(slice_steps >= 0, fmt::format("slice_steps = {}: must be >= 0 (0: the default)", slice_steps));
  require(!jumps_per_step || (*jumps_per_step >= 0.0 && *jumps_per_step <= 100.0),
          fmt::format("jumps_per_step = {}: must be between 0 and 100", jumps_per_step.value_or(0.0)));
  require(threads >= 1 && threads <= 64, fmt::format("threads = {}: must be between 1 and 64", threads));
  // The options as `apsides compare` sets them: arguments over the project's tables.
  CompareOptions opt;
  opt.max_planets = max_planets ? static_cast<int>(*max_planets) : pr->search.max_planets;
  opt.min_planets = static_cast<int>(min_planets);
  opt.nested.live_points = live_points ? static_cast<int>(*live_points) : pr->evidence.live_points;
  opt.nested.seed = seed ? static_cast<std::uint64_t>(*seed) : pr->evidence.seed;
  opt.nested.threads = threads;
  opt.nested.slice_steps = static_cast<int>(slice_steps);
  if (jumps_per_step) opt.nested.jumps_per_step = *jumps_per_step;
  opt.bayes_threshold = threshold ? *threshold : pr->evidence.bayes_threshold;
  if (const std::string v = opt.Validate(); !v.empty()) throw InputError(v);
  std::string doc;
  {
    py::gil_scoped_release release;
    const VelocityData data = pr->load_velocities();
    const TransitData transits = pr->load_transits();
    auto bar = std::make_shared<std::unique_ptr<ProgressBar>>();
    int current_k = 0;
    opt.nested.progress = [bar, &current_k](long it, double ln_z, double ln_rem) {
      if (*bar)
        (*bar)->update(std::min(1.0, std::max(0.0, 1.0 - (ln_rem - ln_z) / 50.0)),
                       fmt::format("k = {}  iteration {}  ln Z {:.2f}", current_k, it, ln_z));
    };
    const CompareResult r = compare_project(*pr, data, transits, opt, [&](int k, const std::string& status) {
      if (!quiet && k == opt.min_planets)
        fmt::print(stderr, "Nested sampling for {}..{} planets: {} points, {} instrument(s), {} live points.\n",
                   opt.min_planets, opt.max_planets, data.size(), data.n_instruments(), opt.nested.live_points);
      current_k = k;
      *bar = std::make_unique<ProgressBar>(fmt::format("evidence k={}", k), 1.0, quiet);
      if (!quiet && !(*bar)->active()) fmt::print(stderr, "  {}\n", status);
    });
    bar->reset();
    if (out) save_comparison(*out, *pr, data, r);
    doc = compare_json(r, data);
  }
  return json_value(doc);
}

py::object analyze_py(const py::object& project, const std::string& out, bool resume, const std::string& format,
                      std::optional<long> max_steps, std::optional<long> live_points, int threads, bool quiet) {
  const auto pr = project_of(project);
  opt_int(max_steps, "max_steps", 10, 1000000000L);
  opt_int(live_points, "live_points", 20, 100000);
  require(threads >= 1 && threads <= 64, fmt::format("threads = {}: must be between 1 and 64", threads));
  require(!out.empty(), "out: give the output directory");
  AnalysisOptions o;
  o.out_dir = out;
  o.resume = resume;
  o.format = parse_figure_format(format, "format");
  o.max_steps = max_steps.value_or(-1);
  o.live_points = static_cast<int>(live_points.value_or(-1));
  o.threads = threads;
  const auto t0 = std::chrono::steady_clock::now();
  o.on_stage = [quiet, t0](const std::string& stage, const std::string& status) {
    if (quiet) return;
    const double s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    fmt::print(stderr, "[{:6.1f} s] {:<9} {}\n", s, stage, status);
  };
  auto bar = std::make_shared<std::unique_ptr<ProgressBar>>();
  o.on_sampling = sampling_bar(bar, quiet);
  AnalysisOutcome r;
  {
    py::gil_scoped_release release;
    r = run_analysis(*pr, o);
    if (*bar) (*bar)->finish();
    bar->reset();
  }
  std::ifstream in(r.summary_path);
  std::stringstream ss;
  ss << in.rdbuf();
  return json_value(ss.str());
}

// ---- The posterior as a callable -----------------------------------------------------------

class Model {
 public:
  Model(const py::object& project, int planets) {
    const auto pr = project_of(project);
    require(planets >= 0 && planets <= 9, fmt::format("planets = {}: must be between 0 and 9", planets));
    const SearchProblem sp = search_problem(*pr, pr->load_velocities(), pr->load_transits());
    const FitProblem fp = make_fit_problem(sp, planets);
    model_ = std::make_unique<PosteriorModel>(make_posterior(fp.data, fp.layout, fp.priors, fp.transits));
    reference_epoch_bjd_ = fp.data.reference_epoch_bjd;
    units_ = fp.layout.units();
  }

  // f at one theta (1-D) or at each row of a 2-D array (GIL released for the batch).
  template <double (PosteriorModel::*f)(std::span<const double>) const>
  py::object evaluate(const Array& theta) const {
    const std::size_t dim = model_->n_params();
    if (theta.ndim() == 1) {
      check_dim(static_cast<std::size_t>(theta.shape(0)));
      return py::float_(((*model_).*f)({theta.data(), dim}));
    }
    if (theta.ndim() != 2) throw InputError(fmt::format("theta has {} dimensions; give one point (1-D) or rows of points (2-D)", theta.ndim()));
    check_dim(static_cast<std::size_t>(theta.shape(1)));
    const std::size_t n = static_cast<std::size_t>(theta.shape(0));
    std::vector<double> out(n);
    {
      py::gil_scoped_release release;
      for (std::size_t i = 0; i < n; ++i) out[i] = ((*model_).*f)({theta.data() + i * dim, dim});
    }
    return to_numpy(std::move(out));
  }

  std::vector<std::string> names() const { return model_->names(); }
  const std::vector<std::string>& units() const { return units_; }
  std::size_t n_params() const { return model_->n_params(); }
  double reference_epoch_bjd() const { return reference_epoch_bjd_; }
  std::size_t n_points() const { return model_->n_points(); }

 private:
  void check_dim(std::size_t d) const {
    if (d != model_->n_params())
      throw InputError(fmt::format("theta has {} values; this model has {} parameters ({})", d, model_->n_params(),
                                   fmt::join(model_->names(), ", ")));
  }
  std::unique_ptr<PosteriorModel> model_;
  double reference_epoch_bjd_ = 0.0;
  std::vector<std::string> units_;
};

// ---- Results files ---------------------------------------------------------------------------

class Results {
 public:
  explicit Results(const std::string& path) : file_(std::make_unique<ResultsFile>(path, ResultsFile::Mode::kReadOnly)) {}

  const ResultsFile& file() const {
    if (!file_) throw InputError("the results file is closed");
    return *file_;
  }
  void close() { file_.reset(); }
  std::string path() const { return file().path(); }
  bool has_chains() const { return file().exists("/chains/positions"); }
  long steps() const { return has_chains() ? file().chain_steps() : 0; }
  int walkers() const { return has_chains() ? file().chain_walkers() : 0; }
  long stride() const { return has_chains() ? file().chain_stride() : 1; }
  // The burn-in the run recorded (/chains burn_in_steps), else the first half.
  long burn_in_steps() const {
    const ResultsFile& f = file();
    if (has_chains() && f.has_attribute("/chains", "burn_in_steps")) return static_cast<long>(f.int_attribute("/chains", "burn_in_steps"));
    return steps() / 2;
  }
  // The sampler step of each stored row: stride, 2 stride, ... (the file's /chains/step).
  py::object chain_steps() const {
    const long st = stride(), rows = steps() / st;
    std::vector<double> v(static_cast<std::size_t>(rows));
    for (long i = 0; i < rows; ++i) v[static_cast<std::size_t>(i)] = static_cast<double>((i + 1) * st);
    return py::module_::import("numpy").attr("asarray")(to_numpy(std::move(v)), "dtype"_a = "int64");
  }
  // The draws every posterior number of the file is computed from (stored steps after the
  // burn-in, at most `max_samples`: ResultsFile::select_steps), (draws x parameters).
  py::object samples(std::size_t max_samples) const {
    const ResultsFile& f = file();
    require(has_chains(), fmt::format("{}: holds no chains (not a sampling run)", f.path()));
    const auto d = static_cast<py::ssize_t>(f.chain_dim());
    const ResultsFile::StepSelection sel = f.select_steps(burn_in_steps(), f.chain_steps(), max_samples);
    std::vector<double> pos;
    if (sel.rows > 0) pos = f.read_chain_rows(sel.first, sel.last, sel.stride);
    const auto n = static_cast<py::ssize_t>(pos.size()) / std::max<py::ssize_t>(d, 1);
    return to_numpy(std::move(pos), {n, d});
  }
  std::vector<std::string> strings(const std::string& p) const {
    return file().exists(p) ? file().read_strings(p) : std::vector<std::string>{};
  }

  // (steps x walkers x parameters) positions and (steps x walkers) log-probabilities, read
  // once (on first use) and kept.
  py::object chains() const {
    read_chains();
    return chains_;
  }
  py::object log_prob() const {
    read_chains();
    return log_prob_;
  }

  py::object vector_or_none(const std::string& p) const {
    if (!file().exists(p)) return py::none();
    return to_numpy(file().read_vector(p));
  }

  py::dict summary() const {
    const RunSummary s = summarize_run(file());
    auto rows = [](const std::vector<SummaryRow>& v) {
      py::list out;
      for (const auto& r : v)
        out.append(py::dict("name"_a = r.name, "unit"_a = r.unit, "median"_a = r.q.median, "minus"_a = r.q.minus,
                            "plus"_a = r.q.plus));
      return out;
    };
    return py::dict("parameters"_a = rows(s.parameters), "derived"_a = rows(s.derived), "n_points"_a = s.n_points,
                    "instruments"_a = s.instruments, "baseline_d"_a = s.baseline_d, "n_planets"_a = s.n_planets,
                    "walkers"_a = s.walkers, "steps"_a = s.steps, "burn_in_steps"_a = s.burn_in_steps,
                    "rhat_max"_a = s.rhat_max, "ess_min"_a = s.ess_min, "tau_max"_a = s.tau_max,
                    "converged"_a = s.converged, "termination"_a = s.termination, "message"_a = s.message,
                    "has_star_mass"_a = s.has_star_mass);
  }

  py::dict derived() const {
    const RunSummary s = summarize_run(file());
    py::dict out;
    for (const auto& r : s.derived) out[py::str(r.name)] = vector_or_none("/derived/" + r.name);
    return out;
  }

  py::dict data() const {
    const ResultsFile& f = file();
    std::vector<long long> idx = f.read_ints("/data/instrument");
    const std::vector<std::string> names = f.read_strings("/data/instrument_names");
    py::list inst;
    for (long long i : idx) inst.append(names.at(static_cast<std::size_t>(i)));
    py::object t = vector_or_none("/data/time_d");  // time - reference_epoch_bjd (older files: /data/time_bjd)
    if (!t.is_none() && f.has_attribute("/data", "reference_epoch_bjd"))
      t = t + py::float_(f.double_attribute("/data", "reference_epoch_bjd"));
    else if (t.is_none())
      t = vector_or_none("/data/time_bjd");
    return py::dict("time_bjd"_a = t, "velocity_ms"_a = vector_or_none("/data/velocity_ms"),
                    "uncertainty_ms"_a = vector_or_none("/data/uncertainty_ms"),
                    "instrument"_a = py::module_::import("numpy").attr("array")(inst, "dtype"_a = "U"));
  }

  py::dict diagnostics() const {
    py::dict out;
    for (const char* k : {"rhat", "ess_bulk", "ess_tail", "tau"}) out[k] = vector_or_none(std::string("/diagnostics/") + k);
    return out;
  }

  std::string report() const { return summarize_run(file()).FullReport(); }
  py::object summary_document() const { return json_value(summary_json(file())); }

 private:
  void read_chains() const {
    if (chains_) return;
    const ResultsFile& f = file();
    require(has_chains(), fmt::format("{}: holds no chains (not a sampling run)", f.path()));
    const long st = f.chain_stride(), rows = f.chain_steps() / st;  // stored rows: steps st, 2 st, ...
    const auto w = static_cast<py::ssize_t>(f.chain_walkers());
    const auto d = static_cast<py::ssize_t>(f.chain_dim());
    std::vector<double> pos, lp;
    if (rows > 0) pos = f.read_chain_rows(st, rows * st, st, &lp);
    chains_ = to_numpy(std::move(pos), {rows, w, d});
    log_prob_ = to_numpy(std::move(lp), {rows, w});
  }

  std::unique_ptr<ResultsFile> file_;
  mutable py::object chains_, log_prob_;
};

}  // namespace
}  // namespace apsides::python

PYBIND11_MODULE(_apsides, m) {
  using namespace apsides;
  using namespace apsides::python;
  H5::Exception::dontPrint();
  m.doc() = "The compiled core of the apsides Python module (use `import apsides`).";
  m.attr("__version__") = APSIDES_VERSION;

  static py::exception<InputError> input_error(m, "InputError", PyExc_ValueError);
  py::register_exception_translator([](std::exception_ptr p) {
    try {
      if (p) std::rethrow_exception(p);
    } catch (const InputError& e) {
      PyErr_SetString(input_error.ptr(), e.what());
    } catch (const H5::Exception& e) {
      PyErr_SetString(PyExc_RuntimeError,
                      fmt::format("HDF5 error in {}: {}", e.getFuncName(), e.getDetailMsg()).c_str());
    }
  });

  m.def("solve_kepler", &solve_kepler_py, "M"_a, "e"_a,
        R"(Eccentric anomaly E (radians, in [0, 2 pi)) with M = E - e sin E, M reduced mod 2 pi.

M: mean anomaly (radians, any real value); e: eccentricity in [0, 1). Arrays broadcast
against each other; a float for scalar inputs. Accuracy |E - E_true| <= 1e-12 rad for
e <= 0.999 (the library's vectorised solver). Raises ValueError for e outside [0, 1).)");

  m.def("radial_velocity", &radial_velocity_py, "t"_a, "P"_a, "K"_a, "e"_a, "omega"_a, "t_conj"_a,
        R"(Velocity of the star (m/s, positive receding) due to one planet at times t.

t: BJD_TDB in days (array or float; same frame as t_conj); P: period (days); K:
semi-amplitude (m/s); e: eccentricity in [0, 1); omega: argument of periastron of the
STAR's orbit (radians; omega_planet = omega + pi); t_conj: time of inferior conjunction of
the planet (transit), BJD_TDB days. v = K [cos(nu + omega) + e cos omega], nu the true
anomaly; conjunction at nu = pi/2 - omega (include/apsides/keplerian_model.h).)");

  m.def("minimum_mass", py::vectorize(&minimum_mass_one), "P"_a, "K"_a, "e"_a, "star_mass"_a, "unit"_a = "mjup",
        R"(Minimum mass m sin i of the companion from the mass function, solved exactly for any
mass ratio (m^3 = f (M + m)^2, f = P K^3 (1 - e^2)^(3/2) / (2 pi G)).

P: period (days); K: semi-amplitude (m/s); e: eccentricity; star_mass: solar masses.
unit: "mjup" (Jupiter masses, default), "mearth" or "msun" (IAU 2015 nominal values).
All arguments broadcast (numpy).)");

  py::class_<Project, std::shared_ptr<Project>> project(m, "ProjectCore",
                                                         "The library's project (use apsides.Project).");
  project.def_static("load", &load_project_py, "path"_a)
      .def_static("from_arrays", &project_from_arrays_py, "time"_a, "velocity"_a, "uncertainty"_a, "instrument"_a,
                  "unit"_a, "t_epoch"_a, "t_time"_a, "t_uncertainty"_a, "t_planet"_a, "settings"_a, "name"_a)
      .def_property_readonly("path", [](const Project& p) { return p.path; })
      .def_property_readonly("text", [](const Project& p) { return p.text; })
      .def_property_readonly("star_name", [](const Project& p) { return p.star.name; })
      .def_property_readonly("star_mass", [](const Project& p) { return p.star.mass_msun; })
      .def_property_readonly("star_mass_err", [](const Project& p) { return p.star.mass_err_msun; })
      .def_property_readonly("star_radius", [](const Project& p) { return p.star.radius_rsun; })
      .def_property_readonly("model_planets", [](const Project& p) { return p.model.planets; })
      .def_property_readonly("max_planets", [](const Project& p) { return p.search.max_planets; })
      .def_property_readonly("warnings", [](const Project& p) { return p.load_velocities().warnings; })
      .def_property_readonly("instruments", [](const Project& p) { return p.load_velocities().instrument_names; })
      .def_property_readonly("n_points", [](const Project& p) { return p.load_velocities().size(); })
      .def_property_readonly("baseline_d", [](const Project& p) { return p.load_velocities().baseline_days(); })
      .def_property_readonly("velocities", [](const Project& p) { return velocities_dict(p); })
      .def_property_readonly("transits", [](const Project& p) { return transits_dict(p); });

  m.def("_periodogram", &periodogram_py, "project"_a, "min_period"_a, "max_period"_a, "oversample"_a,
        "normalization"_a, "method"_a, "peaks"_a, "window_peaks"_a, "bootstrap"_a, "seed"_a, "threads"_a);

  m.def("_ephemeris", &ephemeris_py, "path"_a, "t_epoch"_a, "t_time"_a, "t_uncertainty"_a, "t_planet"_a, "planet"_a,
        "next"_a, "from_bjd"_a, "to_bjd"_a, "epoch"_a, "scale_errors"_a, "outlier_sigma"_a, "drop_outliers"_a,
        "companion_period"_a, "model"_a, "ttv"_a);

  m.def("fit", &fit_py, "project"_a, "planets"_a = py::none(), py::kw_only(), "search"_a = false,
        "max_planets"_a = py::none(), "fap_threshold"_a = py::none(), "min_bic_improvement"_a = py::none(),
        R"(Maximum-a-posteriori Keplerian fit of a project, as `apsides fit PROJECT --json` (same dict).

planets=N fits N planets; search=True (or neither, when the project sets no [model]
planets) runs the planet search: add a planet at the strongest residual-periodogram peak
while its false-alarm probability is below fap_threshold (default [search] fap_threshold,
0.001) and the BIC drops by min_bic_improvement (default 10), up to max_planets.
Returns {"planets": [{"label", "period_d", "K_ms", "ecc", "omega_deg", "t_conj_bjd",
"t_peri_bjd", "msini_mjup", "msini_mearth", "a_au"} each {"value"}], "instruments",
"ln_like", "bic", "aicc", "theta", "parameter_names", "termination", "message", ...}:
periods in days, K in m/s, omega of the star in degrees, times BJD_TDB, m sin i a
MINIMUM mass (null without the star's mass). A failed fit is reported in "termination".)");

  m.def("sample", &sample_py, "project"_a, "out"_a, py::kw_only(), "planets"_a = py::none(), "resume"_a = false,
        "max_steps"_a = py::none(), "walkers"_a = py::none(), "seed"_a = py::none(), "threads"_a = 2,
        "quiet"_a = false,
        R"(Ensemble MCMC of the project's posterior into the HDF5 file `out`, as `apsides sample`.

Runs until converged (R-hat < [sampler] rhat_max, ESS >= ess_target, chain > min_tau_multiple
x tau) or max_steps; planets: number of Keplerians (default [model] planets, else the
planet search decides); resume=True continues the run saved in `out`. Progress on stderr
(a bar when stderr is a terminal) unless quiet. Ctrl-C saves a checkpoint, then raises
KeyboardInterrupt. Returns the --json dict {"sampler": {"walkers", "steps",
"burn_in_steps", "rhat_max", "ess_min", "tau_max", "termination", "message"}}; open the
file with apsides.Results.open(out). Raises RuntimeError when the run cannot start.)");

  m.def("compare", &compare_py, "project"_a, "max_planets"_a = py::none(), py::kw_only(), "min_planets"_a = 0,
        "live_points"_a = py::none(), "seed"_a = py::none(), "threshold"_a = py::none(), "threads"_a = 2,
        "slice_steps"_a = 0, "jumps_per_step"_a = py::none(), "out"_a = py::none(), "quiet"_a = false,
        R"(Bayesian evidence (nested sampling) and BIC / AICc for min_planets..max_planets Keplerians,
as `apsides compare` (same dict).

Defaults from the project: max_planets [search] max_planets, live_points / seed /
threshold from [evidence]. The selected number is the largest k whose ln B against k - 1
exceeds threshold (nats; 5 = "very strong"). out: also write the comparison into this
HDF5 results file. Returns {"comparison": [{"n_planets", "ln_evidence", "ln_evidence_err",
"ln_like_max", "bic", "aicc", "ln_bayes_vs_previous", ...}], "selected_n_planets",
"selection_rule", "notes", "message", "data"} (ln values in nats).)");

  m.def("analyze", &analyze_py, "project"_a, "out"_a, py::kw_only(), "resume"_a = false, "format"_a = "png",
        "max_steps"_a = py::none(), "live_points"_a = py::none(), "threads"_a = 2, "quiet"_a = false,
        R"(The whole job, as `apsides analyze`: periodogram, planet search, evidence for the search's
answer and its neighbours, sampling of the selected model, transit ephemerides, figures and
report into the directory `out` (results.h5, summary.json, report.md, figures/).

Returns the contract dict of summary.json: {"data", "comparison", "selected_n_planets",
"planets": [{"label", "period_d", "K_ms", "ecc", "omega_deg", "t_conj_bjd", "msini_mjup",
"msini_mearth", "a_au", ...} each {"median", "minus", "plus"}], "instruments", "sampler"}.
Stage lines and the sampling bar on stderr unless quiet.)");

  py::class_<Model>(m, "Model", R"(The project's posterior for a given number of planets, as a callable.

Model(project, planets): the same composed posterior the fit, the sampler and nested
sampling evaluate (default priors plus [priors], velocities, transit times). theta is in
the sampling coordinates, in the order of `names` (per planet: period_d, K_ms,
sqrt(e) cos w, sqrt(e) sin w, t_conj_d in days after reference_epoch_bjd; per instrument
offset_ms, jitter_ms; trend; ...). A contiguous float64 array is read without a copy.)")
      .def(py::init<const py::object&, int>(), "project"_a, "planets"_a)
      .def("__call__", &Model::evaluate<&PosteriorModel::log_posterior>, "theta"_a,
           "ln prior + ln L at theta (1-D), or at each row of a 2-D array; -inf outside the prior.")
      .def("log_likelihood", &Model::evaluate<&PosteriorModel::log_likelihood>, "theta"_a,
           "ln L (velocities and transit times), at theta (1-D) or at each row of a 2-D array.")
      .def("log_prior", &Model::evaluate<&PosteriorModel::log_prior>, "theta"_a,
           "ln prior density at theta (1-D) or at each row of a 2-D array.")
      .def_property_readonly("names", &Model::names, "parameter names, in theta order")
      .def_property_readonly("units", &Model::units, "parameter units, in theta order")
      .def_property_readonly("n_params", &Model::n_params)
      .def_property_readonly("n_points", &Model::n_points, "data points in the likelihood")
      .def_property_readonly("reference_epoch_bjd", &Model::reference_epoch_bjd,
                             "BJD_TDB day the t_conj_d parameters count from");

  py::class_<Results>(m, "Results", R"(A results file (HDF5) written by sample or analyze, read-only.

Results.open(path). `chains`: positions (stored rows x walkers x parameters) and `log_prob`
(stored rows x walkers); the file stores every `stride`-th sampler step (16 for `sample`),
`chain_steps` gives the step of each row; `samples()`: the draws after the burn-in
(burn_in_steps) that every posterior number is computed from; `names`, `units`;
`summary()`: the posterior table (medians with 16/84 % intervals) and diagnostics;
`summary_json()`: the contract dict of `apsides summarize --json`; `derived()`: derived
chains (m sin i, a, ...); `data()`, `diagnostics()`, `map_theta`.)")
      .def_static("open", [](const std::string& path) { return std::make_unique<Results>(path); }, "path"_a)
      .def("close", &Results::close)
      .def("__enter__", [](Results& r) -> Results& { return r; }, py::return_value_policy::reference)
      .def("__exit__", [](Results& r, py::args) { r.close(); })
      .def_property_readonly("path", &Results::path)
      .def_property_readonly("names", [](const Results& r) { return r.strings("/parameters/names"); })
      .def_property_readonly("units", [](const Results& r) { return r.strings("/parameters/units"); })
      .def_property_readonly("priors", [](const Results& r) { return r.strings("/parameters/priors"); })
      .def_property_readonly("steps", &Results::steps)
      .def_property_readonly("walkers", &Results::walkers)
      .def_property_readonly("burn_in_steps", &Results::burn_in_steps, "sampler steps discarded as burn-in")
      .def_property_readonly("stride", &Results::stride, "sampler steps between stored chain rows")
      .def_property_readonly("chain_steps", &Results::chain_steps, "the sampler step of each stored row (int64 array)")
      .def("samples", &Results::samples, "max_samples"_a = 200000,
           "the kept draws (stored steps after the burn-in; every 2nd, 3rd, ... when more than max_samples), "
           "(draws x parameters): what summary() and the report are computed from")
      .def_property_readonly("project_text", [](const Results& r) { return r.file().read_text("/project/text"); })
      .def_property_readonly("map_theta", [](const Results& r) { return r.vector_or_none("/map/theta"); })
      .def_property_readonly("chains", &Results::chains,
                             "positions, (stored rows x walkers x parameters); row i is sampler step chain_steps[i]")
      .def_property_readonly("log_prob", &Results::log_prob, "ln posterior of each position, (stored rows x walkers)")
      .def("summary", &Results::summary)
      .def("summary_json", &Results::summary_document)
      .def("derived", &Results::derived)
      .def("data", &Results::data)
      .def("diagnostics", &Results::diagnostics)
      .def("report", &Results::report);
}
