"""Side-by-side: the same Gaussian log-likelihood (2 planets, 2 instruments with jitter)
written in plain numpy, against apsides' kernel, at N = 200 and 1000 points.

The data and parameters are the deterministic formula of
tests/benchmarks/likelihood_benchmark.cpp, so both compute the same number; this script
checks that (to 1e-9 relative) before it reports the times. Our times come from the
benchmark binary (build-bench/ or $APSIDES_BENCH_DIR, made by scripts/bench), one column
per SIMD target ($APSIDES_BENCH_TARGETS, else the best; see _benchlib.py); numpy's from
timeit, best of several repeats. Run with /usr/bin/python3 (Debian's numpy).
"""
import sys
import timeit

import numpy as np

import _benchlib


def make_data(n):
    i = np.arange(n, dtype=float)
    x = i * 0.6180339887498949
    t = 1200.0 * (x - np.floor(x)) - 600.0
    y = 20.0 * np.cos(0.1 * i) + 5.0 * np.sin(1.7 * i)
    dy = 1.5 + 0.5 * np.sin(3.0 * i)
    inst = np.arange(n) % 2
    return t, y, dy, inst


# (P days, K m/s, e, omega_star rad, t_conj days), then (offset, jitter) per instrument.
PLANETS = [(4.23, 55.0, 0.10, 1.2, 1.5), (310.0, 30.0, 0.45, -2.0, 40.0)]
INSTRUMENTS = [(3.0, 2.5), (-4.0, 1.2)]


def to_theta():
    """Parameters in the model's sampling coordinates, as the C++ benchmark builds them."""
    th = []
    for P, K, e, w, tc in PLANETS:
        th += [P, K, np.sqrt(e) * np.cos(w), np.sqrt(e) * np.sin(w), tc]
    for off, jit in INSTRUMENTS:
        th += [off, jit]
    return np.array(th)


def kepler(M, e):
    """Vectorised Newton from E0 = M + e sin M, to 1e-12 rad."""
    E = M + e * np.sin(M)
    for _ in range(100):
        dE = (E - e * np.sin(E) - M) / (1.0 - e * np.cos(E))
        E -= dE
        if np.max(np.abs(dE)) < 1e-12:
            break
    return E


def log_likelihood(theta, t, y, dy, inst):
    model = np.zeros_like(t)
    for j in range(2):
        P, K, h, k, tc = theta[5 * j: 5 * j + 5]
        e = h * h + k * k
        w = np.arctan2(k, h)
        # Mean anomaly at conjunction (true anomaly pi/2 - omega).
        nu_c = 0.5 * np.pi - w
        E_c = 2.0 * np.arctan2(np.sqrt(1 - e) * np.sin(nu_c / 2), np.sqrt(1 + e) * np.cos(nu_c / 2))
        M = 2.0 * np.pi * (t - tc) / P + (E_c - e * np.sin(E_c))
        E = kepler(np.mod(M, 2.0 * np.pi), e)
        nu = 2.0 * np.arctan2(np.sqrt(1 + e) * np.sin(E / 2), np.sqrt(1 - e) * np.cos(E / 2))
        model += K * (np.cos(nu + w) + e * np.cos(w))
    offsets = theta[10::2][inst]
    jitters = theta[11::2][inst]
    var = dy * dy + jitters * jitters
    r = y - offsets - model
    return -0.5 * np.sum(r * r / var + np.log(2.0 * np.pi * var))


def ours(target):
    res = {}
    for name, b in _benchlib.results("likelihood_benchmark", target,
                                     ["--benchmark_filter=^BM_LogLikelihood/", "--benchmark_min_time=0.5"]).items():
        if name.startswith("BM_LogLikelihood/"):
            res[int(name.split("/")[1])] = (b["per_call"] * 1e6, b["lnL"])
    return res


def main():
    theta = to_theta()
    targets = _benchlib.targets("likelihood_benchmark")
    apsides = {t: ours(t) for t in targets}
    print(f"{'N':>6} {'numpy us':>10}" + "".join(f" {'apsides ' + t + ' us':>18} {'ratio':>6}" for t in targets)
          + "   lnL (numpy / apsides)")
    numpy_us = {}
    for n in (200, 1000):
        t, y, dy, inst = make_data(n)
        lnl = log_likelihood(theta, t, y, dy, inst)
        timer = timeit.Timer(lambda: log_likelihood(theta, t, y, dy, inst))
        loops, _ = timer.autorange()
        numpy_us[n] = min(timer.repeat(repeat=5, number=loops)) / loops * 1e6
        row = f"{n:>6} {numpy_us[n]:>10.1f}"
        same = True
        for tg in targets:
            our_us, our_lnl = apsides[tg][n]
            same = same and abs(lnl - our_lnl) <= 1e-9 * abs(lnl)
            row += f" {our_us:>18.2f} {numpy_us[n] / our_us:>5.0f}x"
        print(row + f"   {lnl:.10g} / {apsides[targets[0]][n][1]:.10g}{'' if same else '  MISMATCH'}")
        if not same:
            sys.exit("numpy and apsides disagree on lnL: the comparison is not like for like")
    _benchlib.save_reference("likelihood", {"numpy_us": numpy_us})


if __name__ == "__main__":
    main()
