// The fit and comparison stages on a project (project_stages.h): moved here from the
// command line so the Python module runs exactly the same steps.
#include "apsides/project_stages.h"

#include <filesystem>

#include "apsides/analysis.h"
#include "apsides/results_file.h"

namespace apsides {

FitRun run_fit(const SearchProblem& problem, std::optional<int> n_planets) {
  FitRun run;
  if (n_planets) {
    run.fit = fit_map(make_fit_problem(problem, *n_planets), FitOptions{});
  } else {
    SearchOptions so;
    so.max_planets = problem.search.max_planets;
    so.fap_threshold = problem.search.fap_threshold;
    so.fit.oversample = problem.search.oversample;
    so.min_bic_improvement = problem.search.min_bic_improvement;
    run.search = search_planets(problem, so);
    run.fit = run.search->best();
  }
  run.planets = derive_planets(run.fit, problem.star.mass_msun);
  return run;
}

CompareResult compare_project(const Project& project, const VelocityData& data, const TransitData& transits,
                              CompareOptions options, const std::function<void(int, const std::string&)>& on_status) {
  SearchProblem problem = search_problem(project, data, transits);
  problem.search.max_planets = options.max_planets;  // [priors] may name planets up to this one
  const ModelLayout base = problem_layout(problem, 0);
  auto priors_for = [&](const ModelLayout& layout) { return problem_priors(problem, layout); };
  // Validate every model's priors before the long computation starts.
  for (int k = options.min_planets; k <= options.max_planets; ++k) {
    ModelLayout l = base;
    l.n_planets = k;
    (void)priors_for(l);
  }
  // A quick planet search (seconds) gives the nested sampler periods to jump to.
  options.search_hints.clear();
  if (options.max_planets > 0) {
    SearchOptions so = search_options(project);
    so.max_planets = options.max_planets;
    options.search_hints = search_signals(search_planets(problem, so));
  }
  return compare_planet_counts(data, base, priors_for, options, on_status, &transits);
}

void save_comparison(const std::string& path, const Project& project, const VelocityData& data,
                     const CompareResult& result) {
  const bool exists = std::filesystem::exists(path);
  ResultsFile file(path, exists ? ResultsFile::Mode::kReadWrite : ResultsFile::Mode::kCreate);
  if (!exists) {
    file.write_velocity_data(data);
    file.write_project_text(project.text);
  }
  write_comparison(file, result);
}

}  // namespace apsides
