#include "analysis/run_reading.h"

#include <fmt/format.h>

#include <algorithm>

#include "apsides/error.h"
#include "apsides/posterior.h"

namespace apsides::analysis {

VelocityData read_data(const ResultsFile& f) {
  VelocityData d;
  d.reference_epoch_bjd = f.double_attribute("/data", "reference_epoch_bjd");
  d.time_days = f.read_vector("/data/time_d");
  d.velocity_m_s = f.read_vector("/data/velocity_ms");
  d.uncertainty_m_s = f.read_vector("/data/uncertainty_ms");
  for (long long i : f.read_ints("/data/instrument")) d.instrument.push_back(static_cast<int>(i));
  d.instrument_names = f.read_strings("/data/instrument_names");
  d.origin.assign(d.size(), f.path());
  return d;
}

namespace {
bool ends_with(const std::string& s, const std::string& suffix) {
  return s.size() >= suffix.size() && s.compare(s.size() - suffix.size(), suffix.size(), suffix) == 0;
}
}  // namespace

ModelLayout read_layout(const ResultsFile& file, const VelocityData& data) {
  const std::vector<std::string> names = file.read_strings("/parameters/names");
  ModelLayout L;
  L.n_instruments = static_cast<int>(data.n_instruments());
  L.n_planets = 0;
  L.fit_jitter = false;
  for (const auto& n : names) {
    if (n.size() == 10 && ends_with(n, ".period_d")) ++L.n_planets;
    if (ends_with(n, ".jitter_ms")) L.fit_jitter = true;
    if (n == "trend.c1_ms_per_d" && L.trend == Trend::kNone) L.trend = Trend::kLinear;
    if (n == "trend.c2_ms_per_d2") L.trend = Trend::kQuadratic;
    if (n.size() == 18 && ends_with(n, ".transit_jitter_d")) L.transit_jitter_planets.push_back(n[0] - 'b');
  }
  if (ParameterLayout::from(L, data.instrument_names).names() != names)
    throw InputError(fmt::format("{}: cannot rebuild the model from its parameter names", file.path()));
  return L;
}

KeptSamples read_kept(const ResultsFile& f, std::size_t max_samples) {
  KeptSamples k;
  const long steps = f.chain_steps();
  const long burn = f.has_attribute("/chains", "burn_in_steps") ? static_cast<long>(f.int_attribute("/chains", "burn_in_steps")) : steps / 2;
  k.dim = f.chain_dim();
  const ResultsFile::StepSelection sel = f.select_steps(burn, steps, max_samples);  // stored steps after burn-in
  k.theta = sel.rows ? f.read_chain_rows(sel.first, sel.last, sel.stride) : std::vector<double>{};
  k.rows = k.theta.size() / k.dim;
  k.median.resize(k.dim);
  std::vector<double> col(k.rows);
  for (std::size_t p = 0; p < k.dim; ++p) {
    for (std::size_t r = 0; r < k.rows; ++r) col[r] = k.theta[r * k.dim + p];
    k.median[p] = percentile(col, 50.0);
  }
  return k;
}

}  // namespace apsides::analysis
