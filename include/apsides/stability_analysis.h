// Orbital stability of fitted multi-planet systems: the criteria of stability.h (mutual
// Hill separations after Gladman 1993, AMD stability after Laskar & Petit 2017, N-body
// survival with MEGNO after Cincotta & Simo 2000) applied to posterior draws of a run.
//
// From a Keplerian run (RUN.h5 of `apsides sample` / `analyze`): each draw's planets become
// an N-body system with masses m sin i from (P, K, e) and the star's mass ([star] mass_msun
// of the stored project), coplanar and edge-on (i = 90 deg: the minimum masses, so the
// least interacting configuration the velocities allow), osculating elements at the data's
// reference epoch. The fractions are therefore for that configuration: lower inclinations
// mean larger masses and can only make a system less stable.
//
// Caution (also in every report): the criteria are necessary conditions (Hill, AMD) or a
// finite-time numerical test (survival and a regular MEGNO over the stated number of inner
// orbits). A system passing them over a few thousand orbits is not proven stable for the
// star's lifetime; one failing them is very likely unstable.
#pragma once

#include <cstddef>
#include <limits>
#include <string>
#include <vector>

#include "apsides/nbody.h"
#include "apsides/parameter_blocks.h"
#include "apsides/stability.h"

namespace apsides {

struct StabilityRunOptions {
  std::size_t max_draws = 200;  // posterior draws assessed (an even stride through the kept samples), >= 1
  StabilityOptions stability;   // criteria, MEGNO run length (inner orbits), threads
  std::string Validate() const;
};

struct StabilityRunResult {
  std::string source;                    // the run file or project
  std::string configuration;             // how draws became N-body systems (one sentence)
  std::vector<std::string> planet_labels;
  double star_mass_msun = std::numeric_limits<double>::quiet_NaN();
  std::vector<NbodySystem> draws;        // the systems assessed
  StabilitySummary summary;
  std::string BriefReport() const;
  std::string FullReport() const;
};

// N-body systems from Keplerian samples (rows x dim, theta of `layout`): each planet block's
// m sin i (orbit.h) with the star's mass, i = 90 deg, node 0, osculating epoch 0 (the
// data's reference epoch). Draws with a planet that has no valid orbit (P <= 0, e >= 1)
// are kept with mass 0 so that they count as invalid.
std::vector<NbodySystem> systems_from_keplerian_draws(const ParameterLayout& layout, const std::vector<double>& samples,
                                                      std::size_t rows, double star_mass_msun);

// The stability of a run's posterior draws. InputError when the file is no run, has
// fewer than two planets, or its project gives no star mass.
StabilityRunResult stability_of_run(const std::string& results_path, const StabilityRunOptions& options = {});
// The stability of given systems (e.g. an N-body MAP, or draws made elsewhere).
StabilityRunResult stability_of_systems(const std::string& source, const std::string& configuration,
                                        std::vector<NbodySystem> systems, const std::vector<std::string>& labels,
                                        const StabilityRunOptions& options = {});

// The report's section ("## Orbital stability" ...), markdown; `figure` ("" for none) is
// the figure's path relative to the report.
std::string stability_markdown(const StabilityRunResult& result, const std::string& figure);

// The figure: per draw, the smallest mutual Hill separation (x) against the largest AMD
// ratio beta (y, log scale), with the 2 sqrt 3 and beta = 1 lines; draws that survived
// with a regular MEGNO in blue, the others in vermillion. Returns the path written.
std::string write_stability_figure(const StabilityRunResult& result, const std::string& path);

}  // namespace apsides
