#include "cli/common.h"

#include <fmt/format.h>
#include <unistd.h>

#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>

#include "apsides/error.h"

namespace apsides::cli {
namespace fs = std::filesystem;

void add_common_options(CLI::App* cmd, CommonOptions& opts) {
  cmd->add_option("--json", opts.json_path, "Also write the result as JSON to FILE");
  cmd->add_flag("-q,--quiet", opts.quiet, "No progress output on stderr");
}

bool is_project_file(const std::string& path) { return fs::path(path).extension() == ".toml"; }

void print_warnings(const VelocityData& data) {
  for (const auto& w : data.warnings) fmt::print(stderr, "apsides: warning: {}\n", w);
}

VelocityData load_velocity_arguments(const std::vector<std::string>& files, const std::string& instrument,
                                     const std::string& velocity_unit, std::optional<double> time_offset) {
  std::vector<VelocityFileOptions> fo(files.size());
  for (auto& o : fo) {
    o.instrument = instrument;
    o.unit = parse_velocity_unit(velocity_unit, "--velocity-unit");
    o.time_offset_days = time_offset;
    if (time_offset) o.declared_at = "--time-offset";
  }
  for (const auto& f : files)
    if (is_project_file(f)) throw InputError(fmt::format("{}: a project file must be the only FILE", f));
  VelocityData data = load_velocities(files, fo);
  print_warnings(data);
  return data;
}

CLI::Option* add_time_offset_option(CLI::App* cmd, double& days) {
  return cmd->add_option("--time-offset", days,
                         "Days added to every time of the data files, for reduced times (2457000 for "
                         "BJD - 2457000, 2400000.5 for MJD; 0 keeps times as given)");
}

std::optional<double> time_offset_value(const CLI::Option* option, double days) {
  if (option->count() == 0) return std::nullopt;
  check_time_offset(days, "--time-offset");
  return days;
}

Project load_project_with_time_offset(const std::string& path, std::optional<double> time_offset) {
  Project project = load_project(path);
  if (!time_offset) return project;
  for (VelocitySource& v : project.velocities) {
    auto& declared = v.options.time_offset_days;
    if (declared && *declared != *time_offset) {
      throw InputError(fmt::format("--time-offset {}: the [[velocities]] block at {} declares time_offset = {} for {}; "
                                   "the offset is given twice (keep one)",
                                   *time_offset, v.origin, *declared, v.file));
    }
    declared = time_offset;
  }
  return project;
}

void write_file_atomic(const std::string& path, const std::string& content) {
  const fs::path target(path);
  std::error_code ec;
  if (target.has_parent_path() && !fs::exists(target.parent_path(), ec)) {
    throw InputError(fmt::format("{}: directory {} does not exist", path, target.parent_path().string()));
  }
  if (fs::is_directory(target, ec)) throw InputError(fmt::format("{}: is a directory", path));
  const std::string tmp = path + ".tmp-apsides";
  {
    std::ofstream out(tmp, std::ios::binary | std::ios::trunc);
    if (!out) throw InputError(fmt::format("{}: cannot be written", path));
    out << content;
    out.flush();
    if (!out) {
      fs::remove(tmp, ec);
      throw InputError(fmt::format("{}: write failed", path));
    }
  }
  fs::rename(tmp, target, ec);
  if (ec) {
    fs::remove(tmp, ec);
    throw InputError(fmt::format("{}: cannot be written ({})", path, ec.message()));
  }
}

void write_json(const std::string& path, const nlohmann::json& j) {
  write_file_atomic(path, j.dump(2) + "\n");
}

nlohmann::json value_json(double x) {
  return nlohmann::json{{"value", std::isfinite(x) ? nlohmann::json(x) : nlohmann::json(nullptr)}};
}

nlohmann::json quantiles_json(double median, double minus, double plus) {
  return nlohmann::json{{"median", median}, {"minus", minus}, {"plus", plus}};
}

bool stderr_is_terminal() { return isatty(fileno(stderr)) != 0; }

ProgressBar::ProgressBar(std::string label, double total, bool quiet)
    : label_(std::move(label)), total_(total), active_(!quiet && stderr_is_terminal()),
      start_(std::chrono::steady_clock::now()), last_(start_ - std::chrono::seconds(1)) {}

ProgressBar::~ProgressBar() {
  if (active_) std::fputs("\n", stderr);
}

void ProgressBar::update(double done, const std::string& extra) {
  if (!active_) return;
  const auto now = std::chrono::steady_clock::now();
  if (now - last_ < std::chrono::milliseconds(100)) return;
  last_ = now;
  const double frac = total_ > 0 ? std::clamp(done / total_, 0.0, 1.0) : 0.0;
  const int width = 28;
  const int fill = static_cast<int>(frac * width);
  const double elapsed = std::chrono::duration<double>(now - start_).count();
  const double eta = frac > 0 ? elapsed * (1.0 - frac) / frac : 0.0;
  std::string bar(static_cast<std::size_t>(fill), '#');
  bar.resize(width, '.');
  fmt::print(stderr, "\r{} [{}] {:3.0f}%  {:.0f}s elapsed, ~{:.0f}s left  {}\x1b[K", label_, bar,
             100 * frac, elapsed, eta, extra);
  std::fflush(stderr);
}

void ProgressBar::finish(const std::string& extra) {
  if (!active_) return;
  last_ = std::chrono::steady_clock::now() - std::chrono::seconds(1);
  update(total_, extra);
  std::fputs("\n", stderr);
  active_ = false;
}

}  // namespace apsides::cli
