// Internal: one integration pass (forward or backward from the osculating epoch) that
// fills star velocities and collects conjunction times, for either integrator.
#pragma once

#include <cstddef>
#include <span>
#include <string>
#include <vector>

#include "apsides/nbody.h"
#include "dynamics/wh_core.h"

namespace apsides::dynamics {

inline constexpr double kMetresPerSecondPerAuPerDay = 149597870700.0 / 86400.0;  // kAu / kDay

// A conjunction seen between two steps of the WH map, kept for refinement after the epochs
// are counted (only requested epochs are refined).
struct Detection {
  double approx_time;   // first guess (days, absolute): enough to count and match epochs
  double tn;            // grid time of the stored state, relative to t0
  double guess, lo, hi; // first guess and detection bracket, relative to tn
  std::size_t state;    // offset of the stored mapping state (r then v of planets 1..n) in the pool
};

struct PassRequest {
  const PreparedSystem* ps = nullptr;
  const NbodyOptions* options = nullptr;
  double t0 = 0.0;       // osculating epoch (days)
  double h = 0.0;        // WH step (> 0); the reference integrator's first trial step is h / 10
  int direction = 1;     // +1 forward, -1 backward
  double span = 0.0;     // integrate until |t - t0| >= span
  const bool* wants_transits = nullptr;  // per Jacobi index 0..n-1
  std::span<const double> rv_times;      // all velocity times (absolute)
  const std::size_t* rv_index = nullptr; // this pass's velocity times, in the pass's time order
  std::size_t rv_count = 0;
  double* rv_out = nullptr;              // m/s, indexed like rv_times
  std::vector<double>* transits = nullptr;  // reference pass: per Jacobi index, refined conjunction times
  std::vector<Detection>* detections = nullptr;  // WH pass: per Jacobi index, detections in time order
  std::vector<Vec3>* state_pool = nullptr;       // WH pass: stored mapping states of the detections
};

// Refines a WH detection of planet j (Jacobi index 0-based): real state from the stored
// mapping state, Newton's method on g. Returns false if the conjunction is behind the star
// or the refinement failed; t_out is absolute.
bool refine_detection(const PreparedSystem& ps, const NbodyOptions& options, double h, int j, const Detection& d,
                      const std::vector<Vec3>& pool, double t0, double& t_out, WhFlags& flags);

struct PassResult {
  NbodyStatus status = NbodyStatus::kOk;
  std::string message;
  long long steps = 0;
};

PassResult wisdom_holman_pass(const PassRequest& request);
PassResult reference_pass(const PassRequest& request);

// Message for a failed step (shared wording).
std::string failure_message(NbodyStatus status, const PreparedSystem& ps, const WhFlags& flags, double t_days);

}  // namespace apsides::dynamics
