// The activity result as JSON, shared by `scan --json` and `analyze`'s summary (internal).
#ifndef APSIDES_SRC_ACTIVITY_ACTIVITY_JSON_H_
#define APSIDES_SRC_ACTIVITY_ACTIVITY_JSON_H_

#include <nlohmann/json.hpp>

#include "apsides/activity.h"

namespace apsides {

// {"indicators": [{"name", "n_points", "weighted", "peaks": [{"period_d", "frequency_per_d",
//  "power", "fap"}]}], "shared_signals": [{"velocity_period_d", "indicator",
//  "indicator_period_d", "indicator_fap", "harmonic", "note"}], "correlations": [{"indicator",
//  "instrument", "against", "n", "pearson_r", "pearson_p", "spearman_rho", "spearman_p"}],
//  "rotation_hint_d", "rotation_hint_source"}
nlohmann::json activity_json(const ActivityResult& result);

}  // namespace apsides

#endif  // APSIDES_SRC_ACTIVITY_ACTIVITY_JSON_H_
