// The machine-readable documents of the commands' --json (DESIGN.md output contracts),
// built in one place for the command line and the Python module (which parses the same
// text, so both give the same numbers to the last digit). Each returns the JSON text,
// indented by 2, ending in a newline. Non-finite numbers are written as null.
// (The contract of a finished sampling run, used by summarize and analyze, is
// analysis.h: summary_json.)
#pragma once

#include <string>

#include "apsides/data.h"
#include "apsides/ephemeris.h"
#include "apsides/evidence.h"
#include "apsides/periodogram.h"
#include "apsides/project_stages.h"
#include "apsides/sampler.h"

namespace apsides {

// `apsides scan`: {"peaks": [{"period_d", "frequency_per_d", "power", "fap",
// "power_standard", "possible_alias", ...}], "window_peaks", "normalization", "method",
// "grid", "data", "offsets"}.
std::string scan_json(const PeriodogramResult& result, const VelocityData& data);

// `apsides fit`: "planets" (each quantity {"value"}), "instruments", the fit's statistics
// (ln_like, bic, aicc, ...), "theta" and "parameter_names", "data", "star" (when the
// problem has a star mass), and with a search its steps ("search", "selected_n_planets").
std::string fit_json(const FitRun& run, const SearchProblem& problem);

// `apsides compare`: {"data", "comparison": [rows], "selected_n_planets",
// "selection_rule", "notes", "message"}.
std::string compare_json(const CompareResult& result, const VelocityData& data);

// `apsides sample`: {"sampler": {"walkers", "steps", "burn_in_steps", "rhat_max",
// "ess_min", "tau_max", "termination", "message"}}.
std::string sampling_json(const SamplerResult& result);

// `apsides ephemeris`: {"file", "planet", "n_transits", "reference_bjd", "t0_bjd", "t_ref_bjd",
// "period_d", "cov_t0_period_d2", "chi2", "dof", "ignored_columns", "notes", "oc",
// "quadratic", "ttv", "predictions", ...}; `file` names the data in the document.
std::string ephemeris_json(const EphemerisResult& result, const std::string& file, const std::string& planet,
                           const std::vector<std::string>& ignored_columns);

}  // namespace apsides
