// The apsides command line: parses, calls the library, prints, maps errors to exit codes
// (0 success, 1 failed computation, 2 bad usage or bad input).
#include <H5Cpp.h>
#include <fmt/format.h>

#include <CLI/CLI.hpp>
#include <cstdio>
#include <exception>
#include <vector>

#include "apsides/error.h"
#include "cli/common.h"

int main(int argc, char** argv) {
  H5::Exception::dontPrint();
  CLI::App app{
      "apsides: find planets in stellar radial velocities and transit times.\n"
      "Periodograms, Keplerian fits, posterior sampling, evidence, transit ephemerides."};
  app.set_version_flag("--version", "apsides 0.1.0");
  app.require_subcommand(1);
  std::vector<apsides::cli::Command> commands;
  // In the order of the job: look, fit, sample, compare, summarise; transits; make data.
  commands.push_back(apsides::cli::register_analyze(app));
  commands.push_back(apsides::cli::register_scan(app));
  commands.push_back(apsides::cli::register_fit(app));
  commands.push_back(apsides::cli::register_sample(app));
  commands.push_back(apsides::cli::register_compare(app));
  commands.push_back(apsides::cli::register_summarize(app));
  commands.push_back(apsides::cli::register_ephemeris(app));
  commands.push_back(apsides::cli::register_stability(app));
  commands.push_back(apsides::cli::register_simulate(app));
  // Many runs: detection limits of one star, a survey of many (threads or MPI ranks).
  commands.push_back(apsides::cli::register_limits(app));
  commands.push_back(apsides::cli::register_survey(app));

  try {
    app.parse(argc, argv);
  } catch (const CLI::CallForHelp& e) {
    return app.exit(e);
  } catch (const CLI::CallForAllHelp& e) {
    return app.exit(e);
  } catch (const CLI::CallForVersion& e) {
    return app.exit(e);
  } catch (const CLI::ParseError& e) {
    fmt::print(stderr, "apsides: {}\n", e.what());
    return 2;
  }
  try {
    for (auto& c : commands) {
      if (c.app->parsed()) return c.run();
    }
    return 2;
  } catch (const apsides::InputError& e) {
    fmt::print(stderr, "apsides: {}\n", e.what());
    return 2;
  } catch (const H5::Exception& e) {
    fmt::print(stderr, "apsides: HDF5 error in {}: {}\n", e.getFuncName(), e.getDetailMsg());
    return 1;
  } catch (const std::bad_alloc&) {
    fmt::print(stderr, "apsides: out of memory\n");
    return 1;
  } catch (const std::exception& e) {
    fmt::print(stderr, "apsides: internal error: {}\n", e.what());
    return 1;
  }
}
