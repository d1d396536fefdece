// Synthetic data with known truth: velocities from several instruments observing one
// star nightly from one site (seasonal gaps, weather), noise plus jitter, and transit
// times of transiting planets (optionally with a sinusoidal timing variation).
// Reproducible from a seed.
//
// Scenario file (TOML), every key but the planets optional:
//   seed = 7
//   [star]        name, mass_msun [1.0], mass_err_msun [0.0], radius_rsun [1.0]
//   [observing]   start_bjd [2460000.5], span_days [1000], season_days [240]
//                 (observable part of each year), clear_fraction [0.65],
//                 hour_scatter_d [0.08] (spread of the exposure time around midnight)
//   [[instruments]] name, n_points [60], sigma_ms [2.0] (stated uncertainty),
//                 sigma_scatter [0.2] (relative spread of the stated errors),
//                 jitter_ms [0.0] (extra white noise, not in the stated errors),
//                 offset_ms [0.0], start_bjd, end_bjd [the observing span],
//                 velocity_unit ["m/s"]
//   [[planets]]   period_d, K_ms, ecc [0], omega_deg [90], t_conj_bjd [start + phase P]
//                 transiting [false]
//   [trend]       c1_ms_per_d [0], c2_ms_per_d2 [0] (about the middle of the span)
//   [transits]    planet ["b"], n_transits [20], sigma_d [0.0005], ttv_amplitude_d [0],
//                 ttv_period_epochs [0], ttv_phase_deg [0]
//   [nbody]       interacting planets (nbody.h): present, the planets pull on each other;
//                 velocities and transit times come from the N-body engine, each planet
//                 takes mass_mearth instead of K_ms (and inclination_deg [90]); elements are
//                 osculating Jacobi elements at osculating_epoch_bjd [the start of the
//                 observations]. Keys: osculating_epoch_bjd. The project written alongside
//                 selects dynamics = "nbody". ttv_* keys must be 0 (the TTVs are the engine's).
#pragma once

#include <string>
#include <vector>

#include "apsides/keplerian_model.h"

namespace apsides {

struct SimInstrument {
  std::string name;
  int n_points = 60;
  double sigma_ms = 2.0;
  double sigma_scatter = 0.2;
  double jitter_ms = 0.0;
  double offset_ms = 0.0;
  double start_bjd = 0.0;  // 0: observing start
  double end_bjd = 0.0;    // 0: observing end
  VelocityUnit unit = VelocityUnit::kMetersPerSecond;
};

struct SimPlanet {
  double period_d = 0.0;
  double K_ms = 0.0;
  double ecc = 0.0;
  double omega_deg = 90.0;
  double t_conj_bjd = 0.0;
  bool transiting = false;
  double mass_mearth = 0.0;       // N-body mode
  double inclination_deg = 90.0;  // N-body mode
};

struct SimTransits {
  std::string planet = "b";
  int n_transits = 20;
  double sigma_d = 0.0005;
  double ttv_amplitude_d = 0.0;
  double ttv_period_epochs = 0.0;
  double ttv_phase_deg = 0.0;
  bool enabled = false;
};

struct Scenario {
  unsigned long long seed = 1;
  std::string star_name = "Synthetic star";
  double mass_msun = 1.0;
  double mass_err_msun = 0.0;
  double radius_rsun = 1.0;
  double start_bjd = 2460000.5;
  double span_days = 1000.0;
  double season_days = 240.0;
  double clear_fraction = 0.65;
  double hour_scatter_d = 0.08;
  std::vector<SimInstrument> instruments;
  std::vector<SimPlanet> planets;  // sorted by period when loaded
  double trend_c1 = 0.0, trend_c2 = 0.0;
  SimTransits transits;
  bool nbody = false;                 // [nbody] present
  double osculating_epoch_bjd = 0.0;  // [nbody] osculating_epoch_bjd (default start_bjd)

  std::string Validate() const;
};

Scenario load_scenario(const std::string& path);
Scenario parse_scenario(const std::string& text, const std::string& path_for_messages);

struct SimulatedData {
  // Rows of the velocity file: time (BJD_TDB), velocity, uncertainty (in the instrument's
  // unit), instrument.
  struct VelocityRow {
    long double time_bjd;
    double velocity, uncertainty;
    std::string instrument;
  };
  std::vector<VelocityRow> velocities;
  struct TransitRow {
    long long epoch;
    long double time_bjd;
    double uncertainty_d;
    double ttv_d;  // injected timing variation (truth)
  };
  std::vector<TransitRow> transits;
  std::string truth_json;  // truth of every planet and instrument, JSON text

  // One instrument's rows: header + rows, comma separated, full precision.
  std::string velocity_csv(const std::string& instrument) const;
  std::string transit_csv() const;
};

SimulatedData simulate(const Scenario& scenario);

}  // namespace apsides
