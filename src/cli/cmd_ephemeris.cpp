// apsides ephemeris TIMES [--planet b] [--next N | --from BJD --to BJD] ...
#include <fmt/format.h>

#include <cmath>
#include <set>

#include "apsides/data.h"
#include "apsides/ephemeris.h"
#include "apsides/error.h"
#include "apsides/json_outputs.h"
#include "cli/common.h"

namespace apsides::cli {

namespace {
struct EphemerisArgs {
  std::string times;
  std::string planet;
  bool planet_given = false;
  int next = 10;
  double from_bjd = std::numeric_limits<double>::quiet_NaN();
  double to_bjd = std::numeric_limits<double>::quiet_NaN();
  bool scale_errors = false;
  double outlier_sigma = 5.0;
  bool drop_outliers = false;
  double companion_period = 0.0;
  long long epoch = 0;
  std::string model = "auto";
  bool no_ttv = false;
  bool minutes = false;
  bool days = false;
  double time_offset = 0.0;
  CommonOptions common;
};

}  // namespace

Command register_ephemeris(CLI::App& app) {
  auto args = std::make_shared<EphemerisArgs>();
  CLI::App* cmd = app.add_subcommand(
      "ephemeris",
      "Transit ephemeris (linear and quadratic), O-C with outliers, timing-variation search and\n"
      "predicted transit times from a file of mid-transit times (epoch, BJD_TDB, error in days).");
  cmd->add_option("times", args->times, "Transit-time file: epoch, mid-transit BJD_TDB, uncertainty (d)[, planet]")
      ->required();
  cmd->add_option("--planet", args->planet, "Planet label to use when the file holds several");
  auto* next = cmd->add_option("--next", args->next, "Predict the next N transits (after --from, or after the "
                                                     "last observed one) [10]")
                   ->check(CLI::NonNegativeNumber);
  auto* from = cmd->add_option("--from", args->from_bjd, "Predict from this BJD_TDB");
  auto* to = cmd->add_option("--to", args->to_bjd, "Predict every transit up to this BJD_TDB (needs --from)");
  to->needs(from);
  to->excludes(next);
  cmd->add_option("--epoch", args->epoch, "Also report T0 at this epoch (the file's numbering) [0]");
  cmd->add_flag("--scale-errors", args->scale_errors,
                "Scale uncertainties by sqrt(chi2/dof) when chi2/dof > 1 (stated in the output)");
  cmd->add_option("--outlier-sigma", args->outlier_sigma, "Flag transits with |O-C| above this many sigma [5]")
      ->check(CLI::PositiveNumber);
  cmd->add_flag("--drop-outliers", args->drop_outliers, "Refit without the flagged transits (listed anyway)");
  cmd->add_option("--companion-period", args->companion_period,
                  "Period (d) of another planet: print the expected near-resonant TTV super-period")
      ->check(CLI::PositiveNumber);
  cmd->add_option("--model", args->model,
                  "Ephemeris for the predictions: auto (the best supported by BIC), linear, quadratic or "
                  "sinusoid [auto]")
      ->check(CLI::IsMember({"auto", "linear", "quadratic", "sinusoid", "ttv"}));
  cmd->add_flag("--no-ttv", args->no_ttv, "Skip the timing-variation search");
  auto* minutes = cmd->add_flag("--minutes", args->minutes, "O-C and errors in minutes (default)");
  cmd->add_flag("--days", args->days, "O-C and errors in days")->excludes(minutes);
  const CLI::Option* time_offset = add_time_offset_option(cmd, args->time_offset);
  add_common_options(cmd, args->common);

  return {cmd, [args, time_offset]() -> int {
            TransitFileOptions file_options;
            file_options.time_offset_days = time_offset_value(time_offset, args->time_offset);
            TransitData all = read_transit_file(args->times, file_options);
            std::set<std::string> labels(all.planet.begin(), all.planet.end());
            std::string planet = args->planet;
            TransitData data;
            if (!planet.empty()) {
              if (!labels.count(planet)) {
                std::string known;
                for (const auto& l : labels) known += (known.empty() ? "" : ", ") + (l.empty() ? "(none)" : l);
                throw InputError(fmt::format("--planet {}: {} has no transits of that planet (labels: {})", planet,
                                             args->times, known));
              }
              data = all.for_planet(planet);
            } else if (labels.size() > 1) {
              std::string known;
              for (const auto& l : labels) known += (known.empty() ? "" : ", ") + l;
              throw InputError(fmt::format("{}: holds transits of several planets ({}); choose one with --planet",
                                           args->times, known));
            } else {
              data = all;
              planet = labels.empty() ? "" : *labels.begin();
            }
            EphemerisOptions opt;
            opt.user_epoch = args->epoch;
            opt.scale_errors = args->scale_errors;
            opt.outlier_sigma = args->outlier_sigma;
            opt.drop_outliers = args->drop_outliers;
            opt.search_ttv = !args->no_ttv;
            opt.companion_period_days = args->companion_period;
            opt.n_next = args->next;
            opt.from_bjd = args->from_bjd;
            opt.to_bjd = args->to_bjd;
            opt.prediction_model = parse_ephemeris_model(args->model, "--model");
            if (const std::string e = opt.Validate(); !e.empty()) throw InputError(e);
            const EphemerisResult r = fit_ephemeris(data, opt);
            if (r.termination != "converged") {
              fmt::print(stderr, "apsides: {}\n", r.message);
              return 1;
            }
            fmt::print("Transit times: {} ({} transits{})\n", args->times, data.size(),
                       planet.empty() ? "" : fmt::format(", planet {}", planet));
            if (!all.ignored_columns.empty()) {
              std::string cols;
              for (const auto& c : all.ignored_columns) cols += (cols.empty() ? "" : ", ") + c;
              fmt::print("Note: extra column(s) not used: {} (O-C is recomputed from the fitted ephemeris).\n", cols);
            }
            fmt::print("{}", r.FullReport(!args->days));
            if (!args->common.json_path.empty())
              write_file_atomic(args->common.json_path, ephemeris_json(r, args->times, planet, all.ignored_columns));
            return 0;
          }};
}

}  // namespace apsides::cli
