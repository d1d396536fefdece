// apsides scan FILE... : periodogram of velocities, its peaks with FAPs, window, aliases.
#include <fmt/format.h>

#include <algorithm>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/error.h"
#include "apsides/periodogram.h"
#include "apsides/project.h"
#include "cli/common.h"

namespace apsides::cli {

namespace {
struct ScanArgs {
  std::vector<std::string> files;
  std::string instrument;
  std::string velocity_unit = "m/s";
  std::string normalization = "standard";
  std::string method = "auto";
  std::string csv_path;
  double time_offset = 0.0;
  PeriodogramOptions options;
  CommonOptions common;
};

nlohmann::json peak_json(const Peak& p, const std::vector<Peak>& peaks, bool window) {
  nlohmann::json j = {{"period_d", p.period_days}, {"frequency_per_d", p.frequency_per_day}, {"power", p.power}};
  if (window) return j;
  j["fap"] = p.fap;
  j["power_standard"] = p.power_standard;
  if (p.fap_bootstrap >= 0) j["fap_bootstrap"] = p.fap_bootstrap;
  j["possible_alias"] = p.alias_of >= 0;
  if (p.alias_of >= 0) {
    j["alias_of_period_d"] = peaks[static_cast<std::size_t>(p.alias_of)].period_days;
    j["alias_window_frequency_per_d"] = p.alias_window_frequency;
  }
  return j;
}
}  // namespace

Command register_scan(CLI::App& app) {
  auto args = std::make_shared<ScanArgs>();
  CLI::App* cmd = app.add_subcommand(
      "scan",
      "Generalised Lomb-Scargle periodogram of velocities: strongest peaks with their Baluev (2008)\n"
      "false-alarm probability, the window function and possible aliases. Several instruments get\n"
      "one offset each, fitted at every frequency. FILE... are velocity files or one project TOML.\n"
      "Default grid: periods from 3 x baseline down to a limit set by the sampling (half the\n"
      "inverse of the 10th-percentile gap between observations, kept between 0.1 and 0.5 d), 10\n"
      "points per peak width 1/baseline. The FAP uses the grid's top frequency.");
  cmd->add_option("files", args->files, "Velocity files (time, velocity, uncertainty[, instrument]) or one project.toml")
      ->required();
  cmd->add_option("--instrument", args->instrument, "Instrument label for every file's rows");
  cmd->add_option("--velocity-unit", args->velocity_unit, "Unit of the velocity files: m/s or km/s")
      ->check(CLI::IsMember({"m/s", "km/s"}));
  cmd->add_option("--min-period", args->options.min_period_days, "Shortest period (days) [from the sampling]")
      ->check(CLI::PositiveNumber);
  cmd->add_option("--max-period", args->options.max_period_days, "Longest period (days) [3 x baseline]")
      ->check(CLI::PositiveNumber);
  cmd->add_option("--oversample", args->options.oversample, "Grid points per peak width 1/baseline [10]")
      ->check(CLI::Range(1.0, 1000.0));
  cmd->add_option("--normalization", args->normalization, "Power: standard, model, log or psd [standard]")
      ->check(CLI::IsMember({"standard", "model", "log", "psd"}));
  cmd->add_option("--method", args->method,
                  "exact (recurrences), fast (FFT, power error <= 1e-5) or auto (fast above 2e8 terms) [auto]")
      ->check(CLI::IsMember({"auto", "exact", "fast"}));
  cmd->add_option("--bootstrap", args->options.bootstrap, "Bootstrap resamplings for an empirical FAP [0 = off]")
      ->check(CLI::Range(0, 1000000));
  cmd->add_option("--seed", args->options.seed, "Bootstrap seed [1]");
  cmd->add_option("--peaks", args->options.n_peaks, "Number of peaks to report [10]")->check(CLI::Range(1, 1000));
  cmd->add_option("--threads", args->options.threads, "Threads [0 = all cores]")->check(CLI::Range(0, 1024));
  cmd->add_option("--csv", args->csv_path, "Write the whole periodogram (frequency, period, power, window) to FILE");
  const CLI::Option* time_offset = add_time_offset_option(cmd, args->time_offset);
  add_common_options(cmd, args->common);
  return {cmd, [args, time_offset]() -> int {
            VelocityData data;
            const std::optional<double> offset = time_offset_value(time_offset, args->time_offset);
            if (args->files.size() == 1 && is_project_file(args->files[0])) {
              data = load_project_with_time_offset(args->files[0], offset).load_velocities();
              print_warnings(data);
            } else {
              data = load_velocity_arguments(args->files, args->instrument, args->velocity_unit, offset);
            }
            PeriodogramOptions opt = args->options;
            opt.normalization = parse_normalization(args->normalization, "--normalization");
            opt.method = parse_periodogram_method(args->method, "--method");
            if (const std::string e = opt.Validate(); !e.empty()) throw InputError(e);
            const PeriodogramResult r = compute_periodogram(data, opt);

            nlohmann::json j;
            j["peaks"] = nlohmann::json::array();
            for (const Peak& p : r.peaks) j["peaks"].push_back(peak_json(p, r.peaks, false));
            j["window_peaks"] = nlohmann::json::array();
            for (const Peak& p : r.window_peaks) j["window_peaks"].push_back(peak_json(p, r.peaks, true));
            j["normalization"] = to_string(r.normalization);
            j["method"] = r.method_used;
            j["grid"] = {{"min_frequency_per_d", r.min_frequency_per_day},
                         {"max_frequency_per_d", r.max_frequency_per_day},
                         {"step_per_d", r.frequency_step_per_day},
                         {"n_frequencies", r.frequency_per_day.size()}};
            j["data"] = {{"n_points", data.size()}, {"instruments", data.instrument_names}, {"baseline_d", data.baseline_days()}};
            j["offsets"] = r.offsets_note;
            if (!args->common.json_path.empty()) write_json(args->common.json_path, j);
            if (!args->csv_path.empty()) {
              std::string s = "frequency_per_d,period_d,power,window\n";
              s.reserve(r.power.size() * 64);
              for (std::size_t k = 0; k < r.power.size(); ++k)
                s += fmt::format("{:.10g},{:.10g},{:.8g},{:.8g}\n", r.frequency_per_day[k], 1.0 / r.frequency_per_day[k],
                                 r.power[k], r.window_power[k]);
              write_file_atomic(args->csv_path, s);
            }

            fmt::print("{} velocities, {} instrument(s), baseline {:.1f} d; {}.\n", data.size(), data.n_instruments(),
                       data.baseline_days(), r.offsets_note);
            fmt::print("{} periodogram, {} normalisation, {} frequencies, periods {:.4g} to {:.4g} d.\n\n", r.method_used,
                       to_string(r.normalization), r.frequency_per_day.size(), 1.0 / r.max_frequency_per_day,
                       1.0 / r.min_frequency_per_day);
            const bool boot = opt.bootstrap > 0;
            fmt::print("{:>3} {:>14} {:>13} {:>10} {:>10}{}  {}\n", "#", "period (d)", "freq (1/d)", "power", "FAP",
                       boot ? fmt::format(" {:>10}", "FAP boot") : "", "note");
            bool any_alias = false;
            for (std::size_t i = 0; i < r.peaks.size(); ++i) {
              const Peak& p = r.peaks[i];
              std::string note;
              if (p.alias_of >= 0) {
                any_alias = true;
                note = fmt::format("possible alias of #{} (window peak {:.4f}/d = {:.4g} d)", p.alias_of + 1,
                                   p.alias_window_frequency, 1.0 / p.alias_window_frequency);
              }
              fmt::print("{:>3} {:>14.6f} {:>13.8f} {:>10.5g} {:>10.3g}{}  {}\n", i + 1, p.period_days,
                         p.frequency_per_day, p.power, p.fap,
                         boot ? fmt::format(" {:>10.3g}", p.fap_bootstrap) : "", note);
            }
            if (!r.window_peaks.empty()) {
              fmt::print("\nWindow function (periodogram of the sampling), strongest peaks:\n");
              for (const Peak& w : r.window_peaks)
                fmt::print("    f = {:.6f} /d  (P = {:.4f} d)  window power {:.3f}\n", w.frequency_per_day,
                           w.period_days, w.power);
            }
            fmt::print("\nFAP: Baluev (2008) analytic, for the highest peak up to {:.4g}/d{}.\n",
                       r.max_frequency_per_day, boot ? fmt::format("; bootstrap from {} resamplings", opt.bootstrap) : "");
            if (any_alias)
              fmt::print("A peak marked 'possible alias' sits at |f +- f_window| of a stronger peak: either may be the true\n"
                         "signal; more data at other sampling, or a fit of both, decides.\n");
            fmt::print("Stellar activity (rotation, spots) also makes periodic signals; a peak is not yet a planet.\n");
            return 0;
          }};
}

}  // namespace apsides::cli
