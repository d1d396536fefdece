#!/usr/bin/env bash
# Combining three instruments: one offset and one jitter each, one of them in km/s.
# Usage: run.sh [APSIDES_BINARY] [WORK_DIR]
set -euo pipefail
HERE="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
APSIDES="${1:-$HERE/../../build/src/apsides}"
WORK="${2:-$(mktemp -d)}"
mkdir -p "$WORK"
rm -rf "$WORK/data"

"$APSIDES" simulate "$HERE/scenario.toml" --out "$WORK/data"

# The project lists the three files; Shrike's says velocity_unit = "km/s", so its values
# are converted to m/s on reading and its offset comes out in m/s like the others.
"$APSIDES" fit "$WORK/data/project.toml" --planets 1 --json "$WORK/fit.json"

/usr/bin/python3 - "$WORK" <<'PY'
import json, math, sys, csv
work = sys.argv[1]
truth = json.load(open(f"{work}/data/truth.json"))
fit = json.load(open(f"{work}/fit.json"))
tp = truth["planets"][0]
NSIG = 5  # first-order (Fisher) errors below; generous because they ignore correlations
fails = []
wsum, tmin, tmax = 0.0, math.inf, -math.inf
fitted = {i["name"]: i for i in fit["instruments"]}
for ti in truth["instruments"]:
    scale = 1000.0 if ti["velocity_unit"] == "km/s" else 1.0
    rows = list(csv.DictReader(open(f"{work}/data/velocities_{ti['name']}.csv")))
    n = len(rows)
    t = [float(r["time_bjd"]) for r in rows]
    tmin, tmax = min(tmin, *t), max(tmax, *t)
    sig2 = sum((scale * float(r["uncertainty"])) ** 2 for r in rows) / n
    s2 = sig2 + ti["jitter_ms"] ** 2
    wsum += n / s2
    # Offset: mean of n points of variance s2. Jitter: from the variance s2 estimated with
    # n points, var(s2) = 2 s2^2 / n, and d(s2)/d(jitter) = 2 jitter.
    sig_off = math.sqrt(s2 / n)
    sig_jit = s2 / (ti["jitter_ms"] * math.sqrt(2 * n))
    fi = fitted.get(ti["name"])
    if fi is None:
        fails.append(f"instrument {ti['name']} missing from the fit")
        continue
    off, jit = fi["offset_ms"]["value"], fi["jitter_ms"]["value"]
    print(f"check: {ti['name']:7s} offset {off:10.2f} m/s (truth {ti['offset_ms']:9.2f}, "
          f"1-sigma ~ {sig_off:.2f})  jitter {jit:5.2f} m/s (truth {ti['jitter_ms']}, "
          f"1-sigma ~ {sig_jit:.2f})")
    if abs(off - ti["offset_ms"]) > NSIG * sig_off:
        fails.append(f"{ti['name']} offset {off:.2f} vs truth {ti['offset_ms']}")
    if abs(jit - ti["jitter_ms"]) > NSIG * sig_jit:
        fails.append(f"{ti['name']} jitter {jit:.2f} vs truth {ti['jitter_ms']}")
p = fit["planets"][0]
P, K = p["period_d"]["value"], p["K_ms"]["value"]
T = tmax - tmin
# Weighted sinusoid errors: sigma_K = sqrt(2 / sum w), sigma_f = sqrt(6 / sum w) / (pi K T).
sig_K = math.sqrt(2 / wsum)
sig_P = tp["period_d"] ** 2 * math.sqrt(6 / wsum) / (math.pi * tp["K_ms"] * T)
print(f"check: P = {P:.4f} d (truth {tp['period_d']}, 1-sigma ~ {sig_P:.4f}), "
      f"K = {K:.2f} m/s (truth {tp['K_ms']}, 1-sigma ~ {sig_K:.2f})")
if abs(P - tp["period_d"]) > NSIG * sig_P:
    fails.append(f"period {P:.4f} vs truth {tp['period_d']}")
if abs(K - tp["K_ms"]) > NSIG * sig_K:
    fails.append(f"K {K:.2f} vs truth {tp['K_ms']}")
if fails:
    print("FAILED: " + "; ".join(fails))
    sys.exit(1)
print("example 04_three_instruments: OK")
PY
