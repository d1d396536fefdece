// apsides simulate SCENARIO.toml --out DIR
#include <fmt/format.h>

#include <filesystem>

#include "apsides/error.h"
#include "apsides/simulate.h"
#include "cli/common.h"

namespace apsides::cli {
namespace fs = std::filesystem;

namespace {
struct SimulateArgs {
  std::string scenario;
  std::string out_dir = ".";
  CommonOptions common;
};

std::string project_text(const Scenario& sc, const SimulatedData& sim) {
  std::string s = fmt::format("# Project for the simulated system '{}' (seed {}).\n", sc.star_name, sc.seed);
  s += fmt::format("[star]\nname = \"{}\"\nmass_msun = {}\n", sc.star_name, sc.mass_msun);
  if (sc.mass_err_msun > 0) s += fmt::format("mass_err_msun = {}\n", sc.mass_err_msun);
  s += fmt::format("radius_rsun = {}\n", sc.radius_rsun);
  // Times that are not full BJD (a scenario starting at day 0) are declared as they are.
  bool full_bjd = true;
  for (const auto& r : sim.velocities) full_bjd = full_bjd && r.time_bjd >= kFullBjdMin && r.time_bjd < kFullBjdMax;
  for (const auto& r : sim.transits) full_bjd = full_bjd && r.time_bjd >= kFullBjdMin && r.time_bjd < kFullBjdMax;
  const std::string as_given = full_bjd ? "" : "time_offset = 0\n";
  for (const auto& i : sc.instruments) {
    s += fmt::format("\n[[velocities]]\nfile = \"velocities_{}.csv\"\ninstrument = \"{}\"\n{}", i.name, i.name, as_given);
    if (i.unit == VelocityUnit::kKilometersPerSecond) s += "velocity_unit = \"km/s\"\n";
  }
  if (!sim.transits.empty()) {
    s += fmt::format("\n[[transits]]\nfile = \"transits.csv\"\nplanet = \"{}\"\n{}", sc.transits.planet, as_given);
  }
  s += "\n[search]\nmax_planets = 3\n";
  if (sc.nbody) {
    s += fmt::format("\n[model]\ndynamics = \"nbody\"\nosculating_epoch = {:.6f}\n\n[nbody]\nplanets = {}\n",
                     sc.osculating_epoch_bjd, sc.planets.size());
  }
  return s;
}
}  // namespace

Command register_simulate(CLI::App& app) {
  auto args = std::make_shared<SimulateArgs>();
  CLI::App* cmd = app.add_subcommand(
      "simulate",
      "Make synthetic velocities and transit times with known truth from a scenario file.\n"
      "Writes DIR/velocities_<instrument>.csv, DIR/transits.csv (if any), DIR/truth.json and\n"
      "DIR/project.toml (ready for the other commands).");
  cmd->add_option("scenario", args->scenario, "Scenario TOML (see include/apsides/simulate.h)")->required();
  cmd->add_option("-o,--out", args->out_dir, "Output directory (created if missing)");
  add_common_options(cmd, args->common);
  return {cmd, [args]() -> int {
            const Scenario sc = load_scenario(args->scenario);
            const SimulatedData sim = simulate(sc);
            std::error_code ec;
            fs::create_directories(args->out_dir, ec);
            if (ec || !fs::is_directory(args->out_dir))
              throw InputError(fmt::format("{}: cannot create output directory", args->out_dir));
            const fs::path dir(args->out_dir);
            for (const auto& i : sc.instruments)
              write_file_atomic((dir / fmt::format("velocities_{}.csv", i.name)).string(), sim.velocity_csv(i.name));
            if (!sim.transits.empty()) write_file_atomic((dir / "transits.csv").string(), sim.transit_csv());
            write_file_atomic((dir / "truth.json").string(), sim.truth_json);
            write_file_atomic((dir / "project.toml").string(), project_text(sc, sim));
            if (!args->common.json_path.empty()) write_file_atomic(args->common.json_path, sim.truth_json);
            fmt::print("Simulated '{}' (seed {}): {} velocities from {} instrument(s), {} transit times, {} planet(s).\n",
                       sc.star_name, sc.seed, sim.velocities.size(), sc.instruments.size(), sim.transits.size(),
                       sc.planets.size());
            fmt::print("Wrote {}/ (project.toml, truth.json, data files).\n", args->out_dir);
            return 0;
          }};
}

}  // namespace apsides::cli
