// Sampling a whole project: the MAP start, walkers in a ball around it, the ensemble
// sampler streaming its chain into the HDF5 results file, derived posteriors at the end.
// `apsides sample` and `apsides analyze` both run this.
//
// The posterior: the composed model of posterior_model.h (make_posterior): the blocks'
// priors (model_priors.h: build_priors with the project's [priors]) + the velocities'
// term + for each planet with [[transits]] rows labelled with its letter, its
// transit-time term (T_n = T_conj + n P), so transit times pin that planet's period
// and phase.
#pragma once

#include <functional>
#include <memory>
#include <span>
#include <optional>
#include <string>
#include <vector>

#include "apsides/fit.h"
#include "apsides/keplerian_model.h"
#include "apsides/project.h"
#include "apsides/sampler.h"

namespace apsides {

struct SamplingRunOptions {
  std::string out_path;          // results file (created, or continued with resume)
  bool resume = false;           // continue the run saved in out_path
  long max_steps = -1;           // > 0 overrides [sampler] max_steps
  int walkers = -1;              // > 0 overrides [sampler] walkers
  long long seed = -1;           // >= 0 overrides [sampler] seed
  int threads = 2;               // results do not depend on it
  // Number of planets; unset: [model] planets, else the planet search decides.
  std::optional<int> n_planets;
  // MAP fit to start from (skips the fit); its layout must match n_planets.
  const FitResult* start = nullptr;
  // Progress (called from the sampling thread) and a stop request (checkpoints first).
  std::function<void(long step, long max_steps, const std::string& status)> progress;
  std::function<bool()> should_stop;
  // Called with each warning about the data (e.g. a velocity unit that looks wrong) as
  // soon as they are loaded, before the long run.
  std::function<void(const std::string& warning)> on_warning;
};

struct SamplingRun {
  SamplerResult result;
  ModelLayout layout;
  std::vector<std::string> names;
  FitResult map;                 // the start (not filled on resume)
  std::string note;              // e.g. "the planet search selected 2 planets"
  std::string failure;           // non-empty: the run could not start (exit code 1)
};

SamplingRun sample_project(const Project& project, const SamplingRunOptions& options);

}  // namespace apsides
