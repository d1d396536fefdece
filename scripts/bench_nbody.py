"""Side-by-side: apsides' N-body evaluation (Wisdom-Holman map, default corrector) against
scipy's DOP853 (rtol 1e-12, atol 1e-15, event detection of the same conjunctions, dense
output for the velocities) on the same work, one run each:

  * two planets (10 and 20.2 d, 3e-5 stellar masses), 1500 d, 100 star velocities and
    every transit of both planets;
  * seven planets (TRAPPIST-1 masses and periods), 1500 d.

The work (initial barycentric state, times, span) comes from `nbody_benchmark --dump=...`,
so both integrate the same initial conditions; our time is the benchmark's CPU time per
evaluation (build-bench/ or $APSIDES_BENCH_DIR, made by scripts/bench); scipy's is the
process CPU time of one solve_ivp call (best of 3 for two planets, one run for seven).
Also printed: the worst transit-time difference between the two (seconds), a check that
the comparison is of the same thing. Note the machine load printed by scripts/bench.
Run with /usr/bin/python3 (Debian's numpy and scipy).
"""
import json
import os
import pathlib
import subprocess
import sys
import time

import numpy as np
from scipy.integrate import solve_ivp

ROOT = pathlib.Path(__file__).resolve().parent.parent
BUILD = pathlib.Path(os.environ.get("APSIDES_BENCH_DIR", ROOT / "build-bench"))
BINARY = BUILD / "tests" / "benchmarks" / "nbody_benchmark"


def work(name):
    out = subprocess.run([str(BINARY), f"--dump={name}"], check=True, capture_output=True, text=True).stdout
    return json.loads(out)


def dop853(w):
    m = np.array(w["mass"])
    gm = w["G"] * m
    nb = len(m)
    iu = np.triu_indices(nb, 1)

    def f(t, y):
        x = y[: 3 * nb].reshape(nb, 3)
        d = x[None, :, :] - x[:, None, :]  # d[i, j] = x_j - x_i
        r2 = np.einsum("ijk,ijk->ij", d, d)
        np.fill_diagonal(r2, 1.0)
        inv3 = r2 ** -1.5
        np.fill_diagonal(inv3, 0.0)
        a = np.einsum("ij,ijk->ik", inv3 * gm[None, :], d)
        return np.concatenate([y[3 * nb:], a.ravel()])

    def event(k):
        def g(t, y):
            x = y[: 3 * nb].reshape(nb, 3)
            v = y[3 * nb:].reshape(nb, 3)
            r = x[k] - x[0]
            u = v[k] - v[0]
            return r[0] * u[0] + r[1] * u[1]
        return g

    events = [event(k) for k in range(1, nb)]
    y0 = np.array(w["y0"])
    t0 = w["t0"]
    rv = np.array(w["rv_times"])
    transits = {k: [] for k in range(1, nb)}
    start = time.process_time()
    for t1 in (w["t_lo"], w["t_hi"]):
        sol = solve_ivp(f, (t0, t1), y0, method="DOP853", rtol=1e-12, atol=1e-15, events=events,
                        dense_output=len(rv) > 0)
        for k in range(1, nb):
            for t, y in zip(sol.t_events[k - 1], sol.y_events[k - 1]):
                x = y[: 3 * nb].reshape(nb, 3)
                v = y[3 * nb:].reshape(nb, 3)
                a = f(t, y)[3 * nb:].reshape(nb, 3)
                r, u, acc = x[k] - x[0], v[k] - v[0], a[k] - a[0]
                if r[2] < 0 and u[0] ** 2 + u[1] ** 2 + r[0] * acc[0] + r[1] * acc[1] > 0:
                    transits[k].append(t)
        if len(rv):
            sel = (rv - t0) * (t1 - t0) >= 0
            if sel.any():
                sol.sol(rv[sel])
    elapsed = time.process_time() - start
    return elapsed, {k: sorted(v) for k, v in transits.items()}


def ours(filter_regex):
    out = subprocess.run([str(BINARY), f"--benchmark_filter={filter_regex}", "--benchmark_format=json",
                          "--benchmark_min_time=0.5"], check=True, capture_output=True, text=True).stdout
    b = json.loads(out)["benchmarks"][0]
    return b["per_eval"]


def main():
    if not BINARY.exists():
        sys.exit(f"{BINARY} not found: run scripts/bench first (or set APSIDES_BENCH_DIR)")
    print(f"load {open('/proc/loadavg').read().split()[:3]}")
    for name, regex, reps in (("two", "BM_NbodyTwoPlanets/3$", 3), ("seven", "BM_NbodySeven/3$", 1)):
        w = work(name)
        best = None
        for _ in range(reps):
            t, tr = dop853(w)
            best = t if best is None else min(best, t)
        mine = ours(regex)
        n_tr = sum(len(v) for v in tr.values())
        worst = 0.0
        for k, times in w["ours"].items():
            ref = np.array(tr[int(k)])
            for t in times:
                worst = max(worst, float(np.min(np.abs(ref - t))))
        print(f"{name} planets, {w['t_hi'] - w['t_lo']:.0f} d, {len(w['rv_times'])} velocities, "
              f"{w['transits']} transit times requested ({n_tr} found by DOP853): "
              f"apsides {mine * 1e3:.3f} ms per evaluation, scipy DOP853 {best * 1e3:.0f} ms "
              f"({best / mine:.0f}x); worst transit-time difference {worst * 86400:.3f} s")


if __name__ == "__main__":
    main()
