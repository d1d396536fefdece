#include "apsides/simulate.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <random>
#include <set>
#include <sstream>
#include <toml++/toml.h>

#include "apsides/constants.h"
#include "apsides/error.h"
#include "apsides/nbody.h"
#include "apsides/orbit.h"
#include "text_table.h"

namespace apsides {
namespace {

std::string where(const std::string& path, const toml::node& n, const std::string& key) {
  return fmt::format("{}:{}: {}", path, n.source().begin.line, key);
}

void allow(const std::string& path, const toml::table& t, const std::string& name,
           const std::set<std::string>& keys) {
  for (const auto& [k, v] : t) {
    const std::string key(k.str());
    if (keys.count(key)) continue;
    const int line = k.source().begin.line > 0 ? static_cast<int>(k.source().begin.line)
                                               : static_cast<int>(v.source().begin.line);
    const std::string full = (name.empty() ? "" : name + ".") + key;
    const std::string best = detail::suggest_key(key, {keys.begin(), keys.end()});
    if (!best.empty()) {
      throw InputError(fmt::format("{}:{}: unknown key '{}'; did you mean '{}'?", path, line, full, best));
    }
    std::string list;
    for (const auto& a : keys) list += (list.empty() ? "" : ", ") + a;
    throw InputError(fmt::format("{}:{}: unknown key '{}' (known: {})", path, line, full, list));
  }
}

double num(const std::string& path, const toml::table& t, const std::string& table,
           const std::string& key, double fallback) {
  const toml::node* n = t.get(key);
  if (!n) return fallback;
  if (!(n->is_integer() || n->is_floating_point()))
    throw InputError(fmt::format("{} must be a number", where(path, *n, table + "." + key)));
  const double v = *n->value<double>();
  if (!std::isfinite(v)) throw InputError(fmt::format("{} must be finite", where(path, *n, table + "." + key)));
  return v;
}

std::string str(const std::string& path, const toml::table& t, const std::string& table,
                const std::string& key, const std::string& fallback) {
  const toml::node* n = t.get(key);
  if (!n) return fallback;
  if (!n->is_string()) throw InputError(fmt::format("{} must be a string", where(path, *n, table + "." + key)));
  return *n->value<std::string>();
}

}  // namespace

std::string Scenario::Validate() const {
  if (instruments.empty()) return "needs at least one [[instruments]] block";
  if (span_days <= 0) return fmt::format("observing.span_days = {}; it must be > 0", span_days);
  if (!(clear_fraction > 0 && clear_fraction <= 1))
    return fmt::format("observing.clear_fraction = {}; it must be in (0, 1]", clear_fraction);
  if (!(season_days > 0)) return fmt::format("observing.season_days = {}; it must be > 0", season_days);
  if (!(mass_msun > 0)) return fmt::format("star.mass_msun = {}; it must be > 0", mass_msun);
  for (const auto& i : instruments) {
    if (i.name.empty()) return "every instrument needs a name";
    if (i.n_points < 1) return fmt::format("instrument '{}': n_points = {}; it must be >= 1", i.name, i.n_points);
    if (!(i.sigma_ms > 0)) return fmt::format("instrument '{}': sigma_ms = {}; it must be > 0", i.name, i.sigma_ms);
    if (i.jitter_ms < 0) return fmt::format("instrument '{}': jitter_ms = {}; it must be >= 0", i.name, i.jitter_ms);
  }
  for (std::size_t j = 0; j < planets.size(); ++j) {
    const auto& p = planets[j];
    if (!(p.period_d > 0)) return fmt::format("planet {}: period_d = {}; it must be > 0", j + 1, p.period_d);
    if (!(p.K_ms >= 0)) return fmt::format("planet {}: K_ms = {}; it must be >= 0", j + 1, p.K_ms);
    if (!(p.ecc >= 0 && p.ecc < 1)) return fmt::format("planet {}: ecc = {}; it must be in [0, 1)", j + 1, p.ecc);
  }
  if (nbody) {
    for (std::size_t j = 0; j < planets.size(); ++j) {
      const auto& p = planets[j];
      if (!(p.mass_mearth > 0))
        return fmt::format("planet {}: mass_mearth = {}; an [nbody] scenario needs masses > 0", j + 1, p.mass_mearth);
      if (p.K_ms != 0) return fmt::format("planet {}: K_ms is not used in an [nbody] scenario (give mass_mearth)", j + 1);
      if (!(p.inclination_deg > 0 && p.inclination_deg < 180))
        return fmt::format("planet {}: inclination_deg = {}; it must be in (0, 180)", j + 1, p.inclination_deg);
    }
    if (transits.ttv_amplitude_d != 0)
      return "transits.ttv_amplitude_d: the timing variations of an [nbody] scenario are the engine's; leave it 0";
  }
  if (transits.enabled) {
    const int idx = transits.planet.size() == 1 ? transits.planet[0] - 'b' : -1;
    if (idx < 0 || idx >= static_cast<int>(planets.size()))
      return fmt::format("transits.planet = '{}' names no planet (planets are b, c, ... by period)", transits.planet);
    if (transits.n_transits < 2) return fmt::format("transits.n_transits = {}; it must be >= 2", transits.n_transits);
    if (!(transits.sigma_d > 0)) return fmt::format("transits.sigma_d = {}; it must be > 0", transits.sigma_d);
  }
  return "";
}

Scenario parse_scenario(const std::string& text, const std::string& path) {
  toml::table root;
  try {
    root = toml::parse(text, path);
  } catch (const toml::parse_error& e) {
    throw InputError(fmt::format("{}:{}:{}: TOML syntax error: {}", path, e.source().begin.line,
                                 e.source().begin.column, std::string(e.description())));
  }
  allow(path, root, "", {"seed", "star", "observing", "instruments", "planets", "trend", "transits", "nbody"});
  Scenario s;
  if (const toml::node* n = root.get("seed")) {
    if (!n->is_integer() || *n->value<int64_t>() < 0)
      throw InputError(fmt::format("{} must be a non-negative integer", where(path, *n, "seed")));
    s.seed = static_cast<unsigned long long>(*n->value<int64_t>());
  }
  if (auto* t = root["star"].as_table()) {
    allow(path, *t, "star", {"name", "mass_msun", "mass_err_msun", "radius_rsun"});
    s.star_name = str(path, *t, "star", "name", s.star_name);
    s.mass_msun = num(path, *t, "star", "mass_msun", s.mass_msun);
    s.mass_err_msun = num(path, *t, "star", "mass_err_msun", s.mass_err_msun);
    s.radius_rsun = num(path, *t, "star", "radius_rsun", s.radius_rsun);
  }
  if (auto* t = root["observing"].as_table()) {
    allow(path, *t, "observing", {"start_bjd", "span_days", "season_days", "clear_fraction", "hour_scatter_d"});
    s.start_bjd = num(path, *t, "observing", "start_bjd", s.start_bjd);
    s.span_days = num(path, *t, "observing", "span_days", s.span_days);
    s.season_days = num(path, *t, "observing", "season_days", s.season_days);
    s.clear_fraction = num(path, *t, "observing", "clear_fraction", s.clear_fraction);
    s.hour_scatter_d = num(path, *t, "observing", "hour_scatter_d", s.hour_scatter_d);
  }
  if (auto* a = root["instruments"].as_array()) {
    for (auto& e : *a) {
      auto* t = e.as_table();
      if (!t) throw InputError(fmt::format("{}: instruments must be [[instruments]] tables", path));
      allow(path, *t, "instruments", {"name", "n_points", "sigma_ms", "sigma_scatter", "jitter_ms", "offset_ms", "start_bjd", "end_bjd", "velocity_unit"});
      SimInstrument i;
      i.name = str(path, *t, "instruments", "name", "");
      i.n_points = static_cast<int>(num(path, *t, "instruments", "n_points", i.n_points));
      i.sigma_ms = num(path, *t, "instruments", "sigma_ms", i.sigma_ms);
      i.sigma_scatter = num(path, *t, "instruments", "sigma_scatter", i.sigma_scatter);
      i.jitter_ms = num(path, *t, "instruments", "jitter_ms", i.jitter_ms);
      i.offset_ms = num(path, *t, "instruments", "offset_ms", i.offset_ms);
      i.start_bjd = num(path, *t, "instruments", "start_bjd", 0.0);
      i.end_bjd = num(path, *t, "instruments", "end_bjd", 0.0);
      if (const toml::node* n = t->get("velocity_unit"))
        i.unit = parse_velocity_unit(str(path, *t, "instruments", "velocity_unit", "m/s"), where(path, *n, "instruments.velocity_unit"));
      s.instruments.push_back(i);
    }
  } else if (root.get("instruments")) {
    throw InputError(fmt::format("{}: instruments must be written [[instruments]]", path));
  }
  if (auto* a = root["planets"].as_array()) {
    for (auto& e : *a) {
      auto* t = e.as_table();
      if (!t) throw InputError(fmt::format("{}: planets must be [[planets]] tables", path));
      allow(path, *t, "planets",
            {"period_d", "K_ms", "ecc", "omega_deg", "t_conj_bjd", "transiting", "mass_mearth", "inclination_deg"});
      SimPlanet p;
      p.mass_mearth = num(path, *t, "planets", "mass_mearth", 0.0);
      p.inclination_deg = num(path, *t, "planets", "inclination_deg", 90.0);
      p.period_d = num(path, *t, "planets", "period_d", 0.0);
      p.K_ms = num(path, *t, "planets", "K_ms", 0.0);
      p.ecc = num(path, *t, "planets", "ecc", 0.0);
      p.omega_deg = num(path, *t, "planets", "omega_deg", 90.0);
      p.t_conj_bjd = num(path, *t, "planets", "t_conj_bjd", s.start_bjd + 0.3 * p.period_d);
      if (const toml::node* n = t->get("transiting")) {
        if (!n->is_boolean()) throw InputError(fmt::format("{} must be true or false", where(path, *n, "planets.transiting")));
        p.transiting = *n->value<bool>();
      }
      s.planets.push_back(p);
    }
  }
  std::stable_sort(s.planets.begin(), s.planets.end(),
                   [](const SimPlanet& a, const SimPlanet& b) { return a.period_d < b.period_d; });
  if (auto* t = root["trend"].as_table()) {
    allow(path, *t, "trend", {"c1_ms_per_d", "c2_ms_per_d2"});
    s.trend_c1 = num(path, *t, "trend", "c1_ms_per_d", 0.0);
    s.trend_c2 = num(path, *t, "trend", "c2_ms_per_d2", 0.0);
  }
  if (auto* t = root["transits"].as_table()) {
    allow(path, *t, "transits", {"planet", "n_transits", "sigma_d", "ttv_amplitude_d", "ttv_period_epochs", "ttv_phase_deg"});
    s.transits.enabled = true;
    s.transits.planet = str(path, *t, "transits", "planet", "b");
    s.transits.n_transits = static_cast<int>(num(path, *t, "transits", "n_transits", 20));
    s.transits.sigma_d = num(path, *t, "transits", "sigma_d", s.transits.sigma_d);
    s.transits.ttv_amplitude_d = num(path, *t, "transits", "ttv_amplitude_d", 0.0);
    s.transits.ttv_period_epochs = num(path, *t, "transits", "ttv_period_epochs", 0.0);
    s.transits.ttv_phase_deg = num(path, *t, "transits", "ttv_phase_deg", 0.0);
  }
  if (auto* t = root["nbody"].as_table()) {
    allow(path, *t, "nbody", {"osculating_epoch_bjd"});
    s.nbody = true;
    s.osculating_epoch_bjd = num(path, *t, "nbody", "osculating_epoch_bjd", s.start_bjd);
  }
  if (auto msg = s.Validate(); !msg.empty()) throw InputError(fmt::format("{}: {}", path, msg));
  return s;
}

Scenario load_scenario(const std::string& path) {
  std::error_code ec;
  if (!std::filesystem::exists(path, ec)) throw InputError(fmt::format("{}: no such file", path));
  if (std::filesystem::is_directory(path, ec)) throw InputError(fmt::format("{}: is a directory, not a scenario file", path));
  std::ifstream in(path);
  if (!in) throw InputError(fmt::format("{}: cannot be opened for reading", path));
  std::stringstream ss;
  ss << in.rdbuf();
  return parse_scenario(ss.str(), path);
}

SimulatedData simulate(const Scenario& sc) {
  std::mt19937_64 rng(sc.seed);
  std::normal_distribution<double> gauss(0.0, 1.0);
  std::uniform_real_distribution<double> unif(0.0, 1.0);
  SimulatedData out;
  const long double ref = std::floor(static_cast<long double>(sc.start_bjd) + 0.5L * sc.span_days);
  const double t_mid = static_cast<double>(ref);

  // Weather: a two-state Markov chain (clear spells and cloudy spells) whose stationary
  // clear fraction is clear_fraction; the season: the star is up for season_days a year.
  const int n_nights = static_cast<int>(std::ceil(sc.span_days));
  std::vector<bool> clear(static_cast<std::size_t>(n_nights));
  const double stay = 0.8;
  const double to_clear = sc.clear_fraction >= 1.0 ? 1.0 : sc.clear_fraction * (1.0 - stay) / (1.0 - sc.clear_fraction);
  bool state = unif(rng) < sc.clear_fraction;
  for (int n = 0; n < n_nights; ++n) {
    state = state ? unif(rng) < stay : unif(rng) < std::min(1.0, to_clear);
    const bool in_season = std::fmod(static_cast<double>(n), constants::kJulianYearDays) < sc.season_days;
    clear[static_cast<std::size_t>(n)] = state && in_season;
  }

  std::vector<Planet> planets;
  NbodySystem system;  // [nbody]: the interacting planets (Keplerian `planets` unused)
  system.star_mass_msun = sc.mass_msun;
  system.osculating_epoch_days = sc.osculating_epoch_bjd - t_mid;
  for (const auto& p : sc.planets) {
    if (sc.nbody) {
      const double mu = p.mass_mearth * constants::kGMEarth / constants::kGMSun / sc.mass_msun;
      system.planets.push_back(NbodyPlanet::from_elements(mu, p.period_d, p.ecc, p.omega_deg * constants::kPi / 180.0,
                                                          p.t_conj_bjd - t_mid, p.inclination_deg * constants::kPi / 180.0));
      continue;
    }
    planets.push_back(Planet::from_elements(p.period_d, p.K_ms, p.ecc, p.omega_deg * constants::kPi / 180.0,
                                            p.t_conj_bjd - t_mid));
  }
  std::vector<double> row_scale;  // per velocity row, for the N-body velocities added below
  nlohmann::json truth;
  truth["star"] = {{"name", sc.star_name}, {"mass_msun", sc.mass_msun}, {"mass_err_msun", sc.mass_err_msun},
                   {"radius_rsun", sc.radius_rsun}};
  truth["seed"] = sc.seed;
  truth["instruments"] = nlohmann::json::array();
  for (const auto& inst : sc.instruments) {
    const double scale = inst.unit == VelocityUnit::kKilometersPerSecond ? 1e-3 : 1.0;
    const double t0 = inst.start_bjd > 0 ? inst.start_bjd : sc.start_bjd;
    const double t1 = inst.end_bjd > 0 ? inst.end_bjd : sc.start_bjd + sc.span_days;
    std::vector<int> nights;
    for (int n = 0; n < n_nights; ++n) {
      const double tn = sc.start_bjd + n;
      if (clear[static_cast<std::size_t>(n)] && tn >= t0 && tn <= t1) nights.push_back(n);
    }
    if (static_cast<int>(nights.size()) < inst.n_points) {
      throw InputError(fmt::format("instrument '{}': only {} clear nights in its window for n_points = {}; "
                                   "widen the span or raise clear_fraction",
                                   inst.name, nights.size(), inst.n_points));
    }
    std::shuffle(nights.begin(), nights.end(), rng);
    nights.resize(static_cast<std::size_t>(inst.n_points));
    std::sort(nights.begin(), nights.end());
    for (int n : nights) {
      double dt = sc.hour_scatter_d * gauss(rng);
      dt = std::clamp(dt, -0.2, 0.2);
      const long double t = static_cast<long double>(sc.start_bjd) + n + dt;
      const double tr = static_cast<double>(t - ref);
      double v = inst.offset_ms + sc.trend_c1 * tr + sc.trend_c2 * tr * tr;
      for (const auto& p : planets) v += planet_velocity(p, tr);
      const double sigma = inst.sigma_ms * std::exp(inst.sigma_scatter * gauss(rng) - 0.5 * inst.sigma_scatter * inst.sigma_scatter);
      const double noise = std::sqrt(sigma * sigma + inst.jitter_ms * inst.jitter_ms) * gauss(rng);
      out.velocities.push_back({t, (v + noise) * scale, sigma * scale, inst.name});
      row_scale.push_back(scale);
    }
    truth["instruments"].push_back({{"name", inst.name}, {"offset_ms", inst.offset_ms}, {"jitter_ms", inst.jitter_ms},
                                    {"n_points", inst.n_points}, {"velocity_unit", to_string(inst.unit)}});
  }
  if (sc.nbody && !out.velocities.empty()) {
    std::vector<double> times;
    for (const auto& r : out.velocities) times.push_back(static_cast<double>(r.time_bjd - ref));
    const NbodyObservables obs = compute_observables(system, times, {});
    if (!obs.ok()) throw InputError(fmt::format("[nbody] scenario: the system cannot be integrated: {}", obs.message));
    for (std::size_t i = 0; i < times.size(); ++i) out.velocities[i].velocity += obs.star_velocity_m_s[i] * row_scale[i];
  }
  std::stable_sort(out.velocities.begin(), out.velocities.end(),
                   [](const auto& a, const auto& b) { return a.time_bjd < b.time_bjd; });

  truth["planets"] = nlohmann::json::array();
  for (std::size_t j = 0; j < sc.planets.size(); ++j) {
    const auto& p = sc.planets[j];
    const double m = minimum_mass_msun(p.period_d, p.K_ms, p.ecc, sc.mass_msun);
    nlohmann::json pj = {{"label", planet_label(static_cast<int>(j))}, {"period_d", p.period_d}, {"K_ms", p.K_ms},
                         {"ecc", p.ecc}, {"omega_deg", p.omega_deg}, {"t_conj_bjd", p.t_conj_bjd},
                         {"msini_mjup", msun_to_mjup(m)}, {"msini_mearth", msun_to_mearth(m)},
                         {"a_au", semi_major_axis_au(p.period_d, sc.mass_msun, m)}, {"transiting", p.transiting}};
    const double tp = time_of_periastron(p.period_d, p.ecc, p.omega_deg * constants::kPi / 180.0, p.t_conj_bjd - t_mid);
    pj["t_peri_bjd"] = tp + t_mid;
    if (sc.nbody) {
      const double mp = p.mass_mearth * constants::kGMEarth / constants::kGMSun;
      pj["mass_mearth"] = p.mass_mearth;
      pj["inclination_deg"] = p.inclination_deg;
      pj["K_ms"] = semi_amplitude_m_s(p.period_d, mp * std::sin(p.inclination_deg * constants::kPi / 180.0), sc.mass_msun, p.ecc);
      pj["msini_mearth"] = p.mass_mearth * std::sin(p.inclination_deg * constants::kPi / 180.0);
      pj["note"] = "osculating Jacobi elements at the osculating epoch (N-body)";
    }
    truth["planets"].push_back(pj);
  }
  truth["trend"] = {{"c1_ms_per_d", sc.trend_c1}, {"c2_ms_per_d2", sc.trend_c2}, {"reference_bjd", t_mid}};

  if (sc.transits.enabled) {
    const auto& tr = sc.transits;
    const auto& p = sc.planets[static_cast<std::size_t>(tr.planet[0] - 'b')];
    const long long n0 = static_cast<long long>(std::ceil((sc.start_bjd - p.t_conj_bjd) / p.period_d));
    const long long n1 = static_cast<long long>(std::floor((sc.start_bjd + sc.span_days - p.t_conj_bjd) / p.period_d));
    std::vector<long long> epochs;
    for (long long n = n0; n <= n1; ++n) epochs.push_back(n);
    if (static_cast<int>(epochs.size()) < tr.n_transits)
      throw InputError(fmt::format("transits: only {} transits of planet {} fall in the span for n_transits = {}",
                                   epochs.size(), tr.planet, tr.n_transits));
    std::shuffle(epochs.begin(), epochs.end(), rng);
    epochs.resize(static_cast<std::size_t>(tr.n_transits));
    std::sort(epochs.begin(), epochs.end());
    std::vector<double> engine_times;
    if (sc.nbody) {
      std::vector<std::vector<long long>> req(sc.planets.size());
      req[static_cast<std::size_t>(tr.planet[0] - 'b')] = epochs;
      const NbodyObservables obs = compute_observables(system, {}, req);
      if (!obs.ok()) throw InputError(fmt::format("[nbody] scenario: the system cannot be integrated: {}", obs.message));
      engine_times = obs.transit_times_days[static_cast<std::size_t>(tr.planet[0] - 'b')];
    }
    for (std::size_t k = 0; k < epochs.size(); ++k) {
      const long long n = epochs[k];
      if (sc.nbody) {
        const long double linear = static_cast<long double>(p.t_conj_bjd) + static_cast<long double>(n) * p.period_d;
        const long double t = ref + static_cast<long double>(engine_times[k]) + tr.sigma_d * gauss(rng);
        out.transits.push_back({n, t, tr.sigma_d, static_cast<double>(ref + static_cast<long double>(engine_times[k]) - linear)});
        continue;
      }
      double ttv = 0.0;
      if (tr.ttv_amplitude_d != 0.0 && tr.ttv_period_epochs > 0.0)
        ttv = tr.ttv_amplitude_d * std::sin(constants::kTwoPi * static_cast<double>(n) / tr.ttv_period_epochs +
                                            tr.ttv_phase_deg * constants::kPi / 180.0);
      const long double t = static_cast<long double>(p.t_conj_bjd) + static_cast<long double>(n) * p.period_d + ttv +
                            tr.sigma_d * gauss(rng);
      out.transits.push_back({n, t, tr.sigma_d, ttv});
    }
    truth["transits"] = {{"planet", tr.planet}, {"n_transits", tr.n_transits}, {"sigma_d", tr.sigma_d},
                         {"ttv_amplitude_d", tr.ttv_amplitude_d}, {"ttv_period_epochs", tr.ttv_period_epochs},
                         {"ttv_phase_deg", tr.ttv_phase_deg}};
  }
  out.truth_json = truth.dump(2) + "\n";
  return out;
}

std::string SimulatedData::velocity_csv(const std::string& instrument) const {
  std::string s = "time_bjd,velocity,uncertainty,instrument\n";
  for (const auto& r : velocities) {
    if (r.instrument != instrument) continue;
    s += fmt::format("{:.6f},{:.6f},{:.6f},{}\n", static_cast<double>(r.time_bjd), r.velocity, r.uncertainty, r.instrument);
  }
  return s;
}

std::string SimulatedData::transit_csv() const {
  std::string s = "epoch,t_mid_bjd,uncertainty_d\n";
  for (const auto& r : transits) s += fmt::format("{},{:.7f},{:.7f}\n", r.epoch, static_cast<double>(r.time_bjd), r.uncertainty_d);
  return s;
}

}  // namespace apsides
