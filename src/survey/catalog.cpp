// Survey catalogs: a TOML list of project files, or a folder of them (survey.h).
#include <fmt/format.h>

#include <algorithm>
#include <cctype>
#include <filesystem>
#include <fstream>
#include <set>
#include <sstream>
#include <toml++/toml.h>

#include "apsides/error.h"
#include "apsides/survey.h"
#include "text_table.h"

namespace apsides {
namespace fs = std::filesystem;
namespace {

int line_of(const toml::node& n) { return static_cast<int>(n.source().begin.line); }

void check_keys(const std::string& path, const toml::table& t, const std::string& table,
                const std::vector<std::string>& allowed) {
  for (const auto& [k, v] : t) {
    const std::string key(k.str());
    if (std::find(allowed.begin(), allowed.end(), key) != allowed.end()) continue;
    const std::string name = table.empty() ? key : table + "." + key;
    const int line = k.source().begin.line > 0 ? static_cast<int>(k.source().begin.line) : line_of(v);
    const std::string best = detail::suggest_key(key, allowed);
    if (!best.empty()) throw InputError(fmt::format("{}:{}: unknown key '{}'; did you mean '{}'?", path, line, name, best));
    std::string list;
    for (const auto& a : allowed) list += (list.empty() ? "" : ", ") + a;
    throw InputError(fmt::format("{}:{}: unknown key '{}' (known: {})", path, line, name, list));
  }
}

// Letters, digits, '-', '_', '.'; anything else becomes '_'.
std::string safe_id(const std::string& text) {
  std::string out;
  for (unsigned char c : text) out += (std::isalnum(c) || c == '-' || c == '_' || c == '.') ? static_cast<char>(c) : '_';
  while (!out.empty() && out.front() == '.') out.erase(out.begin());
  return out.empty() ? "star" : out;
}

// The star's name when the catalog gives none: the project's [star] name if it reads,
// else the folder of a project.toml, else the file's stem.
std::string default_name(const std::string& project) {
  try {
    const toml::table t = toml::parse_file(project);
    if (const auto* star = t.get_as<toml::table>("star"))
      if (const auto name = star->get_as<std::string>("name"); name && !name->get().empty()) return name->get();
  } catch (const std::exception&) {
    // unreadable: the star will fail with a proper message when it runs
  }
  const fs::path p(project);
  if (p.filename() == "project.toml" && p.has_parent_path() && !p.parent_path().filename().empty())
    return p.parent_path().filename().string();
  return p.stem().string();
}

void assign_ids(std::vector<SurveyStar>& stars) {
  std::set<std::string> used;
  for (SurveyStar& s : stars) {
    const std::string base = safe_id(s.name);
    std::string id = base;
    for (int k = 2; used.count(id); ++k) id = fmt::format("{}-{}", base, k);
    used.insert(id);
    s.id = id;
  }
}

SurveyCatalog catalog_from_folder(const std::string& dir) {
  SurveyCatalog c;
  c.path = dir;
  std::vector<std::string> files;
  for (const auto& e : fs::directory_iterator(dir)) {
    if (e.is_regular_file() && e.path().extension() == ".toml") files.push_back(e.path().string());
    if (e.is_directory() && fs::is_regular_file(e.path() / "project.toml")) files.push_back((e.path() / "project.toml").string());
  }
  std::sort(files.begin(), files.end());
  if (files.empty()) throw InputError(fmt::format("{}: no project files in this folder (*.toml, or */project.toml); the survey is empty", dir));
  for (const auto& f : files) c.stars.push_back({"", default_name(f), f, dir});
  assign_ids(c.stars);
  return c;
}

}  // namespace

SurveyCatalog load_catalog(const std::string& path) {
  std::error_code ec;
  if (!fs::exists(path, ec)) throw InputError(fmt::format("{}: no such file or folder", path));
  if (fs::is_directory(path, ec)) return catalog_from_folder(path);
  std::ifstream in(path, std::ios::binary);
  if (!in) throw InputError(fmt::format("{}: cannot be opened for reading", path));
  std::stringstream ss;
  ss << in.rdbuf();
  toml::table root;
  try {
    root = toml::parse(ss.str(), path);
  } catch (const toml::parse_error& e) {
    throw InputError(fmt::format("{}:{}:{}: TOML syntax error: {}", path, e.source().begin.line, e.source().begin.column,
                                 std::string(e.description())));
  }
  check_keys(path, root, "", {"stages", "star"});
  SurveyCatalog c;
  c.path = path;
  if (const toml::node* n = root.get("stages")) {
    if (!n->is_string()) throw InputError(fmt::format("{}:{}: stages must be a string like \"scan,search\"", path, line_of(*n)));
    c.stages = *n->value<std::string>();
    parse_survey_stages(c.stages, fmt::format("{}:{}: stages", path, line_of(*n)));
  }
  const fs::path base = fs::path(path).parent_path();
  if (const toml::node* n = root.get("star")) {
    if (!n->is_array_of_tables())
      throw InputError(fmt::format("{}:{}: star must be written [[star]] (one block per star)", path, line_of(*n)));
    for (const toml::node& e : *n->as_array()) {
      const toml::table& t = *e.as_table();
      check_keys(path, t, "star", {"project", "name"});
      const toml::node* p = t.get("project");
      if (!p) throw InputError(fmt::format("{}:{}: [[star]] block needs a 'project' key (the star's project file)", path, line_of(e)));
      if (!p->is_string() || p->value<std::string>()->empty())
        throw InputError(fmt::format("{}:{}: star.project must name a project file", path, line_of(*p)));
      SurveyStar s;
      const fs::path file(*p->value<std::string>());
      s.project = (file.is_absolute() ? file : base / file).lexically_normal().string();
      s.origin = fmt::format("{}:{}", path, line_of(*p));
      if (const toml::node* nm = t.get("name")) {
        if (!nm->is_string() || nm->value<std::string>()->empty())
          throw InputError(fmt::format("{}:{}: star.name must be a non-empty string", path, line_of(*nm)));
        s.name = *nm->value<std::string>();
      } else {
        s.name = default_name(s.project);
      }
      c.stars.push_back(s);
    }
  }
  if (c.stars.empty()) throw InputError(fmt::format("{}: no [[star]] entries; a catalog lists at least one project file", path));
  assign_ids(c.stars);
  return c;
}

std::string to_string(SurveyStages s) {
  switch (s) {
    case SurveyStages::kScan: return "scan";
    case SurveyStages::kSearch: return "search";
    case SurveyStages::kScanSearch: return "scan,search";
    default: return "all";
  }
}

SurveyStages parse_survey_stages(const std::string& text, const std::string& where) {
  std::set<std::string> parts;
  std::stringstream ss(text);
  std::string part;
  while (std::getline(ss, part, ',')) {
    part.erase(0, part.find_first_not_of(" \t"));
    part.erase(part.find_last_not_of(" \t") + 1);
    if (!part.empty()) parts.insert(part);
  }
  if (parts == std::set<std::string>{"all"} || parts == std::set<std::string>{"analyze"}) return SurveyStages::kAll;
  if (parts == std::set<std::string>{"scan"}) return SurveyStages::kScan;
  if (parts == std::set<std::string>{"search"}) return SurveyStages::kSearch;
  if (parts == std::set<std::string>{"scan", "search"}) return SurveyStages::kScanSearch;
  throw InputError(fmt::format("{} is '{}'; it must be \"all\" (the whole analyze), \"scan,search\", \"scan\" or \"search\"",
                               where, text));
}

}  // namespace apsides
