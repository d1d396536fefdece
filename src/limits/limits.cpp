// Injection and recovery (limits.h): the problem, the grid, one injection, one cell.
#include "apsides/limits.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstring>
#include <random>

#include "apsides/constants.h"
#include "apsides/error.h"
#include "apsides/model_priors.h"
#include "apsides/orbit.h"
#include "apsides/periodogram.h"

namespace apsides {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr double kSiderealDayPerDay = 1.0027379093;  // sidereal days per solar day (as the search uses)
constexpr double kYearDays = 365.25;

// SplitMix64 (Steele, Lea & Flood 2014): a well-mixed 64-bit value from a counter, used
// to give every (seed, cell, injection) its own generator seed.
std::uint64_t splitmix64(std::uint64_t x) {
  x += 0x9E3779B97F4A7C15ULL;
  x = (x ^ (x >> 30)) * 0xBF58476D1CE4E5B9ULL;
  x = (x ^ (x >> 27)) * 0x94D049BB133111EBULL;
  return x ^ (x >> 31);
}

std::uint64_t stream_seed(unsigned long long seed, long cell, int k) {
  return splitmix64(splitmix64(splitmix64(seed) ^ static_cast<std::uint64_t>(cell)) ^ static_cast<std::uint64_t>(k));
}

// FNV-1a over bytes: a fingerprint stable across builds (std::hash is not specified).
struct Fingerprint {
  std::uint64_t h = 1469598103934665603ULL;
  void add(const void* data, std::size_t n) {
    const auto* p = static_cast<const unsigned char*>(data);
    for (std::size_t i = 0; i < n; ++i) h = (h ^ p[i]) * 1099511628211ULL;
  }
  void add(const std::string& s) { add(s.data(), s.size()); }
  void add(double x) { add(&x, sizeof x); }
  void add(const std::vector<double>& v) { add(v.data(), v.size() * sizeof(double)); }
};

// A [priors] key naming a planet ("b.period_d", "c.eccentricity"): the letter is not an
// instrument of the data.
bool names_planet(const PriorSpec& spec, const VelocityData& data) {
  const std::size_t dot = spec.parameter.find('.');
  if (dot != 1) return false;
  const char c = spec.parameter[0];
  if (c < 'b' || c > 'z') return false;
  const std::string owner = spec.parameter.substr(0, 1);
  return std::find(data.instrument_names.begin(), data.instrument_names.end(), owner) == data.instrument_names.end();
}

double log_uniform(double lo, double hi, double u) { return std::exp(std::log(lo) + u * (std::log(hi) - std::log(lo))); }

// The mass whose circular orbit at this period has K = k_m_s, in Earth masses.
double mass_for_k(double period_d, double k_m_s, double star_msun) {
  return msun_to_mearth(minimum_mass_msun(period_d, k_m_s, 0.0, star_msun));
}

// Frequency match of g against f or its window aliases.
RecoveryOutcome classify(double f, double g, double tol) {
  if (std::fabs(g - f) < tol) return RecoveryOutcome::kRecovered;
  for (double fw : {kSiderealDayPerDay, 1.0, 1.0 / kYearDays})
    if (std::fabs(g - (f + fw)) < tol || std::fabs(g - std::fabs(f - fw)) < tol) return RecoveryOutcome::kAlias;
  return RecoveryOutcome::kMissed;
}

// Recovery by the planet search (whole, or its first step).
void recover_by_search(const LimitsProblem& pb, const LimitsOptions& o, const std::vector<double>& v, double f,
                       Injection& inj) {
  SearchProblem sp = pb.search;
  sp.data.velocity_m_s = v;
  SearchOptions so = pb.search_options;
  if (o.recovery == RecoveryTest::kFirstStep) {
    so.max_planets = 1;
    so.fit.n_peaks = 1;
    so.fit.joint_starts = 2;
  }
  const SearchResult r = search_planets(sp, so);
  inj.fap = r.steps.size() > 1 ? r.steps[1].admitting_fap : r.final_peak_fap;
  const double tol = o.match_width / pb.baseline_days;
  double nearest = std::numeric_limits<double>::infinity();
  const FitResult& fit = r.best();
  const ParameterLayout blocks = fit.parameters();
  for (const PlanetBlock* b : blocks.planets()) {
    const double g = 1.0 / b->period(fit.theta);
    const RecoveryOutcome c = classify(f, g, tol);
    if (c == RecoveryOutcome::kRecovered) {  // a recovery beats an alias
      inj.outcome = c;
      inj.found_period_d = 1.0 / g;
      break;
    }
    if (c == RecoveryOutcome::kAlias && inj.outcome == RecoveryOutcome::kMissed) {
      inj.outcome = c;
      inj.found_period_d = 1.0 / g;
    }
    if (inj.outcome == RecoveryOutcome::kMissed && std::fabs(g - f) < nearest) {  // else: the nearest signal
      nearest = std::fabs(g - f);
      inj.found_period_d = 1.0 / g;
    }
  }
}

// The largest GLS power within tol of frequency g (g itself included) and its FAP.
double best_fap_near(const LimitsProblem& pb, const std::vector<double>& v, double g, double tol) {
  const VelocityData& d = pb.search.data;
  const double df = 1.0 / (pb.search_options.fit.oversample * pb.baseline_days);
  std::vector<double> freqs{g};
  for (int k = 1; k * df <= tol; ++k) {
    freqs.push_back(g + k * df);
    if (g - k * df > 0.0) freqs.push_back(g - k * df);
  }
  const std::vector<double> p = gls_power_direct(d.time_days, v, pb.noise_sd_m_s, freqs);
  const double z = *std::max_element(p.begin(), p.end());
  return baluev_fap(z, d.size(), pb.search_max_frequency, d.time_days, pb.noise_sd_m_s);
}

// Recovery by a periodogram threshold alone (no fit): limits.h.
void recover_by_periodogram(const LimitsProblem& pb, const LimitsOptions& o, const std::vector<double>& v, double f,
                            Injection& inj) {
  const double tol = o.match_width / pb.baseline_days;
  const double thr = pb.search_options.fap_threshold;
  inj.fap = best_fap_near(pb, v, f, tol);
  if (inj.fap < thr) {
    inj.outcome = RecoveryOutcome::kRecovered;
    inj.found_period_d = 1.0 / f;
    return;
  }
  for (double fw : {kSiderealDayPerDay, 1.0, 1.0 / kYearDays}) {
    for (double g : {f + fw, std::fabs(f - fw)}) {
      if (!(g > 0.0) || g > pb.search_max_frequency) continue;
      if (best_fap_near(pb, v, g, tol) < thr) {
        inj.outcome = RecoveryOutcome::kAlias;
        inj.found_period_d = 1.0 / g;
        return;
      }
    }
  }
}

}  // namespace

std::string LimitsOptions::Validate() const {
  if (period_cells < 1) return fmt::format("period_cells = {}: the grid needs at least 1 period cell", period_cells);
  if (mass_cells < 1) return fmt::format("mass_cells = {}: the grid needs at least 1 mass cell", mass_cells);
  if (static_cast<long long>(period_cells) * mass_cells > 10'000'000LL)
    return fmt::format("period_cells x mass_cells = {}: must be at most 1e7", static_cast<long long>(period_cells) * mass_cells);
  if (injections < 1) return fmt::format("injections = {}: must be >= 1 per cell", injections);
  if (min_period_d < 0 || max_period_d < 0 || !std::isfinite(min_period_d) || !std::isfinite(max_period_d))
    return "min_period_d and max_period_d must be finite and > 0 (or 0 for the default)";
  if (min_period_d > 0 && max_period_d > 0 && !(min_period_d < max_period_d))
    return fmt::format("min_period_d = {} is not below max_period_d = {}", min_period_d, max_period_d);
  if (min_msini_mearth < 0 || max_msini_mearth < 0 || !std::isfinite(min_msini_mearth) || !std::isfinite(max_msini_mearth))
    return "min_msini_mearth and max_msini_mearth must be finite and > 0 (or 0 for the default)";
  if (min_msini_mearth > 0 && max_msini_mearth > 0 && !(min_msini_mearth < max_msini_mearth))
    return fmt::format("min_msini_mearth = {} is not below max_msini_mearth = {}", min_msini_mearth, max_msini_mearth);
  if (const std::string e = eccentricity.Validate(); !e.empty()) return "eccentricity: " + e;
  if (!(match_width >= 0.0) || !std::isfinite(match_width))
    return fmt::format("match_width = {}: must be finite and >= 0", match_width);
  if (match_width == 0.0 && recovery != RecoveryTest::kPeriodogram)
    return "match_width = 0: a search never finds the exact frequency; use > 0 (1 = one peak width)";
  if (threads < 1 || threads > 1024) return fmt::format("threads = {}: must be in [1, 1024]", threads);
  return "";
}

LimitsOptions limits_options(const Project& project) {
  const LimitsSettings& s = project.limits;
  LimitsOptions o;
  o.period_cells = s.period_cells;
  o.mass_cells = s.mass_cells;
  o.injections = s.injections;
  o.seed = s.seed;
  o.min_period_d = s.min_period_d.value_or(0.0);
  o.max_period_d = s.max_period_d.value_or(0.0);
  o.min_msini_mearth = s.min_msini_mearth.value_or(0.0);
  o.max_msini_mearth = s.max_msini_mearth.value_or(0.0);
  o.noise = s.noise;
  o.recovery = s.recovery;
  o.eccentricity.kind = s.eccentricity;
  return o;
}

LimitsProblem make_limits_problem(const Project& project, const LimitsOptions& options) {
  if (const std::string msg = options.Validate(); !msg.empty()) throw InputError("limits: " + msg);
  if (!project.star.mass_msun)
    throw InputError(fmt::format("{}: [star] mass_msun is not set; detection limits need the star's mass to turn m sin i into K",
                                 project.path));
  if (project.search.max_planets < 1)
    throw InputError(fmt::format("{}: search.max_planets = 0; detection limits need a search that can admit a planet", project.path));
  LimitsProblem pb;
  const VelocityData data = project.load_velocities();
  const TransitData transits = project.load_transits();
  const SearchProblem real = search_problem(project, data, transits);
  pb.search_options = search_options(project);
  const SearchResult found = search_planets(real, pb.search_options);
  const FitResult& best = found.best();
  if (!best.success()) throw std::runtime_error("limits: the planet search on the data failed: " + found.message);
  pb.selected_n_planets = found.selected_n_planets;
  pb.star_mass_msun = *project.star.mass_msun;
  pb.detected = derive_planets(best, pb.star_mass_msun);
  pb.base_m_s = best.residuals_m_s;
  const ParameterLayout blocks = best.parameters();
  const auto instruments = blocks.instruments();
  pb.noise_sd_m_s.resize(data.size());
  double ss = 0.0;
  for (std::size_t i = 0; i < data.size(); ++i) {
    const double jit = instruments[static_cast<std::size_t>(data.instrument[i])]->jitter(best.theta);
    pb.noise_sd_m_s[i] = std::sqrt(data.uncertainty_m_s[i] * data.uncertainty_m_s[i] + jit * jit);
    ss += pb.base_m_s[i] * pb.base_m_s[i];
  }
  pb.rms_m_s = std::sqrt(ss / static_cast<double>(data.size()));
  pb.baseline_days = std::max(data.baseline_days(), 1e-3);

  // The injection search: the same settings, no transit times, no planet-specific priors.
  pb.search = real;
  pb.search.transits = TransitData{};
  pb.search.transit_jitter_planets.clear();
  pb.search.priors.clear();
  for (const PriorSpec& p : real.priors)
    if (!names_planet(p, data)) pb.search.priors.push_back(p);
  pb.one_planet_priors = problem_priors(pb.search, problem_layout(pb.search, 1));

  // The top of the search's residual-periodogram grid (fit.cpp scans on this grid).
  const PeriodRange range = default_period_range(data, real.search);
  pb.search_min_period_d = range.min_days;
  pb.search_max_period_d = range.max_days;
  const double f0 = 1.0 / range.max_days, f1 = 1.0 / range.min_days;
  const double df = 1.0 / (pb.search_options.fit.oversample * pb.baseline_days);
  const double nf = std::max(3.0, std::floor((f1 - f0) / df) + 1.0);
  pb.search_max_frequency = f0 + df * (nf - 1.0);

  Fingerprint fp;
  fp.add(std::string("apsides-limits-v1"));
  fp.add(project.text);
  fp.add(data.time_days);
  fp.add(data.velocity_m_s);
  fp.add(data.uncertainty_m_s);
  fp.add(fmt::format("{}|{}|{}|{}|{}|{}|{}|{}|{}|{}|{}|{}|{}|{}|{}", options.period_cells, options.mass_cells,
                     options.min_period_d, options.max_period_d, options.min_msini_mearth, options.max_msini_mearth,
                     options.draw_within_cell, options.injections, options.seed, static_cast<int>(options.eccentricity.kind),
                     options.eccentricity.a, options.eccentricity.b, options.eccentricity.max_ecc, to_string(options.noise),
                     to_string(options.recovery)));
  fp.add(options.match_width);
  pb.key = fmt::format("{:016x}", fp.h);
  return pb;
}

LimitsGrid make_limits_grid(const LimitsProblem& pb, const LimitsOptions& o) {
  if (const std::string msg = o.Validate(); !msg.empty()) throw InputError("limits: " + msg);
  const double pmin = o.min_period_d > 0 ? o.min_period_d : 1.0;
  const double pmax = o.max_period_d > 0 ? o.max_period_d : 3.0 * pb.baseline_days;
  if (!(pmin < pmax))
    throw InputError(fmt::format("limits: the period range [{:g}, {:g}] d is empty (baseline {:g} d); set min_period_d and max_period_d",
                                 pmin, pmax, pb.baseline_days));
  const double mmin = o.min_msini_mearth > 0 ? o.min_msini_mearth : 0.1 * mass_for_k(pmin, pb.rms_m_s, pb.star_mass_msun);
  const double mmax = o.max_msini_mearth > 0 ? o.max_msini_mearth : 100.0 * mass_for_k(pmax, pb.rms_m_s, pb.star_mass_msun);
  if (!(mmin > 0 && mmin < mmax && std::isfinite(mmax)))
    throw InputError(fmt::format("limits: the mass range [{:g}, {:g}] Earth masses is empty; set min_msini_mearth and max_msini_mearth",
                                 mmin, mmax));
  LimitsGrid g;
  auto edges = [](double lo, double hi, int n, std::vector<double>& e, std::vector<double>& c) {
    for (int i = 0; i <= n; ++i) e.push_back(log_uniform(lo, hi, static_cast<double>(i) / n));
    e.front() = lo;
    e.back() = hi;
    for (int i = 0; i < n; ++i) c.push_back(std::sqrt(e[i] * e[i + 1]));
  };
  edges(pmin, pmax, o.period_cells, g.period_edges_d, g.period_d);
  edges(mmin, mmax, o.mass_cells, g.msini_edges_mearth, g.msini_mearth);
  return g;
}

int CellResult::recovered() const {
  return static_cast<int>(std::count_if(injections.begin(), injections.end(),
                                        [](const Injection& i) { return i.outcome == RecoveryOutcome::kRecovered; }));
}

int CellResult::aliases() const {
  return static_cast<int>(std::count_if(injections.begin(), injections.end(),
                                        [](const Injection& i) { return i.outcome == RecoveryOutcome::kAlias; }));
}

Injection run_injection(const LimitsProblem& pb, const LimitsGrid& grid, const LimitsOptions& o, long cell, int k) {
  const std::size_t nm = grid.msini_mearth.size();
  const std::size_t ip = static_cast<std::size_t>(cell) / nm, jm = static_cast<std::size_t>(cell) % nm;
  std::mt19937_64 rng(stream_seed(o.seed, cell, k));
  std::uniform_real_distribution<double> unit(0.0, 1.0);
  // Draw order is part of the result: period, mass, e, omega, phase, then the noise.
  const double u_p = unit(rng), u_m = unit(rng), u_e = unit(rng), u_w = unit(rng), u_t = unit(rng);
  Injection inj;
  inj.period_d = o.draw_within_cell ? log_uniform(grid.period_edges_d[ip], grid.period_edges_d[ip + 1], u_p) : grid.period_d[ip];
  inj.msini_mearth = o.draw_within_cell ? log_uniform(grid.msini_edges_mearth[jm], grid.msini_edges_mearth[jm + 1], u_m)
                                        : grid.msini_mearth[jm];
  const double e_peri = pb.one_planet_priors.periastron_max_eccentricity(inj.period_d);
  const double e_top = std::min(o.eccentricity.max_ecc, e_peri - 1e-9);
  inj.ecc = e_top > 0.0 ? o.eccentricity.quantile_e(u_e * o.eccentricity.cdf_e(e_top)) : 0.0;
  inj.omega_rad = constants::kTwoPi * u_w;
  inj.t_conj_d = u_t * inj.period_d;
  const double m_msun = inj.msini_mearth / msun_to_mearth(1.0);
  inj.K_ms = semi_amplitude_m_s(inj.period_d, m_msun, pb.star_mass_msun, inj.ecc);

  const VelocityData& d = pb.search.data;
  std::vector<double> v(d.size());
  if (o.noise == InjectionNoise::kWhite) {
    std::normal_distribution<double> gauss(0.0, 1.0);
    for (std::size_t i = 0; i < v.size(); ++i) v[i] = pb.noise_sd_m_s[i] * gauss(rng);
  } else {
    v = pb.base_m_s;
  }
  const Planet planet = Planet::from_elements(inj.period_d, inj.K_ms, inj.ecc, inj.omega_rad, inj.t_conj_d);
  for (std::size_t i = 0; i < v.size(); ++i) v[i] += planet_velocity(planet, d.time_days[i]);
  const double f = 1.0 / inj.period_d;
  if (o.recovery == RecoveryTest::kPeriodogram) recover_by_periodogram(pb, o, v, f, inj);
  else recover_by_search(pb, o, v, f, inj);
  return inj;
}

CellResult run_cell(const LimitsProblem& pb, const LimitsGrid& grid, const LimitsOptions& o, long cell) {
  CellResult c;
  c.cell = cell;
  c.injections.reserve(static_cast<std::size_t>(o.injections));
  for (int k = 0; k < o.injections; ++k) c.injections.push_back(run_injection(pb, grid, o, cell, k));
  return c;
}

// Layout: cell (int64), count (int64), then per injection 9 doubles (outcome as a double).
std::string encode_cell(const CellResult& c) {
  std::string out;
  auto put = [&out](const auto& x) { out.append(reinterpret_cast<const char*>(&x), sizeof x); };
  put(static_cast<std::int64_t>(c.cell));
  put(static_cast<std::int64_t>(c.injections.size()));
  for (const Injection& i : c.injections) {
    for (double x : {i.period_d, i.msini_mearth, i.K_ms, i.ecc, i.omega_rad, i.t_conj_d,
                     static_cast<double>(static_cast<int>(i.outcome)), i.found_period_d, i.fap})
      put(x);
  }
  return out;
}

CellResult decode_cell(const std::string& bytes) {
  std::size_t pos = 0;
  auto get = [&](auto& x) {
    if (pos + sizeof x > bytes.size()) throw std::runtime_error("limits: truncated cell result");
    std::memcpy(&x, bytes.data() + pos, sizeof x);
    pos += sizeof x;
  };
  std::int64_t cell = 0, n = 0;
  get(cell);
  get(n);
  CellResult c;
  c.cell = static_cast<long>(cell);
  c.injections.resize(static_cast<std::size_t>(n));
  for (Injection& i : c.injections) {
    double outcome = 0;
    get(i.period_d);
    get(i.msini_mearth);
    get(i.K_ms);
    get(i.ecc);
    get(i.omega_rad);
    get(i.t_conj_d);
    get(outcome);
    get(i.found_period_d);
    get(i.fap);
    i.outcome = static_cast<RecoveryOutcome>(static_cast<int>(outcome));
  }
  return c;
}

LimitLine limit_line(const LimitsGrid& grid, const std::vector<std::vector<double>>& comp, double level) {
  LimitLine line;
  line.level = level;
  const std::size_t nm = grid.msini_mearth.size();
  for (std::size_t i = 0; i < grid.period_d.size(); ++i) {
    const std::vector<double>& c = comp[i];
    double m = kNaN;
    if (nm > 0 && c[nm - 1] >= level) {
      std::size_t j = nm - 1;
      while (j > 0 && c[j - 1] >= level) --j;  // NaN (cell not run) stops the walk
      if (j == 0) {
        m = grid.msini_mearth[0];
      } else if (std::isfinite(c[j - 1])) {
        const double t = (level - c[j - 1]) / (c[j] - c[j - 1]);
        m = std::exp(std::log(grid.msini_mearth[j - 1]) + t * (std::log(grid.msini_mearth[j]) - std::log(grid.msini_mearth[j - 1])));
      } else {
        m = grid.msini_mearth[j];
      }
    }
    line.msini_mearth.push_back(m);
  }
  return line;
}

void summarise_cells(LimitsResult& r) {
  const std::size_t np = r.grid.period_d.size(), nm = r.grid.msini_mearth.size();
  r.completeness.assign(np, std::vector<double>(nm, kNaN));
  r.alias_fraction.assign(np, std::vector<double>(nm, kNaN));
  r.cells_done = 0;
  for (const CellResult& c : r.cells) {
    if (c.injections.empty() || c.cell < 0) continue;
    const std::size_t i = static_cast<std::size_t>(c.cell) / nm, j = static_cast<std::size_t>(c.cell) % nm;
    const double n = static_cast<double>(c.injections.size());
    r.completeness[i][j] = c.recovered() / n;
    r.alias_fraction[i][j] = c.aliases() / n;
    ++r.cells_done;
  }
  r.complete = r.cells_done == r.grid.n_cells();
  r.limits.clear();
  for (double level : {0.5, 0.9, 0.99}) r.limits.push_back(limit_line(r.grid, r.completeness, level));
}

std::string LimitsResult::BriefReport() const {
  return fmt::format("Detection limits: {} of {} cells ({} x {} periods x masses, {} injections each){}.", cells_done,
                     grid.n_cells(), grid.period_d.size(), grid.msini_mearth.size(), options.injections,
                     cells_reused ? fmt::format(", {} reused from an earlier run", cells_reused) : "");
}

std::string LimitsResult::FullReport() const {
  std::string s = message + "\n";
  s += fmt::format("  recovery: {}, noise: {}, eccentricity: {}, seed {}\n", to_string(options.recovery),
                   to_string(options.noise), options.eccentricity.describe(), options.seed);
  s += fmt::format("  residual rms {:.3g} m/s, baseline {:.1f} d, star {:.3g} Msun\n", rms_m_s, baseline_days, star_mass_msun);
  s += fmt::format("  {:>12}", "P [d]");
  for (const LimitLine& l : limits) s += fmt::format(" {:>14}", fmt::format("m sin i {:g}%", 100 * l.level));
  s += "\n";
  for (std::size_t i = 0; i < grid.period_d.size(); ++i) {
    s += fmt::format("  {:>12.4g}", grid.period_d[i]);
    for (const LimitLine& l : limits)
      s += std::isfinite(l.msini_mearth[i]) ? fmt::format(" {:>14.4g}", l.msini_mearth[i]) : fmt::format(" {:>14}", "-");
    s += "\n";
  }
  return s;
}

}  // namespace apsides
