// Shared pieces of the command line: JSON helpers, atomic file writes, progress bars.
#pragma once

#include <CLI/CLI.hpp>
#include <functional>
#include <optional>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/progress.h"
#include "apsides/project.h"

namespace apsides::cli {

// Options every command takes.
struct CommonOptions {
  std::string json_path;  // --json FILE
  bool quiet = false;     // --quiet
};
void add_common_options(CLI::App* cmd, CommonOptions& opts);

// A command: registers itself on the parent app and returns its subcommand and the
// action to run after parsing (returns the exit code). Each cmd_<name>.cpp defines one.
using Action = std::function<int()>;
struct Command {
  CLI::App* app = nullptr;
  Action run;
};
Command register_simulate(CLI::App& app);
Command register_fit(CLI::App& app);
Command register_summarize(CLI::App& app);
Command register_sample(CLI::App& app);
Command register_ephemeris(CLI::App& app);
Command register_compare(CLI::App& app);
Command register_scan(CLI::App& app);
Command register_analyze(CLI::App& app);
Command register_limits(CLI::App& app);
Command register_survey(CLI::App& app);
Command register_stability(CLI::App& app);
// `apsides fit PROJECT` when the project's [model] dynamics is "nbody" (cmd_stability.cpp).
int run_nbody_fit(const Project& project, const CommonOptions& common);
// InputError for a project with dynamics = "nbody" in a command that only has the Keplerian model yet.
void require_keplerian(const Project& project, const std::string& command);

// True when a FILE argument is a project file (ends in .toml).
bool is_project_file(const std::string& path);
// Velocities named on the command line: several data files (each read with the given
// --instrument label, --velocity-unit and --time-offset), never mixed with a project file.
// Prints the data's warnings (e.g. a unit that looks wrong) to stderr.
VelocityData load_velocity_arguments(const std::vector<std::string>& files, const std::string& instrument,
                                     const std::string& velocity_unit,
                                     std::optional<double> time_offset = std::nullopt);

// --time-offset DAYS: added to every time of the data files (reduced BJD; data.h "Reduced
// times"). Returns the option so the action can ask whether it was given.
CLI::Option* add_time_offset_option(CLI::App* cmd, double& days);
// The option's value when given, checked (0 <= days < 2500000).
std::optional<double> time_offset_value(const CLI::Option* option, double days);
// Loads a project for a command that also takes --time-offset: every [[velocities]] block
// without time_offset takes the option's value; a block declaring a different one is an
// InputError (the offset given twice).
Project load_project_with_time_offset(const std::string& path, std::optional<double> time_offset);
// Prints data warnings to stderr, one line each.
void print_warnings(const VelocityData& data);

// Writes text to `path` atomically (temporary file + rename): never half-written.
void write_file_atomic(const std::string& path, const std::string& content);
void write_json(const std::string& path, const nlohmann::json& j);

// {"value": x}
nlohmann::json value_json(double x);
// {"median": m, "minus": m - q16, "plus": q84 - m}
nlohmann::json quantiles_json(double median, double minus, double plus);

// The progress bar lives in the library (progress.h), shared with the Python module.
using apsides::ProgressBar;
using apsides::stderr_is_terminal;

}  // namespace apsides::cli
