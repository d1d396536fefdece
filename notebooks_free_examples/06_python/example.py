"""The bundled demo star, Vireo-412, from Python: load the tables with numpy, look at the
periodogram, let the planet search fit the orbits, evaluate the posterior yourself, sample it
and read the chains back. Every number comes from the apsides library.

Usage: example.py [WORK_DIR] [--full]
  WORK_DIR  where run.h5 goes (default: a temporary directory)
  --full    sample to convergence (~25 s) and compare 1, 2 and 3 planets by their evidence
            (~2 min); without it the sampler takes 1500 steps, enough to look at the chains.
Run with Debian's Python and the module on the path: scripts/python notebooks_free_examples/06_python/example.py
"""
import json
import pathlib
import sys
import tempfile

import numpy as np

import apsides

ROOT = pathlib.Path(__file__).resolve().parents[2]
DEMO = ROOT / "datasets_synthetic" / "demo"
args = [a for a in sys.argv[1:] if not a.startswith("--")]
FULL = "--full" in sys.argv
WORK = pathlib.Path(args[0]) if args else pathlib.Path(tempfile.mkdtemp(prefix="apsides-06-"))
WORK.mkdir(parents=True, exist_ok=True)

# 1. The data, as a notebook would have them: one table per spectrograph. Petrel reports
#    km/s around an absolute zero point; everything else is m/s, so convert it here.
velocities = {}
for name in ("Kestrel", "Tern", "Petrel"):
    table = np.genfromtxt(DEMO / f"velocities_{name}.csv", delimiter=",", names=True, dtype=None, encoding="utf-8")
    to_ms = 1000.0 if name == "Petrel" else 1.0
    velocities[name] = (table["time_bjd"], table["velocity"] * to_ms, table["uncertainty"] * to_ms)
transits = np.genfromtxt(DEMO / "transits.csv", delimiter=",", names=True)  # epoch, t_mid_bjd, uncertainty_d

project = apsides.Project(velocities, transits, star_mass=0.86, star_mass_err=0.03, star_radius=0.82,
                          star_name="Vireo-412")
print(project)

# 2. Periodogram (one offset per instrument fitted at every frequency).
scan = apsides.periodogram(project, peaks=5)
print(f"\nperiodogram: {len(scan.frequency)} frequencies, periods {scan.period.min():.3g} to {scan.period.max():.4g} d")
for p in scan.peaks:
    alias = f"  (possible alias of {p['alias_of_period_d']:.4g} d)" if p["possible_alias"] else ""
    print(f"  P = {p['period_d']:10.4f} d   power {p['power']:.3f}   FAP {p['fap']:.2g}{alias}")

# 3. Planet search and MAP orbits; the transit times of planet b enter the fit.
fit = apsides.fit(project, search=True)
print(f"\nsearch: {fit['search_message']}")
print(f"{'':3}{'P (d)':>12} {'K (m/s)':>8} {'e':>6} {'m sin i (MJ)':>13} {'a (au)':>7}")
for p in fit["planets"]:
    print(f"{p['label']:3}{p['period_d']['value']:12.6f} {p['K_ms']['value']:8.2f} {p['ecc']['value']:6.3f} "
          f"{p['msini_mjup']['value']:13.4f} {p['a_au']['value']:7.4f}")

# 4. The posterior as a Python function: a slice through planet c's period at the MAP.
model = apsides.Model(project, planets=fit["n_planets"])
theta = np.array(fit["theta"])
i = model.names.index("c.period_d")
grid = np.tile(theta, (41, 1))
grid[:, i] += np.linspace(-0.5, 0.5, 41)
lnp = model(grid)  # one call, 41 posterior values
print(f"\nln posterior along c.period_d: peak at {grid[np.argmax(lnp), i]:.4f} d "
      f"(MAP {theta[i]:.4f} d); 0.5 d away it is {lnp.max() - lnp[0]:.0f} nats lower")

# 5. Sample the posterior into an HDF5 file and read the chains back as numpy arrays.
run_path = WORK / "run.h5"
run = apsides.sample(project, str(run_path), planets=fit["n_planets"], max_steps=None if FULL else 1500, quiet=True)
s = run["sampler"]
print(f"\nsampler: {s['steps']} steps x {s['walkers']} walkers, {s['termination']}; R-hat max {s['rhat_max']:.3f}")
with apsides.Results.open(str(run_path)) as r:
    kept = r.samples()  # stored steps after the burn-in, (draws x parameters)
    print(f"chains {r.chains.shape} (stored rows, every {r.stride}th step, x walkers x parameters); "
          f"{len(kept)} kept samples")
    summary = {row["name"]: row for row in r.summary()["derived"]}
    for label in ("b", "c"):
        m = summary[f"{label}.msini_mjup"]
        print(f"  {label}: m sin i = {m['median']:.4f} +{m['plus']:.4f} -{m['minus']:.4f} MJ (stellar mass error included)")

if FULL:
    cmp = apsides.compare(project, max_planets=3, min_planets=1)
    for row in cmp["comparison"]:
        print(f"  {row['n_planets']} planets: ln Z = {row['ln_evidence']:.1f} +- {row['ln_evidence_err']:.1f}")
    print(f"selected: {cmp['selected_n_planets']} planets ({cmp['selection_rule']})")

# 6. Check against the truth the demo was simulated with.
truth = json.loads((DEMO / "truth.json").read_text())
fails = []
if fit["selected_n_planets"] != len(truth["planets"]):
    fails.append(f"search selected {fit['selected_n_planets']} planets, truth {len(truth['planets'])}")
else:
    # About 3 (P) and 4 (K) posterior widths of README.md's demo table (b: 2e-6 d, 0.23 m/s;
    # c: 0.11 d, 0.25 m/s); b's period is loose next to its width, which the transits set.
    tol_P = {"b": 1e-4, "c": 0.35}
    for p, tp in zip(fit["planets"], truth["planets"]):
        if abs(p["period_d"]["value"] - tp["period_d"]) > tol_P[p["label"]]:
            fails.append(f"{p['label']}: P = {p['period_d']['value']:.5f}, truth {tp['period_d']}")
        if abs(p["K_ms"]["value"] - tp["K_ms"]) > 1.0:
            fails.append(f"{p['label']}: K = {p['K_ms']['value']:.2f}, truth {tp['K_ms']}")
if abs(scan.peaks[0]["period_d"] - truth["planets"][1]["period_d"]) > 2.0:
    fails.append(f"strongest peak at {scan.peaks[0]['period_d']:.2f} d, not planet c's period")
if not abs(grid[np.argmax(lnp), i] - theta[i]) <= 0.025:
    fails.append("the posterior slice does not peak at the MAP period")
if fails:
    print("FAILED: " + "; ".join(fails))
    sys.exit(1)
print("\nexample 06_python: OK")
