// Internal to the model: the statistics of the data that the default priors are built
// from (model_priors.h documents the defaults), handed to each block's
// set_default_priors.
#pragma once

#include <limits>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/model_priors.h"
#include "apsides/prior.h"

namespace apsides {

struct InstrumentStats {
  double mean = 0.0;        // weighted mean velocity
  double sd = 0.0;          // unweighted standard deviation about the mean
  double median_err = 1.0;  // median stated uncertainty
};

struct DataStats {
  std::vector<InstrumentStats> inst;
  double range = 0.0;       // full range of velocities after removing each instrument's mean
  double median_err = 1.0;  // over all points
  double t_mid = 0.0;       // middle of the data (days after the reference epoch)
  double baseline = 0.0;
};
DataStats data_stats(const VelocityData& data);

// Throws InputError "<where>: <prior> allows negative values; ..." unless the prior's
// support starts above 0 (`strictly`) or at or above 0.
void require_positive_support(const Prior& prior, const std::string& where, bool strictly);

struct PriorContext {
  DataStats stats;
  PeriodRange periods;                // default period prior range
  EccentricityPrior eccentricity;     // default eccentricity prior of every planet
  const TransitData* transits = nullptr;  // for the transit-jitter scale (may be null)
  // A rotation period the activity indicators show (days; NaN: none): centres the GP's
  // rotation-period prior.
  double rotation_hint_days = std::numeric_limits<double>::quiet_NaN();
};

}  // namespace apsides
