"""Side-by-side: apsides' periodogram engines against astropy's LombScargle (fit_mean=True,
center_data=True, standard normalisation) on the same uneven series, one run.

Our times come from one run of build-bench/tests/benchmarks/periodogram_benchmark (made by
scripts/bench, or $APSIDES_BENCH_DIR); astropy's from timeit, best of 3. Both wall-clock
and, for ours, the per-term cost are printed with the ratios. Note the machine load
printed by scripts/bench: on a shared machine wall times mean little.
Run with /usr/bin/python3 (Debian's numpy and astropy).
"""
import json
import os
import pathlib
import subprocess
import tempfile
import timeit

import numpy as np
from astropy.timeseries import LombScargle

ROOT = pathlib.Path(__file__).resolve().parent.parent
BUILD = pathlib.Path(os.environ.get("APSIDES_BENCH_DIR", ROOT / "build-bench"))
BINARY = BUILD / "tests" / "benchmarks" / "periodogram_benchmark"


def make(n):
    rng = np.random.default_rng(12345)
    t = 2459000.0 + 1000.0 * rng.random(n)
    dy = 1.0 + rng.random(n)
    y = 3.0 * np.sin(2 * np.pi * t / 13.7) + rng.normal(size=n)
    return t, y, dy


def astropy_time(n, nf, method):
    t, y, dy = make(n)
    f = 1.0 / 3000.0 + np.arange(nf) / (10 * 1000.0)
    ls = LombScargle(t, y, dy, fit_mean=True, center_data=True, normalization="standard")
    reps = 1 if method == "cython" else 3
    return min(timeit.repeat(lambda: ls.power(f, method=method), number=1, repeat=reps))


def ours():
    with tempfile.TemporaryDirectory() as d:
        out = pathlib.Path(d) / "b.json"
        subprocess.run([str(BINARY), "--benchmark_min_time=0.2", f"--benchmark_out={out}",
                        "--benchmark_out_format=json"], check=True, stdout=subprocess.DEVNULL)
        return {b["name"]: b for b in json.loads(out.read_text())["benchmarks"]}


def main():
    if not BINARY.exists():
        print(f"{BINARY} not built; run scripts/bench first")
        return
    r = ours()
    sec = lambda name: r[name]["real_time"] * 1e-3  # benchmarks report milliseconds
    ex1 = sec("BM_ExactOneThread/1000/100000/real_time")
    ex2 = sec("BM_ExactTwoThreads/1000/100000/real_time")
    fa1 = sec("BM_Fast/1000/100000/real_time")
    fa5 = sec("BM_Fast/5000/100000/real_time")
    fa50 = sec("BM_Fast/50000/1000000/iterations:2/real_time")
    a_exact = astropy_time(1000, 100000, "cython")
    a_fast1 = astropy_time(1000, 100000, "fast")
    a_fast5 = astropy_time(5000, 100000, "fast")
    print(f"N = 1000, 1e5 frequencies: apsides exact 1 thread {ex1:.3f} s ({ex1 / 1e8 * 1e9:.2f} ns/term), "
          f"2 threads {ex2:.3f} s (speed-up {ex1 / ex2:.2f}); astropy exact {a_exact:.2f} s "
          f"({a_exact / ex2:.1f}x ours); astropy fast {a_fast1:.3f} s (ours exact / astropy fast = {ex2 / a_fast1:.2f})")
    print(f"N = 1000, fast: apsides {fa1:.4f} s vs astropy {a_fast1:.4f} s ({a_fast1 / fa1:.2f}x)")
    print(f"N = 5000, fast: apsides {fa5:.4f} s vs astropy {a_fast5:.4f} s ({a_fast5 / fa5:.2f}x)")
    print(f"N = 50000, 1e6 frequencies, fast: apsides {fa50:.2f} s")


if __name__ == "__main__":
    main()
