// The fit and comparison stages as the commands run them on a project, shared by the
// command line (`apsides fit`, `apsides compare`) and the Python module, so both give the
// same numbers for the same project and options. The commands only read their options
// into these calls and print; see fit.h and evidence.h for the methods.
#pragma once

#include <functional>
#include <optional>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/evidence.h"
#include "apsides/fit.h"
#include "apsides/project.h"

namespace apsides {

// What `apsides fit` computes.
struct FitRun {
  FitResult fit;                       // the MAP fit reported (the search's selected one)
  std::optional<SearchResult> search;  // set when the planet search chose the number of planets
  std::vector<PlanetSummary> planets;  // derive_planets(fit, problem.star.mass_msun)
};

// `n_planets` set: the MAP fit of that many planets (fit_map, default FitOptions).
// Unset: the planet search (search_planets) with max_planets, fap_threshold,
// min_bic_improvement and the residual periodograms' oversampling from `problem.search`.
// Throws InputError (too few points, bad priors, ...); a numerical failure is in
// `fit.termination`.
FitRun run_fit(const SearchProblem& problem, std::optional<int> n_planets);

// What `apsides compare` computes: the project's models of options.min_planets ..
// options.max_planets planets (their priors all validated before the long computation),
// a quick planet search whose planets become the nested sampler's jump targets
// (CompareOptions::search_hints; replaced), then compare_planet_counts with the data and
// transit times. `on_status(k, status)` is called as each model starts.
CompareResult compare_project(const Project& project, const VelocityData& data, const TransitData& transits,
                              CompareOptions options,
                              const std::function<void(int k, const std::string& status)>& on_status = {});

// Writes a comparison into the results file at `path` (created with the data and the
// project text when missing): /comparison and /nested_samples (analysis.h: write_comparison).
void save_comparison(const std::string& path, const Project& project, const VelocityData& data,
                     const CompareResult& result);

}  // namespace apsides
