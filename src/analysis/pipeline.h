// Internal to src/analysis: the state `apsides analyze` hands from stage to stage
// (pipeline.cpp runs them; report.cpp writes report.md from what they left).
#pragma once

#include <filesystem>
#include <memory>
#include <string>
#include <utility>
#include <vector>

#include "apsides/activity.h"
#include "apsides/analysis.h"
#include "apsides/ephemeris.h"
#include "apsides/fit.h"
#include "apsides/periodogram.h"
#include "apsides/posterior.h"
#include "apsides/results_file.h"

namespace apsides::analysis {

struct Run {
  const Project& project;
  const AnalysisOptions& options;
  AnalysisOutcome& out;
  std::filesystem::path dir, fig_dir, stages;
  FigureOptions figures;
  VelocityData data;
  TransitData transits;
  std::vector<std::string> report_figures;  // written so far, in report order
  PeriodogramOptions periodogram;
  PeriodogramResult scan;
  ActivityResult activity;  // indicator periodograms, shared peaks, correlations (empty without indicators)
  SearchProblem problem;
  SearchResult search;
  CompareResult comparison;
  int n_planets = 0;
  std::unique_ptr<ResultsFile> file;
  bool reused = false;  // the sampling run was reused (--resume)
  RunSummary summary;
  std::vector<std::pair<std::string, EphemerisResult>> ephemerides;
  std::string limits_markdown;  // the detection-limits section ([limits] enabled = true)
  std::string stability_markdown;  // the report's stability section (multi-planet results), "" otherwise

  Run(const Project& p, const AnalysisOptions& o, AnalysisOutcome& r) : project(p), options(o), out(r) {}
  void stage(const std::string& name, const std::string& status) const {
    if (options.on_stage) options.on_stage(name, status);
  }
};

// Writes `text` to `path` through a temporary file and a rename (never half-written).
void write_text_atomic(const std::string& path, const std::string& text);
// The comparison of an earlier run in DIR/stages, when its key matches; else false.
bool read_cached_comparison(const std::filesystem::path& path, const std::string& key, CompareResult& out);
void write_cached_comparison(const std::filesystem::path& path, const std::string& key, const CompareResult& c);
// report.md, and the cautions it ends with.
std::string report_markdown(const Run& run);
std::vector<std::string> report_cautions();

}  // namespace apsides::analysis
