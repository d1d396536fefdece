#!/usr/bin/env bash
# First look at a new star: periodogram, then an iterative planet search with minimum masses.
# Usage: run.sh [APSIDES_BINARY] [WORK_DIR]
set -euo pipefail
HERE="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
APSIDES="${1:-$HERE/../../build/src/apsides}"
WORK="${2:-$(mktemp -d)}"
mkdir -p "$WORK"
rm -rf "$WORK/data"

# 1. Invented data with a known answer (truth.json).
"$APSIDES" simulate "$HERE/scenario.toml" --out "$WORK/data"

# 2. Periodogram of the single velocity file: strongest peaks, FAP, window, aliases.
"$APSIDES" scan "$WORK/data/velocities_Heron.csv" --peaks 5 --json "$WORK/scan.json"

# 3. Planet search, with the stellar mass from the project so m sin i and a are reported.
read -r MSTAR MSTAR_ERR < <(/usr/bin/python3 -c '
import json, sys
s = json.load(open(sys.argv[1]))["star"]
print(s["mass_msun"], s["mass_err_msun"])' "$WORK/data/truth.json")
"$APSIDES" fit --search "$WORK/data/velocities_Heron.csv" \
    --star-mass "$MSTAR" --star-mass-err "$MSTAR_ERR" --json "$WORK/fit.json"

# 4. Check the answer against the truth.
/usr/bin/python3 - "$WORK" <<'PY'
import json, math, sys, csv
work = sys.argv[1]
truth = json.load(open(f"{work}/data/truth.json"))
scan = json.load(open(f"{work}/scan.json"))
fit = json.load(open(f"{work}/fit.json"))
tp = truth["planets"][0]
inst = truth["instruments"][0]
rows = list(csv.DictReader(open(f"{work}/data/velocities_Heron.csv")))
t = [float(r["time_bjd"]) for r in rows]
n, T = len(rows), max(t) - min(t)
s = math.sqrt(sum(float(r["uncertainty"]) ** 2 for r in rows) / n + inst["jitter_ms"] ** 2)
# First-order (Fisher) 1-sigma errors of a sinusoid of amplitude K in white noise s over
# baseline T with n points: sigma_f = sqrt(6/n) s / (pi K T), sigma_K = s sqrt(2/n).
sig_P = tp["period_d"] ** 2 * math.sqrt(6 / n) * s / (math.pi * tp["K_ms"] * T)
sig_K = s * math.sqrt(2 / n)
NSIG = 5  # generous: the orbit is eccentric (e = 0.18), which the sinusoid formula ignores
fails = []
top = scan["peaks"][0]
if abs(top["period_d"] - tp["period_d"]) > NSIG * sig_P + 0.1 * tp["period_d"] ** 2 / T:
    fails.append(f"top periodogram peak {top['period_d']:.4f} d, truth {tp['period_d']} d")
if top["fap"] > 1e-3:
    fails.append(f"top peak FAP {top['fap']:.3g} not significant")
if fit["selected_n_planets"] != 1:
    fails.append(f"search selected {fit['selected_n_planets']} planets, truth 1")
else:
    p = fit["planets"][0]
    P, K, m = p["period_d"]["value"], p["K_ms"]["value"], p["msini_mearth"]["value"]
    if abs(P - tp["period_d"]) > NSIG * sig_P:
        fails.append(f"period {P:.4f} vs truth {tp['period_d']} (tolerance {NSIG * sig_P:.4f} d)")
    if abs(K - tp["K_ms"]) > NSIG * sig_K:
        fails.append(f"K {K:.2f} vs truth {tp['K_ms']} (tolerance {NSIG * sig_K:.2f} m/s)")
    # m sin i scales as K (same star mass, P known far better): same relative tolerance.
    if abs(m / tp["msini_mearth"] - 1) > NSIG * sig_K / tp["K_ms"]:
        fails.append(f"m sin i {m:.1f} vs truth {tp['msini_mearth']:.1f} Earth masses")
    print(f"check: P = {P:.4f} d (truth {tp['period_d']}, 1-sigma ~ {sig_P:.4f}), "
          f"K = {K:.2f} m/s (truth {tp['K_ms']}), m sin i = {m:.1f} ME (truth {tp['msini_mearth']:.1f})")
if fails:
    print("FAILED: " + "; ".join(fails))
    sys.exit(1)
print("example 01_first_look: OK")
PY
