// The whole job on one project (`apsides analyze`), and the pieces of it that other
// commands share: the contract JSON of a finished run, the comparison table in the
// results file, and the figures of a run.
//
// Stages, in order: scan (periodogram of the velocities) -> planet search (fit.h:
// search_planets, with the residual periodogram of each step) -> comparison (nested
// sampling for the search's answer k and its neighbours k - 1 and k + 1; [model] planets
// skips the decision) -> sampling of the selected model to convergence (sampling_run.h)
// -> transit ephemerides of planets with transit times -> summary JSON, figures, report.
// DIR receives results.h5 (everything), summary.json (the contract of DESIGN.md),
// report.md and figures/. With `resume`, a finished comparison (DIR/stages/) and a
// finished or interrupted sampling run (DIR/results.h5, same project text) are reused.
#pragma once

#include <functional>
#include <string>
#include <vector>

#include "apsides/evidence.h"
#include "apsides/figures.h"
#include "apsides/project.h"
#include "apsides/results_file.h"

namespace apsides {

struct AnalysisOptions {
  std::string out_dir;
  bool resume = false;
  FigureFormat format = FigureFormat::kPng;
  int threads = 2;
  long max_steps = -1;     // > 0 overrides [sampler] max_steps
  int live_points = -1;    // > 0 overrides [evidence] live_points
  // One line per stage ("scan", "search", ...) with a short status.
  std::function<void(const std::string& stage, const std::string& status)> on_stage;
  // Sampling progress (step, max steps, status).
  std::function<void(long, long, const std::string&)> on_sampling;
};

struct AnalysisOutcome {
  int selected_n_planets = 0;
  std::string decision;            // one sentence: how the number of planets was chosen
  bool converged = false;
  std::string results_path, summary_path, report_path;
  std::vector<std::string> figures;
  std::vector<std::string> cautions;
  std::string sampler_message;
};

AnalysisOutcome run_analysis(const Project& project, const AnalysisOptions& options);

// DESIGN.md's contract JSON of a finished sampling run ("data", "comparison",
// "selected_n_planets", "planets", "instruments", "sampler", each quantity as
// {"median","minus","plus"}), with the comparison when the file holds one.
std::string summary_json(const ResultsFile& file);

// Writes the comparison table (/comparison) and the nested samples (/nested_samples/k<N>)
// into a results file.
void write_comparison(ResultsFile& file, const CompareResult& result);

// Figures of a finished run: velocities with the model, phase folds, a corner plot per
// planet, trace plots, and the periodograms when the file holds them. Returns the paths.
std::vector<std::string> write_run_figures(const ResultsFile& file, const std::string& dir,
                                           const FigureOptions& options);

}  // namespace apsides
