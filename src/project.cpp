#include "apsides/project.h"

#include <fmt/format.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <filesystem>
#include <fstream>
#include <set>
#include <sstream>
#include <tuple>
#include <toml++/toml.h>

#include "apsides/error.h"
#include "text_table.h"

namespace apsides {
namespace fs = std::filesystem;

namespace {

struct Ctx {
  std::string path;      // the project file, for messages
  std::string base_dir;  // resolves relative data paths
  bool data_in_memory = false;  // project_from_data: no [[velocities]] / [[transits]] blocks
  std::string where(const toml::node& n, const std::string& key) const {
    const auto& src = n.source();
    if (src.begin.line > 0) return fmt::format("{}:{}: {}", path, src.begin.line, key);
    return fmt::format("{}: {}", path, key);
  }
};

void check_keys(const Ctx& ctx, const toml::table& t, const std::string& table_name,
                const std::set<std::string>& allowed) {
  for (const auto& [k, v] : t) {
    const std::string key(k.str());
    if (allowed.count(key)) continue;
    const std::string name = table_name.empty() ? key : table_name + "." + key;
    const std::string best = detail::suggest_key(key, {allowed.begin(), allowed.end()});
    std::string list;
    for (const auto& a : allowed) list += (list.empty() ? "" : ", ") + a;
    const int line = k.source().begin.line > 0 ? static_cast<int>(k.source().begin.line)
                                               : static_cast<int>(v.source().begin.line);
    if (!best.empty()) {
      throw InputError(fmt::format("{}:{}: unknown key '{}'; did you mean '{}'?", ctx.path, line, name, best));
    }
    throw InputError(fmt::format("{}:{}: unknown key '{}' (known: {})", ctx.path, line, name, list));
  }
}

std::string full(const std::string& table, const std::string& key) {
  return table.empty() ? key : table + "." + key;
}

double get_number(const Ctx& ctx, const toml::table& t, const std::string& table,
                  const std::string& key, double fallback, bool* present = nullptr) {
  const toml::node* n = t.get(key);
  if (present) *present = n != nullptr;
  if (!n) return fallback;
  if (auto v = n->value<double>(); v && (n->is_floating_point() || n->is_integer())) {
    if (!std::isfinite(*v)) throw InputError(fmt::format("{} is {}; it must be finite", ctx.where(*n, full(table, key)), *v));
    return *v;
  }
  throw InputError(fmt::format("{} must be a number", ctx.where(*n, full(table, key))));
}

long get_integer(const Ctx& ctx, const toml::table& t, const std::string& table,
                 const std::string& key, long fallback) {
  const toml::node* n = t.get(key);
  if (!n) return fallback;
  if (n->is_integer()) return static_cast<long>(*n->value<int64_t>());
  throw InputError(fmt::format("{} must be an integer", ctx.where(*n, full(table, key))));
}

bool get_bool(const Ctx& ctx, const toml::table& t, const std::string& table,
              const std::string& key, bool fallback) {
  const toml::node* n = t.get(key);
  if (!n) return fallback;
  if (n->is_boolean()) return *n->value<bool>();
  throw InputError(fmt::format("{} must be true or false", ctx.where(*n, full(table, key))));
}

std::string get_string(const Ctx& ctx, const toml::table& t, const std::string& table,
                       const std::string& key, const std::string& fallback) {
  const toml::node* n = t.get(key);
  if (!n) return fallback;
  if (n->is_string()) return *n->value<std::string>();
  throw InputError(fmt::format("{} must be a string", ctx.where(*n, full(table, key))));
}

// A list of distinct, non-empty strings.
std::vector<std::string> get_string_list(const Ctx& ctx, const toml::table& t, const std::string& table,
                                         const std::string& key) {
  const toml::node* n = t.get(key);
  std::vector<std::string> out;
  if (!n) return out;
  const std::string where = ctx.where(*n, full(table, key));
  if (!n->is_array()) throw InputError(fmt::format("{} must be a list of strings like [\"a\", \"b\"]", where));
  for (const auto& e : *n->as_array()) {
    if (!e.is_string()) throw InputError(fmt::format("{} must be a list of strings like [\"a\", \"b\"]", where));
    std::string v = *e.value<std::string>();
    if (v.empty()) throw InputError(fmt::format("{} holds an empty name", where));
    if (std::find(out.begin(), out.end(), v) != out.end())
      throw InputError(fmt::format("{} names '{}' twice", where, v));
    out.push_back(std::move(v));
  }
  return out;
}

// A `time_offset` key (days added to every time of a file), when present.
std::optional<double> get_time_offset(const Ctx& ctx, const toml::table& t, const std::string& table) {
  bool has = false;
  const double v = get_number(ctx, t, table, "time_offset", 0.0, &has);
  if (!has) return std::nullopt;
  check_time_offset(v, ctx.where(*t.get("time_offset"), full(table, "time_offset")));
  return v;
}

const toml::table* get_table(const Ctx& ctx, const toml::table& root, const std::string& key) {
  const toml::node* n = root.get(key);
  if (!n) return nullptr;
  if (!n->is_table()) throw InputError(fmt::format("{} must be a table ([{}])", ctx.where(*n, key), key));
  return n->as_table();
}

std::vector<const toml::table*> get_array_of_tables(const Ctx& ctx, const toml::table& root,
                                                    const std::string& key) {
  std::vector<const toml::table*> out;
  const toml::node* n = root.get(key);
  if (!n) return out;
  if (n->is_table()) {
    throw InputError(fmt::format("{} must be written [[{}]] (one block per file), not [{}]",
                                 ctx.where(*n, key), key, key));
  }
  if (!n->is_array()) throw InputError(fmt::format("{} must be an array of tables ([[{}]])", ctx.where(*n, key), key));
  for (const auto& e : *n->as_array()) {
    if (!e.is_table()) throw InputError(fmt::format("{} must be an array of tables ([[{}]])", ctx.where(e, key), key));
    out.push_back(e.as_table());
  }
  return out;
}

std::string resolve(const std::string& base_dir, const std::string& file) {
  fs::path p(file);
  if (p.is_absolute() || base_dir.empty()) return p.lexically_normal().string();
  return (fs::path(base_dir) / p).lexically_normal().string();
}

PriorSpec parse_prior_entry(const Ctx& ctx, const std::string& name, const toml::node& node) {
  const std::string key = "priors." + name;
  if (!node.is_table()) {
    throw InputError(fmt::format("{} must be an inline table like {{ dist = \"uniform\", min = 0, max = 1 }}",
                                 ctx.where(node, key)));
  }
  const toml::table& t = *node.as_table();
  PriorSpec spec;
  spec.parameter = name;
  const std::string dist = get_string(ctx, t, key, "dist", "");
  if (dist.empty()) throw InputError(fmt::format("{} needs a 'dist' key", ctx.where(node, key)));
  const bool is_ecc = name == "eccentricity" || (name.size() > 13 && name.substr(name.size() - 13) == ".eccentricity");
  if (is_ecc) {
    check_keys(ctx, t, key, {"dist", "a", "b", "max"});
    EccentricityPrior ep;
    if (dist == "uniform") ep.kind = EccentricityPriorKind::kUniform;
    else if (dist == "beta") ep.kind = EccentricityPriorKind::kBeta;
    else if (dist == "circular") ep.kind = EccentricityPriorKind::kCircular;
    else throw InputError(fmt::format("{}.dist is '{}'; an eccentricity prior is \"uniform\", \"beta\" or \"circular\"", ctx.where(node, key), dist));
    ep.a = get_number(ctx, t, key, "a", ep.a);
    ep.b = get_number(ctx, t, key, "b", ep.b);
    ep.max_ecc = get_number(ctx, t, key, "max", ep.max_ecc);
    if (auto msg = ep.Validate(); !msg.empty()) throw InputError(fmt::format("{}: impossible prior: {}", ctx.where(node, key), msg));
    spec.eccentricity = ep;
    return spec;
  }
  const PriorKind kind = parse_prior_kind(dist, ctx.where(node, key + ".dist"));
  Prior p;
  switch (kind) {
    case PriorKind::kUniform:
    case PriorKind::kLogUniform: {
      check_keys(ctx, t, key, {"dist", "min", "max"});
      bool h1, h2;
      double lo = get_number(ctx, t, key, "min", 0, &h1), hi = get_number(ctx, t, key, "max", 0, &h2);
      if (!h1 || !h2) throw InputError(fmt::format("{}: a {} prior needs min and max", ctx.where(node, key), dist));
      p = kind == PriorKind::kUniform ? Prior::uniform(lo, hi) : Prior::log_uniform(lo, hi);
      break;
    }
    case PriorKind::kNormal: {
      check_keys(ctx, t, key, {"dist", "mean", "sd"});
      bool h1, h2;
      double m = get_number(ctx, t, key, "mean", 0, &h1), s = get_number(ctx, t, key, "sd", 0, &h2);
      if (!h1 || !h2) throw InputError(fmt::format("{}: a normal prior needs mean and sd", ctx.where(node, key)));
      p = Prior::normal(m, s);
      break;
    }
    case PriorKind::kTruncatedNormal: {
      check_keys(ctx, t, key, {"dist", "mean", "sd", "min", "max"});
      bool h1, h2, h3, h4;
      double m = get_number(ctx, t, key, "mean", 0, &h1), s = get_number(ctx, t, key, "sd", 0, &h2);
      double lo = get_number(ctx, t, key, "min", 0, &h3), hi = get_number(ctx, t, key, "max", 0, &h4);
      if (!h1 || !h2 || !h3 || !h4) throw InputError(fmt::format("{}: a truncated-normal prior needs mean, sd, min and max", ctx.where(node, key)));
      p = Prior::truncated_normal(m, s, lo, hi);
      break;
    }
    case PriorKind::kHalfNormal: {
      check_keys(ctx, t, key, {"dist", "sd"});
      bool h;
      double s = get_number(ctx, t, key, "sd", 0, &h);
      if (!h) throw InputError(fmt::format("{}: a half-normal prior needs sd", ctx.where(node, key)));
      p = Prior::half_normal(s);
      break;
    }
    case PriorKind::kModifiedJeffreys: {
      check_keys(ctx, t, key, {"dist", "knee", "max"});
      bool h1, h2;
      double k = get_number(ctx, t, key, "knee", 0, &h1), hi = get_number(ctx, t, key, "max", 0, &h2);
      if (!h1 || !h2) throw InputError(fmt::format("{}: a modified-jeffreys prior needs knee and max", ctx.where(node, key)));
      p = Prior::modified_jeffreys(k, hi);
      break;
    }
    case PriorKind::kFixed: {
      check_keys(ctx, t, key, {"dist", "value"});
      bool h;
      double v = get_number(ctx, t, key, "value", 0, &h);
      if (!h) throw InputError(fmt::format("{}: a fixed prior needs value", ctx.where(node, key)));
      p = Prior::fixed(v);
      break;
    }
  }
  if (auto msg = p.Validate(); !msg.empty()) {
    throw InputError(fmt::format("{}: impossible prior: {}", ctx.where(node, key), msg));
  }
  spec.prior = p;
  return spec;
}

// [limits]: detection limits by injection-recovery (limits.h).
void parse_limits(const Ctx& ctx, const toml::table& root, Project& pr) {
  LimitsSettings& l = pr.limits;
  const toml::table* t = get_table(ctx, root, "limits");
  if (!t) return;
  check_keys(ctx, *t, "limits", {"enabled", "period_cells", "mass_cells", "injections", "seed", "min_period_d",
                                 "max_period_d", "min_msini_mearth", "max_msini_mearth", "noise", "recovery",
                                 "eccentricity"});
  l.enabled = get_bool(ctx, *t, "limits", "enabled", false);
  auto count = [&](const char* key, int fallback) {
    const long v = get_integer(ctx, *t, "limits", key, fallback);
    if (v < 1 || v > 100000)
      throw InputError(fmt::format("{} is {}; it must be between 1 and 100000", ctx.where(*t->get(key), full("limits", key)), v));
    return static_cast<int>(v);
  };
  l.period_cells = count("period_cells", l.period_cells);
  l.mass_cells = count("mass_cells", l.mass_cells);
  l.injections = count("injections", l.injections);
  const long seed = get_integer(ctx, *t, "limits", "seed", 1);
  if (seed < 0) throw InputError(fmt::format("{} is {}; it must be >= 0", ctx.where(*t->get("seed"), "limits.seed"), seed));
  l.seed = static_cast<unsigned long long>(seed);
  auto positive = [&](const char* key, std::optional<double>& out) {
    bool has = false;
    const double v = get_number(ctx, *t, "limits", key, 0, &has);
    if (!has) return;
    if (!(v > 0)) throw InputError(fmt::format("{} is {}; it must be > 0", ctx.where(*t->get(key), full("limits", key)), v));
    out = v;
  };
  positive("min_period_d", l.min_period_d);
  positive("max_period_d", l.max_period_d);
  positive("min_msini_mearth", l.min_msini_mearth);
  positive("max_msini_mearth", l.max_msini_mearth);
  if (l.min_period_d && l.max_period_d && !(*l.min_period_d < *l.max_period_d))
    throw InputError(fmt::format("{}: limits.min_period_d = {} is not below limits.max_period_d = {}", ctx.path, *l.min_period_d, *l.max_period_d));
  if (l.min_msini_mearth && l.max_msini_mearth && !(*l.min_msini_mearth < *l.max_msini_mearth))
    throw InputError(fmt::format("{}: limits.min_msini_mearth = {} is not below limits.max_msini_mearth = {}", ctx.path, *l.min_msini_mearth, *l.max_msini_mearth));
  if (const toml::node* n = t->get("noise")) l.noise = parse_injection_noise(get_string(ctx, *t, "limits", "noise", ""), ctx.where(*n, "limits.noise"));
  if (const toml::node* n = t->get("recovery")) l.recovery = parse_recovery_test(get_string(ctx, *t, "limits", "recovery", ""), ctx.where(*n, "limits.recovery"));
  if (const toml::node* n = t->get("eccentricity")) {
    const std::string e = get_string(ctx, *t, "limits", "eccentricity", "beta");
    if (e == "uniform") l.eccentricity = EccentricityPriorKind::kUniform;
    else if (e == "beta") l.eccentricity = EccentricityPriorKind::kBeta;
    else if (e == "circular") l.eccentricity = EccentricityPriorKind::kCircular;
    else throw InputError(fmt::format("{} is '{}'; it must be \"beta\", \"uniform\" or \"circular\"", ctx.where(*n, "limits.eccentricity"), e));
  }
}

// One function per table; each reads its own table(s) from the root and fills `pr`. To
// add a table: write its function and add it to kTables (the unknown-key check of the
// root reads the names from there); to add a key: add it to the table's key list and read it.

void parse_star(const Ctx& ctx, const toml::table& root, Project& pr) {
  const toml::table* t = get_table(ctx, root, "star");
  if (!t) return;
  check_keys(ctx, *t, "star", {"name", "mass_msun", "mass_err_msun", "radius_rsun", "radius_err_rsun"});
  auto at = [&](const char* key) { return ctx.where(*t->get(key), full("star", key)); };
  pr.star.name = get_string(ctx, *t, "star", "name", "");
  bool has = false;
  double m = get_number(ctx, *t, "star", "mass_msun", 0, &has);
  if (has) {
    if (!(m > 0)) throw InputError(fmt::format("{} is {}; it must be > 0", at("mass_msun"), m));
    pr.star.mass_msun = m;
  }
  pr.star.mass_err_msun = get_number(ctx, *t, "star", "mass_err_msun", 0.0);
  if (pr.star.mass_err_msun < 0) throw InputError(fmt::format("{} is {}; it must be >= 0", at("mass_err_msun"), pr.star.mass_err_msun));
  if (has && pr.star.mass_err_msun >= m) throw InputError(fmt::format("{} is {}; it must be below star.mass_msun = {}", at("mass_err_msun"), pr.star.mass_err_msun, m));
  double r = get_number(ctx, *t, "star", "radius_rsun", 0, &has);
  if (has) {
    if (!(r > 0)) throw InputError(fmt::format("{} is {}; it must be > 0", at("radius_rsun"), r));
    pr.star.radius_rsun = r;
  }
  pr.star.radius_err_rsun = get_number(ctx, *t, "star", "radius_err_rsun", 0.0);
  if (pr.star.radius_err_rsun < 0) throw InputError(fmt::format("{} is {}; it must be >= 0", at("radius_err_rsun"), pr.star.radius_err_rsun));
  if (pr.star.radius_rsun && pr.star.radius_err_rsun >= *pr.star.radius_rsun) throw InputError(fmt::format("{} is {}; it must be below star.radius_rsun = {}", at("radius_err_rsun"), pr.star.radius_err_rsun, *pr.star.radius_rsun));
  if (!has && pr.star.radius_err_rsun > 0) throw InputError(fmt::format("{} is given without star.radius_rsun", at("radius_err_rsun")));
}

// The `file` key of a [[velocities]] / [[transits]] block: resolved path and its origin.
std::pair<std::string, std::string> block_file(const Ctx& ctx, const toml::table& t, const std::string& table,
                                               const char* kind) {
  const std::string f = get_string(ctx, t, table, "file", "");
  if (!t.get("file")) throw InputError(fmt::format("{}:{}: [[{}]] block needs a 'file' key", ctx.path, t.source().begin.line, table));
  if (f.empty()) throw InputError(fmt::format("{}: is empty; it must name a {} file", ctx.where(*t.get("file"), table + ".file"), kind));
  return {resolve(ctx.base_dir, f), fmt::format("{}:{}", ctx.path, t.get("file")->source().begin.line)};
}

void parse_velocities(const Ctx& ctx, const toml::table& root, Project& pr) {
  const std::string T = "velocities";
  for (const toml::table* t : get_array_of_tables(ctx, root, T)) {
    check_keys(ctx, *t, T, {"file", "instrument", "velocity_unit", "time_offset", "repeats", "indicators", "columns"});
    VelocitySource s;
    std::tie(s.file, s.origin) = block_file(ctx, *t, T, "velocity");
    VelocityFileOptions& o = s.options;
    o.declared_at = s.origin;
    o.instrument = get_string(ctx, *t, T, "instrument", "");
    if (const toml::node* n = t->get("instrument"); n && o.instrument.empty())
      throw InputError(fmt::format("{} is empty; give a label or leave the key out", ctx.where(*n, "velocities.instrument")));
    if (const toml::node* n = t->get("velocity_unit"))
      o.unit = parse_velocity_unit(get_string(ctx, *t, T, "velocity_unit", ""), ctx.where(*n, "velocities.velocity_unit"));
    o.time_offset_days = get_time_offset(ctx, *t, T);
    if (const toml::node* n = t->get("repeats"))
      o.repeats = parse_repeat_policy(get_string(ctx, *t, T, "repeats", ""), ctx.where(*n, "velocities.repeats"));
    if (t->get("indicators")) o.indicators = get_string_list(ctx, *t, T, "indicators");
    o.columns = get_string_list(ctx, *t, T, "columns");
    if (const toml::node* n = t->get("columns"); n && o.columns.size() < 3)
      throw InputError(fmt::format("{} names {} column(s); it must name every column of the file, at least time, "
                                   "velocity and uncertainty", ctx.where(*n, "velocities.columns"), o.columns.size()));
    pr.velocities.push_back(s);
  }
  if (pr.velocities.empty() && !ctx.data_in_memory) {
    throw InputError(fmt::format("{}: no [[velocities]] block; a project needs at least one velocity file", ctx.path));
  }
}

void parse_transits(const Ctx& ctx, const toml::table& root, Project& pr) {
  const std::string T = "transits";
  for (const toml::table* t : get_array_of_tables(ctx, root, T)) {
    check_keys(ctx, *t, T, {"file", "planet", "fit_jitter", "time_offset"});
    TransitSource s;
    std::tie(s.file, s.origin) = block_file(ctx, *t, T, "transit-time");
    s.planet = get_string(ctx, *t, T, "planet", "");
    if (t->get("planet") && (s.planet.size() != 1 || s.planet[0] < 'b' || s.planet[0] > 'z'))
      throw InputError(fmt::format("{} is '{}'; planets are labelled b, c, d, ... (a letter from b to z)", ctx.where(*t->get("planet"), "transits.planet"), s.planet));
    s.fit_jitter = get_bool(ctx, *t, T, "fit_jitter", false);
    s.time_offset_days = get_time_offset(ctx, *t, T);
    pr.transits.push_back(s);
  }
}

void parse_search(const Ctx& ctx, const toml::table& root, Project& pr) {
  const toml::table* t = get_table(ctx, root, "search");
  if (!t) return;
  check_keys(ctx, *t, "search", {"max_planets", "min_period_d", "max_period_d", "oversample", "fap_threshold"});
  auto at = [&](const char* key) { return ctx.where(*t->get(key), full("search", key)); };
  pr.search.max_planets = static_cast<int>(get_integer(ctx, *t, "search", "max_planets", 3));
  if (pr.search.max_planets < 0 || pr.search.max_planets > 10)
    throw InputError(fmt::format("{} is {}; it must be between 0 and 10", at("max_planets"), pr.search.max_planets));
  bool has;
  double v = get_number(ctx, *t, "search", "min_period_d", 0, &has);
  if (has) {
    if (!(v > 0)) throw InputError(fmt::format("{} is {}; it must be > 0", at("min_period_d"), v));
    pr.search.min_period_d = v;
  }
  v = get_number(ctx, *t, "search", "max_period_d", 0, &has);
  if (has) {
    if (!(v > 0)) throw InputError(fmt::format("{} is {}; it must be > 0", at("max_period_d"), v));
    pr.search.max_period_d = v;
  }
  if (pr.search.min_period_d && pr.search.max_period_d && !(*pr.search.min_period_d < *pr.search.max_period_d))
    throw InputError(fmt::format("{}: search.min_period_d = {} is not below search.max_period_d = {}", ctx.path, *pr.search.min_period_d, *pr.search.max_period_d));
  pr.search.oversample = get_number(ctx, *t, "search", "oversample", 10.0);
  if (!(pr.search.oversample >= 1.0)) throw InputError(fmt::format("{} is {}; it must be >= 1", at("oversample"), pr.search.oversample));
  pr.search.fap_threshold = get_number(ctx, *t, "search", "fap_threshold", 1e-3);
  if (!(pr.search.fap_threshold > 0 && pr.search.fap_threshold < 1)) throw InputError(fmt::format("{} is {}; it must be in (0, 1)", at("fap_threshold"), pr.search.fap_threshold));
}

void parse_model(const Ctx& ctx, const toml::table& root, Project& pr) {
  const toml::table* t = get_table(ctx, root, "model");
  if (!t) return;
  check_keys(ctx, *t, "model",
             {"planets", "trend", "fit_jitter", "eccentricity", "periastron_outside_star", "dynamics", "osculating_epoch"});
  if (const toml::node* n = t->get("dynamics")) {
    const std::string d = get_string(ctx, *t, "model", "dynamics", "keplerian");
    if (d == "keplerian") pr.model.dynamics = Dynamics::kKeplerian;
    else if (d == "nbody") pr.model.dynamics = Dynamics::kNbody;
    else throw InputError(fmt::format("{} is '{}'; it must be \"keplerian\" or \"nbody\"", ctx.where(*n, "model.dynamics"), d));
  }
  if (const toml::node* n = t->get("osculating_epoch")) {
    const double e = get_number(ctx, *t, "model", "osculating_epoch", 0.0);
    if (!std::isfinite(e) || e < 1e6)
      throw InputError(fmt::format("{} is {}; it must be a full BJD_TDB (e.g. 2459000.5)", ctx.where(*n, "model.osculating_epoch"), e));
    if (pr.model.dynamics != Dynamics::kNbody)
      throw InputError(fmt::format("{}: an osculating epoch needs dynamics = \"nbody\"", ctx.where(*n, "model.osculating_epoch")));
    pr.nbody.osculating_epoch_bjd = e;
  }
  if (const toml::node* n = t->get("planets")) {
    long k = get_integer(ctx, *t, "model", "planets", 0);
    if (k < 0 || k > 10) throw InputError(fmt::format("{} is {}; it must be between 0 and 10", ctx.where(*n, "model.planets"), k));
    pr.model.planets = static_cast<int>(k);
  }
  if (const toml::node* n = t->get("trend"))
    pr.model.trend = parse_trend(get_string(ctx, *t, "model", "trend", "none"), ctx.where(*n, "model.trend"));
  pr.model.fit_jitter = get_bool(ctx, *t, "model", "fit_jitter", true);
  pr.model.periastron_outside_star = get_bool(ctx, *t, "model", "periastron_outside_star", true);
  if (const toml::node* n = t->get("eccentricity")) {
    const std::string e = get_string(ctx, *t, "model", "eccentricity", "uniform");
    if (e == "uniform") pr.model.eccentricity = EccentricityPriorKind::kUniform;
    else if (e == "beta") pr.model.eccentricity = EccentricityPriorKind::kBeta;
    else if (e == "circular") pr.model.eccentricity = EccentricityPriorKind::kCircular;
    else throw InputError(fmt::format("{} is '{}'; it must be \"uniform\", \"beta\" or \"circular\"", ctx.where(*n, "model.eccentricity"), e));
  }
}

void parse_noise(const Ctx& ctx, const toml::table& root, Project& pr) {
  const toml::table* t = get_table(ctx, root, "noise");
  if (!t) return;
  check_keys(ctx, *t, "noise", {"kind", "kernel", "per_instrument_amplitude", "rotation_period_d"});
  NoiseSettings& n = pr.model.noise;
  if (const toml::node* k = t->get("kind"))
    n.kind = parse_noise_kind(get_string(ctx, *t, "noise", "kind", "white"), ctx.where(*k, "noise.kind"));
  if (const toml::node* k = t->get("kernel"))
    n.kernel = gp::parse_kernel_kind(get_string(ctx, *t, "noise", "kernel", "rotation"), ctx.where(*k, "noise.kernel"));
  n.per_instrument_amplitude = get_bool(ctx, *t, "noise", "per_instrument_amplitude", false);
  if (const toml::node* k = t->get("rotation_period_d")) {
    const double p = get_number(ctx, *t, "noise", "rotation_period_d", 0.0);
    if (!(p > 0.0)) throw InputError(fmt::format("{} is {}; it must be > 0 days", ctx.where(*k, "noise.rotation_period_d"), p));
    pr.model.rotation_hint_d = p;
    pr.model.rotation_hint_source = fmt::format("{} [noise] rotation_period_d", ctx.path);
  }
  if (n.kind == NoiseKind::kWhite && (t->get("kernel") || t->get("per_instrument_amplitude") || t->get("rotation_period_d")))
    throw InputError(fmt::format("{}: [noise] sets a kernel but kind is \"white\"; write kind = \"gp\" to use it",
                                 ctx.where(*t, "noise")));
}

void parse_priors(const Ctx& ctx, const toml::table& root, Project& pr) {
  const toml::table* t = get_table(ctx, root, "priors");
  if (!t) return;
  for (const auto& [k, v] : *t) {
    pr.priors.push_back(parse_prior_entry(ctx, std::string(k.str()), v));
    const int line = k.source().begin.line > 0 ? static_cast<int>(k.source().begin.line) : static_cast<int>(v.source().begin.line);
    pr.priors.back().origin = fmt::format("{}:{}", ctx.path, line);
  }
}

void parse_sampler(const Ctx& ctx, const toml::table& root, Project& pr) {
  const toml::table* t = get_table(ctx, root, "sampler");
  if (!t) return;
  check_keys(ctx, *t, "sampler", {"walkers", "max_steps", "ess_target", "rhat_max", "min_tau_multiple", "seed", "checkpoint_steps"});
  auto at = [&](const char* key) { return ctx.where(*t->get(key), full("sampler", key)); };
  auto& s = pr.sampler;
  s.walkers = static_cast<int>(get_integer(ctx, *t, "sampler", "walkers", 0));
  if (s.walkers != 0 && (s.walkers < 4 || s.walkers % 2 != 0))
    throw InputError(fmt::format("{} is {}; it must be an even number >= 4 (or 0 for automatic)", at("walkers"), s.walkers));
  s.max_steps = get_integer(ctx, *t, "sampler", "max_steps", s.max_steps);
  if (s.max_steps < 10) throw InputError(fmt::format("{} is {}; it must be >= 10", at("max_steps"), s.max_steps));
  s.ess_target = get_number(ctx, *t, "sampler", "ess_target", s.ess_target);
  if (!(s.ess_target > 0)) throw InputError(fmt::format("{} is {}; it must be > 0", at("ess_target"), s.ess_target));
  s.rhat_max = get_number(ctx, *t, "sampler", "rhat_max", s.rhat_max);
  if (!(s.rhat_max > 1.0)) throw InputError(fmt::format("{} is {}; it must be > 1", at("rhat_max"), s.rhat_max));
  s.min_tau_multiple = get_number(ctx, *t, "sampler", "min_tau_multiple", s.min_tau_multiple);
  long seed = get_integer(ctx, *t, "sampler", "seed", 1);
  if (seed < 0) throw InputError(fmt::format("{} is {}; it must be >= 0", at("seed"), seed));
  s.seed = static_cast<unsigned long long>(seed);
  s.checkpoint_steps = get_integer(ctx, *t, "sampler", "checkpoint_steps", s.checkpoint_steps);
  if (s.checkpoint_steps < 1) throw InputError(fmt::format("{} is {}; it must be >= 1", at("checkpoint_steps"), s.checkpoint_steps));
}

void parse_evidence(const Ctx& ctx, const toml::table& root, Project& pr) {
  const toml::table* t = get_table(ctx, root, "evidence");
  if (!t) return;
  check_keys(ctx, *t, "evidence", {"live_points", "seed", "bayes_threshold"});
  auto at = [&](const char* key) { return ctx.where(*t->get(key), full("evidence", key)); };
  auto& e = pr.evidence;
  e.live_points = static_cast<int>(get_integer(ctx, *t, "evidence", "live_points", e.live_points));
  if (e.live_points < 20) throw InputError(fmt::format("{} is {}; it must be >= 20", at("live_points"), e.live_points));
  long seed = get_integer(ctx, *t, "evidence", "seed", 1);
  if (seed < 0) throw InputError(fmt::format("{} is {}; it must be >= 0", at("seed"), seed));
  e.seed = static_cast<unsigned long long>(seed);
  e.bayes_threshold = get_number(ctx, *t, "evidence", "bayes_threshold", e.bayes_threshold);
}

void parse_nbody(const Ctx& ctx, const toml::table& root, Project& pr) {
  const toml::table* t = get_table(ctx, root, "nbody");
  if (!t) return;
  check_keys(ctx, *t, "nbody", {"planets", "step_fraction", "step_days", "coplanar", "inclination_deg"});
  const toml::node* first = t->cbegin() != t->cend() ? &t->cbegin()->second : nullptr;
  if (first != nullptr && pr.model.dynamics != Dynamics::kNbody)
    throw InputError(fmt::format("{}: an [nbody] table needs [model] dynamics = \"nbody\"", ctx.where(*first, "nbody")));
  NbodySettings& s = pr.nbody;
  if (t->get("planets")) s.n_planets = static_cast<int>(get_integer(ctx, *t, "nbody", "planets", 0));
  s.step_fraction = get_number(ctx, *t, "nbody", "step_fraction", s.step_fraction);
  s.step_days = get_number(ctx, *t, "nbody", "step_days", s.step_days);
  s.coplanar = get_bool(ctx, *t, "nbody", "coplanar", s.coplanar);
  s.inclination_deg = get_number(ctx, *t, "nbody", "inclination_deg", s.inclination_deg);
  if (const std::string m = s.Validate(); !m.empty()) {
    const std::string key = m.substr(6, m.find(' ') - 6);
    const toml::node* n = t->get(key);
    throw InputError(n != nullptr ? fmt::format("{}:{}: {}", ctx.path, n->source().begin.line, m) : m);
  }
}

// The project's tables, in the order they are read (a later table may rely on an earlier one).
struct TableEntry {
  const char* name;
  void (*parse)(const Ctx&, const toml::table& root, Project&);
};
constexpr TableEntry kTables[] = {
    {"star", parse_star},     {"velocities", parse_velocities}, {"transits", parse_transits},
    {"search", parse_search}, {"model", parse_model},           {"noise", parse_noise},
    {"priors", parse_priors},
    {"sampler", parse_sampler}, {"evidence", parse_evidence}, {"limits", parse_limits},
    {"nbody", parse_nbody},
};

}  // namespace

std::string to_string(InjectionNoise n) { return n == InjectionNoise::kWhite ? "white" : "residuals"; }

std::string to_string(RecoveryTest r) {
  switch (r) {
    case RecoveryTest::kFullSearch: return "search";
    case RecoveryTest::kPeriodogram: return "periodogram";
    default: return "first_step";
  }
}

InjectionNoise parse_injection_noise(const std::string& text, const std::string& where) {
  if (text == "residuals") return InjectionNoise::kResiduals;
  if (text == "white") return InjectionNoise::kWhite;
  throw InputError(fmt::format("{} is '{}'; it must be \"residuals\" or \"white\"", where, text));
}

RecoveryTest parse_recovery_test(const std::string& text, const std::string& where) {
  if (text == "first_step") return RecoveryTest::kFirstStep;
  if (text == "search") return RecoveryTest::kFullSearch;
  if (text == "periodogram") return RecoveryTest::kPeriodogram;
  throw InputError(fmt::format("{} is '{}'; it must be \"first_step\", \"search\" or \"periodogram\"", where, text));
}

namespace {
// The whole parser; `data_in_memory` (project_from_data): no [[velocities]] / [[transits]].
Project parse_project_text(const std::string& text, const std::string& path, const std::string& base_dir,
                           bool data_in_memory) {
  Ctx ctx{path, base_dir, data_in_memory};
  toml::table root;
  try {
    root = toml::parse(text, path);
  } catch (const toml::parse_error& e) {
    const auto& src = e.source();
    throw InputError(fmt::format("{}:{}:{}: TOML syntax error: {}", path, src.begin.line,
                                 src.begin.column, std::string(e.description())));
  }
  Project pr;
  pr.path = path;
  pr.text = text;
  std::set<std::string> tables;
  for (const TableEntry& e : kTables) tables.insert(e.name);
  check_keys(ctx, root, "", tables);
  if (data_in_memory) {
    for (const char* key : {"velocities", "transits"})
      if (const toml::node* n = root.get(key))
        throw InputError(fmt::format("{}:{}: [[{}]] names a file, but this project's data are given as arrays", path,
                                     n->source().begin.line, key));
  }
  for (const TableEntry& e : kTables) e.parse(ctx, root, pr);
  return pr;
}

// Every [priors] key naming an instrument ("<instrument>.offset_ms", "<instrument>.jitter_ms")
// must name one present in the data.
void check_prior_instruments(const Project& pr, const VelocityData& data) {
  for (const auto& p : pr.priors) {
    const std::size_t dot = p.parameter.rfind('.');
    if (dot == std::string::npos) continue;
    const std::string owner = p.parameter.substr(0, dot), what = p.parameter.substr(dot + 1);
    if (what != "offset_ms" && what != "jitter_ms") continue;
    if (std::find(data.instrument_names.begin(), data.instrument_names.end(), owner) != data.instrument_names.end())
      continue;
    std::string list;
    for (const auto& n : data.instrument_names) list += (list.empty() ? "'" : ", '") + n + "'";
    throw InputError(fmt::format("{}: priors.{} names instrument '{}', which is not in the data (instruments: {})",
                                 p.origin.empty() ? pr.path : p.origin, p.parameter, owner, list));
  }
}
}  // namespace

Project parse_project(const std::string& text, const std::string& path, const std::string& base_dir) {
  return parse_project_text(text, path, base_dir, false);
}

Project project_from_data(VelocityData velocities, TransitData transits, const std::string& settings_toml,
                          const std::string& name_for_messages) {
  Project pr = parse_project_text(settings_toml, name_for_messages, ".", true);
  check_prior_instruments(pr, velocities);
  // FNV-1a over the numbers and labels: a resumed run must see the same data.
  std::uint64_t h = 1469598103934665603ull;
  auto mix = [&h](const void* p, std::size_t n) {
    const auto* b = static_cast<const unsigned char*>(p);
    for (std::size_t i = 0; i < n; ++i) h = (h ^ b[i]) * 1099511628211ull;
  };
  auto mix_doubles = [&](const std::vector<double>& v) { mix(v.data(), v.size() * sizeof(double)); };
  mix(&velocities.reference_epoch_bjd, sizeof(double));
  mix_doubles(velocities.time_days);
  mix_doubles(velocities.velocity_m_s);
  mix_doubles(velocities.uncertainty_m_s);
  for (int i : velocities.instrument) mix(&i, sizeof i);
  for (const auto& n : velocities.instrument_names) mix(n.data(), n.size() + 1);
  mix(&transits.reference_epoch_bjd, sizeof(double));
  for (long long e : transits.epoch) mix(&e, sizeof e);
  mix_doubles(transits.time_days);
  mix_doubles(transits.uncertainty_days);
  for (const auto& p : transits.planet) mix(p.data(), p.size() + 1);
  pr.text = settings_toml;
  if (!pr.text.empty() && pr.text.back() != '\n') pr.text += '\n';
  pr.text += fmt::format("# data given in memory: {} velocities, {} transit times, checksum {:016x}\n",
                         velocities.size(), transits.size(), h);
  pr.velocity_data = std::move(velocities);
  pr.transit_data = std::move(transits);
  return pr;
}

Project load_project(const std::string& path) {
  std::error_code ec;
  if (!fs::exists(path, ec)) throw InputError(fmt::format("{}: no such file", path));
  if (fs::is_directory(path, ec)) throw InputError(fmt::format("{}: is a directory, not a project file", path));
  std::ifstream in(path, std::ios::binary);
  if (!in) throw InputError(fmt::format("{}: cannot be opened for reading", path));
  std::stringstream ss;
  ss << in.rdbuf();
  std::string text = ss.str();
  if (text.size() >= 3 && (unsigned char)text[0] == 0xEF && (unsigned char)text[1] == 0xBB && (unsigned char)text[2] == 0xBF)
    text.erase(0, 3);
  return parse_project(text, path, fs::path(path).parent_path().string());
}

VelocityData Project::load_velocities() const {
  if (velocity_data) {
    check_prior_instruments(*this, *velocity_data);
    return *velocity_data;
  }
  std::vector<std::string> paths;
  std::vector<VelocityFileOptions> opts;
  for (const auto& v : velocities) {
    std::error_code ec;
    if (!fs::exists(v.file, ec)) {
      throw InputError(fmt::format("{}: no such file (named by velocities.file at {})", v.file,
                                   v.origin.empty() ? path : v.origin));
    }
    paths.push_back(v.file);
    opts.push_back(v.options);
  }
  VelocityData data = apsides::load_velocities(paths, opts);
  check_prior_instruments(*this, data);
  return data;
}

TransitData Project::load_transits() const {
  if (transit_data) return *transit_data;
  TransitData all;
  std::vector<TransitData> parts;
  for (const auto& s : transits) {
    std::error_code ec;
    if (!fs::exists(s.file, ec)) {
      throw InputError(fmt::format("{}: no such file (named by transits.file at {})", s.file,
                                   s.origin.empty() ? path : s.origin));
    }
    TransitFileOptions o;
    o.planet = s.planet;
    o.time_offset_days = s.time_offset_days;
    parts.push_back(read_transit_file(s.file, o));
    for (std::string& label : parts.back().planet)
      if (label.empty()) label = "b";  // no `planet` key and no planet column
  }
  if (parts.empty()) return all;
  all.reference_epoch_bjd = parts.front().reference_epoch_bjd;
  for (const auto& p : parts) {
    const double shift = p.reference_epoch_bjd - all.reference_epoch_bjd;  // integers: exact
    for (std::size_t i = 0; i < p.size(); ++i) {
      all.epoch.push_back(p.epoch[i]);
      all.time_days.push_back(p.time_days[i] + shift);
      all.uncertainty_days.push_back(p.uncertainty_days[i]);
      all.planet.push_back(p.planet[i]);
      all.origin.push_back(p.origin[i]);
    }
  }
  return all;
}

}  // namespace apsides

namespace apsides {
std::vector<int> Project::transit_jitter_planets() const {
  std::vector<int> out;
  auto add = [&](const std::string& label) {
    const int j = label.size() == 1 ? label[0] - 'b' : -1;
    if (j >= 0 && std::find(out.begin(), out.end(), j) == out.end()) out.push_back(j);
  };
  for (const TransitSource& t : transits) {
    if (!t.fit_jitter) continue;
    if (!t.planet.empty()) {
      add(t.planet);
      continue;
    }
    // No `planet` key: every planet of the file's label column (b without one).
    TransitFileOptions o;
    o.time_offset_days = t.time_offset_days;
    const TransitData d = read_transit_file(t.file, o);
    for (const std::string& label : d.planet) add(label.empty() ? "b" : label);
  }
  std::sort(out.begin(), out.end());
  return out;
}
}  // namespace apsides

namespace apsides {
std::string to_string(Dynamics d) { return d == Dynamics::kNbody ? "nbody" : "keplerian"; }
}  // namespace apsides
