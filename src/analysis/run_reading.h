// Internal to src/analysis: reading a finished run back from its results file (the data,
// the model's blocks, the kept samples), shared by the contract JSON, the figures and
// the report.
#pragma once

#include <cstddef>
#include <string>
#include <vector>

#include "apsides/data.h"
#include "apsides/keplerian_model.h"
#include "apsides/parameter_blocks.h"
#include "apsides/results_file.h"

namespace apsides::analysis {

VelocityData read_data(const ResultsFile& file);

// The model's configuration rebuilt from the stored parameter names; InputError when the
// names do not make a model apsides knows.
ModelLayout read_layout(const ResultsFile& file, const VelocityData& data);

struct KeptSamples {
  std::vector<double> theta;  // rows x dim
  std::size_t rows = 0, dim = 0;
  std::vector<double> median;
};
// At most `max_samples` samples after burn-in (an even stride), with their medians.
KeptSamples read_kept(const ResultsFile& file, std::size_t max_samples);

}  // namespace apsides::analysis
