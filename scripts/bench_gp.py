"""Side-by-side: the GP log-likelihood of tests/benchmarks/gp_benchmark.cpp (rotation
kernel + 2 Keplerian planets, semiseparable O(N J^2)) against numpy's dense Cholesky
(scipy.linalg.cho_factor, O(N^3)) of the same covariance matrix, at N = 1000.

The data, planets, offsets and jitters are the deterministic formula of
scripts/bench_likelihood.py, sorted by time; the kernel is the rotation kernel's
double-SHO mapping written out here in numpy (gp_kernels.h states it). This script first
checks that numpy's ln L equals the benchmark's "lnL" counter to 1e-8 relative, then
reports numpy's time for the dense Cholesky + solve + log-determinant alone (matrix built
outside the timer) next to ours for the whole call. Run with /usr/bin/python3.
"""
import json
import os
import pathlib
import subprocess
import sys
import time
import timeit

import numpy as np
from scipy.linalg import cho_factor, cho_solve

ROOT = pathlib.Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "scripts"))
import bench_likelihood as bl  # noqa: E402  (same data formula and planets)

BUILD = pathlib.Path(os.environ.get("APSIDES_BENCH_DIR", ROOT / "build-bench"))
BINARY = BUILD / "tests" / "benchmarks" / "gp_benchmark"
# rotation_period_d, amplitude_ms, quality, quality_difference, mix (gp_benchmark.cpp)
ROTATION = (27.0, 5.0, 1.2, 2.0, 0.6)


def sho(tau, S0, w0, Q):
    """Foreman-Mackey et al. 2017 Eq. (23), Q > 1/2."""
    x = w0 * np.abs(tau)
    eta = np.sqrt(1 - 1 / (4 * Q * Q))
    return S0 * w0 * Q * np.exp(-x / (2 * Q)) * (np.cos(eta * x) + np.sin(eta * x) / (2 * eta * Q))


def rotation(tau):
    P, sigma, q0, dq, f = ROTATION
    Q1, Q2 = 0.5 + q0 + dq, 0.5 + q0
    w1 = 4 * np.pi * Q1 / (P * np.sqrt(4 * Q1 * Q1 - 1))
    w2 = 8 * np.pi * Q2 / (P * np.sqrt(4 * Q2 * Q2 - 1))
    s2 = sigma * sigma
    return sho(tau, s2 / ((1 + f) * w1 * Q1), w1, Q1) + sho(tau, f * s2 / ((1 + f) * w2 * Q2), w2, Q2)


def residuals_and_variance(n):
    t, y, dy, inst = bl.make_data(n)
    order = np.argsort(t, kind="stable")
    t, y, dy, inst = t[order], y[order], dy[order], inst[order]
    theta = bl.to_theta()
    model = np.zeros_like(t)
    for j in range(2):
        P, K, h, k, tc = theta[5 * j: 5 * j + 5]
        e, w = h * h + k * k, np.arctan2(k, h)
        nu_c = 0.5 * np.pi - w
        E_c = 2.0 * np.arctan2(np.sqrt(1 - e) * np.sin(nu_c / 2), np.sqrt(1 + e) * np.cos(nu_c / 2))
        M = 2.0 * np.pi * (t - tc) / P + (E_c - e * np.sin(E_c))
        E = bl.kepler(np.mod(M, 2.0 * np.pi), e)
        nu = 2.0 * np.arctan2(np.sqrt(1 + e) * np.sin(E / 2), np.sqrt(1 - e) * np.cos(E / 2))
        model += K * (np.cos(nu + w) + e * np.cos(w))
    r = y - theta[10::2][inst] - model
    var = dy * dy + theta[11::2][inst] ** 2
    return t, r, var


def dense_lnlike(K, r):
    c = cho_factor(K, lower=True, check_finite=False)
    return -0.5 * r @ cho_solve(c, r, check_finite=False) - np.sum(np.log(np.diag(c[0]))) \
        - 0.5 * len(r) * np.log(2 * np.pi)


def ours():
    if not BINARY.exists():
        sys.exit(f"{BINARY} not found: run scripts/bench first (it builds the benchmarks)")
    out = subprocess.run([str(BINARY), "--benchmark_filter=^BM_GpRotationTwoPlanets/",
                          "--benchmark_format=json", "--benchmark_min_time=0.5"],
                         check=True, capture_output=True, text=True).stdout
    return {int(b["name"].split("/")[1]): (b["per_call"] * 1e6, b["lnL"])
            for b in json.loads(out)["benchmarks"]}


def main():
    apsides = ours()
    lapack = getattr(np.__config__, "lapack_opt_info", {}).get("libraries", "?")
    print(f"load {' '.join(open('/proc/loadavg').read().split()[:3])}; CPU times; numpy's LAPACK: {lapack}")
    print(f"{'N':>6} {'numpy dense Cholesky us':>24} {'apsides GP+planets us':>22} {'ratio':>7}   lnL (numpy / apsides)")
    for n in (1000,):
        t, r, var = residuals_and_variance(n)
        K = rotation(t[:, None] - t[None, :]) + np.diag(var)
        lnl = dense_lnlike(K, r)
        timer = timeit.Timer(lambda: dense_lnlike(K, r), timer=time.process_time)  # CPU time, as ours
        loops, _ = timer.autorange()
        numpy_us = min(timer.repeat(repeat=5, number=loops)) / loops * 1e6
        our_us, our_lnl = apsides[n]
        same = abs(lnl - our_lnl) <= 1e-8 * abs(lnl)
        print(f"{n:>6} {numpy_us:>24.0f} {our_us:>22.1f} {numpy_us / our_us:>6.0f}x   "
              f"{lnl:.10g} / {our_lnl:.10g}{'' if same else '  MISMATCH'}")
        if not same:
            sys.exit("numpy and apsides disagree on lnL: the comparison is not like for like")


if __name__ == "__main__":
    main()
