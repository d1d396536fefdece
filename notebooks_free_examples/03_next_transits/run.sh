#!/usr/bin/env bash
# A transiting planet's next transits: linear ephemeris, O-C, and predicted windows.
# Usage: run.sh [APSIDES_BINARY] [WORK_DIR]
set -euo pipefail
HERE="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
APSIDES="${1:-$HERE/../../build/src/apsides}"
WORK="${2:-$(mktemp -d)}"
mkdir -p "$WORK"
rm -rf "$WORK/data"

"$APSIDES" simulate "$HERE/scenario.toml" --out "$WORK/data"

# Ephemeris from the 30 mid-transit times and the next 10 transits after the last one.
"$APSIDES" ephemeris "$WORK/data/transits.csv" --next 10 --json "$WORK/ephemeris.json"

/usr/bin/python3 - "$WORK" <<'PY'
import json, sys
work = sys.argv[1]
truth = json.load(open(f"{work}/data/truth.json"))
eph = json.load(open(f"{work}/ephemeris.json"))
tp = [p for p in truth["planets"] if p["label"] == truth["transits"]["planet"]][0]
NSIG = 4  # the fit's own 1-sigma errors (chi2/dof is reported; they are not rescaled here)
fails = []
P, sP = eph["period_d"]["value"], eph["period_d"]["err"]
print(f"check: P = {P:.7f} +- {sP:.7f} d, truth {tp['period_d']} d "
      f"({(P - tp['period_d']) / sP:+.2f} sigma)")
if abs(P - tp["period_d"]) > NSIG * sP:
    fails.append(f"period off by {(P - tp['period_d']) / sP:.1f} sigma")
preds = eph["predictions"]
last = max(o["epoch"] for o in eph["o_minus_c"])
if len(preds) != 10 or [p["epoch"] for p in preds] != list(range(last + 1, last + 11)):
    fails.append(f"expected epochs {last + 1}..{last + 10}, got {[p['epoch'] for p in preds]}")
# The simulation numbers epochs from the true conjunction, without timing variations, so
# the true time of epoch n is t_conj + n P.
worst = 0.0
for p in preds:
    z = (p["t_mid_bjd"] - (tp["t_conj_bjd"] + p["epoch"] * tp["period_d"])) / p["err_d"]
    worst = max(worst, abs(z))
print(f"check: worst predicted transit {worst:.2f} sigma from the truth; window "
      f"+-{3 * preds[-1]['err_d'] * 1440:.1f} min (3 sigma) at epoch {preds[-1]['epoch']}")
if worst > NSIG:
    fails.append(f"a predicted transit is {worst:.1f} sigma from the truth")
if eph["ttv"].get("fap", 1.0) < 1e-3:
    fails.append("spurious timing variations reported significant (truth has none)")
if fails:
    print("FAILED: " + "; ".join(fails))
    sys.exit(1)
print("example 03_next_transits: OK")
PY
