// Derived posteriors and posterior summaries.
//
// For every kept sample: per planet the period, K, e, omega (star, degrees in [0, 360)),
// time of conjunction and of periastron (BJD_TDB), and, when the stellar mass is known,
// m sin i (exact solution of the mass function, orbit.h), the semi-major axis a of the
// relative orbit, r_peri = a (1 - e) and r_apo = a (1 + e). The stellar mass is drawn per
// sample from N(mass, mass_err) (truncated at > 0), so its uncertainty is folded in.
// Planets are labelled by increasing period in each sample (b, c, ...).
// m sin i is a MINIMUM mass: the inclination is unknown from velocities alone.
#pragma once

#include <cstdint>
#include <optional>
#include <span>
#include <string>
#include <vector>

#include "apsides/keplerian_model.h"
#include "apsides/results_file.h"
#include "apsides/sampler.h"

namespace apsides {

struct DerivedOptions {
  std::optional<double> star_mass_msun;
  double star_mass_err_msun = 0.0;
  double reference_epoch_bjd = 0.0;  // added to conjunction/periastron times
  std::uint64_t seed = 1;            // for the stellar-mass draws
};

struct DerivedChains {
  std::vector<std::string> names;   // "b.period_d", "b.msini_mjup", ..., "star.mass_msun"
  std::vector<std::string> units;
  std::vector<std::string> descriptions;
  std::vector<std::vector<double>> values;  // per quantity, per sample
  std::size_t index(const std::string& name) const;  // names.size() when absent
};

// samples: n x layout.n_params() row-major.
DerivedChains derive_posterior(std::span<const double> samples, const ModelLayout& layout,
                               const DerivedOptions& options);

// 16th, 50th and 84th percentiles (linear interpolation between order statistics).
struct Quantiles {
  double median = 0.0, minus = 0.0, plus = 0.0;  // minus = q50 - q16, plus = q84 - q50
};
Quantiles quantiles(std::vector<double> values);
// Any percentile in [0, 100].
double percentile(std::vector<double> values, double pct);

// "12.34 +0.56 -0.43": uncertainties rounded to 2 significant digits (1 when the leading
// digit is >= 4, i.e. the larger uncertainty is rounded to two digits only when they
// carry information — Particle Data Group practice, common in the trade), the value
// rounded to the same decimal place.
std::string format_with_uncertainty(const Quantiles& q);

// ---- Whole runs, through the results file ------------------------------------------
// After sampling: writes /diagnostics (per parameter R-hat, ESS, tau), /derived chains of
// the kept samples (after burn-in; at most `max_samples`, taken with an even stride) and
// the run's outcome as /chains attributes.
void write_posterior(ResultsFile& file, const ModelLayout& layout, const std::vector<std::string>& names,
                     const SamplerResult& result, const DerivedOptions& options, std::size_t max_samples = 200000);

struct SummaryRow {
  std::string name, unit;
  Quantiles q;
};
struct RunSummary {
  std::size_t n_points = 0;
  std::vector<std::string> instruments;
  double baseline_d = 0.0;
  int walkers = 0;
  long steps = 0, burn_in_steps = 0;
  double rhat_max = 0.0, ess_min = 0.0, tau_max = 0.0;
  std::string termination, message;
  bool converged = false;
  bool has_star_mass = false;
  int n_planets = 0;
  std::vector<SummaryRow> parameters;  // sampled parameters
  std::vector<SummaryRow> derived;     // derived quantities
  const SummaryRow* find(const std::string& name) const;  // in parameters then derived
  std::string FullReport() const;      // the table summarize prints
};
// Reads a finished results file; InputError when it holds no finished run.
RunSummary summarize_run(const ResultsFile& file);

}  // namespace apsides
