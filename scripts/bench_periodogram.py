"""Side-by-side: apsides' periodogram engines against astropy's LombScargle (fit_mean=True,
center_data=True, standard normalisation) on the same uneven series, one run.

Our times come from build-bench/tests/benchmarks/periodogram_benchmark (made by
scripts/bench, or $APSIDES_BENCH_DIR), the exact engine once per SIMD target
($APSIDES_BENCH_TARGETS, else the best; see _benchlib.py); astropy's from timeit, best of
3, each in its own python process. astropy's approximate method allocates large temporaries on every call,
which glibc's default allocator returns to the system and faults back in; it is timed
twice: with the default allocator and "at its best" (glibc told to keep freed memory:
MALLOC_MMAP_THRESHOLD_, MALLOC_TRIM_THRESHOLD_, MALLOC_TOP_PAD_), and our ratio is taken
against the best. Peak RSS of the N = 50 000, 1e6-frequency run is measured on its own
process. Note the machine load printed by scripts/bench: on a shared machine wall times
mean little. Run with /usr/bin/python3 (Debian's numpy and astropy).
"""
import os
import subprocess
import sys
import timeit

import numpy as np

import _benchlib

BINARY = _benchlib.BENCH / "periodogram_benchmark"


def make(n):
    rng = np.random.default_rng(12345)
    t = 2459000.0 + 1000.0 * rng.random(n)
    dy = 1.0 + rng.random(n)
    y = 3.0 * np.sin(2 * np.pi * t / 13.7) + rng.normal(size=n)
    return t, y, dy


def astropy_time_here(n, nf, method):
    from astropy.timeseries import LombScargle
    t, y, dy = make(n)
    f = 1.0 / 3000.0 + np.arange(nf) / (10 * 1000.0)
    ls = LombScargle(t, y, dy, fit_mean=True, center_data=True, normalization="standard")
    reps = 1 if method == "cython" else 5
    return min(timeit.repeat(lambda: ls.power(f, method=method), number=1, repeat=reps))


KEEP_MEMORY = {"MALLOC_MMAP_THRESHOLD_": "4294967296", "MALLOC_TRIM_THRESHOLD_": "4294967296",
               "MALLOC_TOP_PAD_": "268435456"}


def astropy_time(n, nf, method, keep_memory=False):
    env = dict(os.environ, **KEEP_MEMORY) if keep_memory else dict(os.environ)
    out = subprocess.run([sys.executable, __file__, "--astropy", str(n), str(nf), method], env=env,
                         check=True, capture_output=True, text=True).stdout
    return float(out.strip())


def peak_rss_mb(filter_regex):
    """Peak resident memory (MB) of one benchmark process running only `filter_regex`."""
    proc = subprocess.Popen([str(BINARY), f"--benchmark_filter={filter_regex}"], stdout=subprocess.DEVNULL)
    _, _, usage = os.wait4(proc.pid, 0)
    return usage.ru_maxrss / 1024.0


def ours(target, exact_only=False):
    args = ["--benchmark_min_time=0.2"] + (["--benchmark_filter=Exact"] if exact_only else [])
    return _benchlib.results("periodogram_benchmark", target, args)


def main():
    if not BINARY.exists():
        print(f"{BINARY} not built; run scripts/bench first")
        return
    targets = _benchlib.targets("periodogram_benchmark")
    runs = {t: ours(t, exact_only=(i > 0)) for i, t in enumerate(targets)}
    r = runs[targets[0]]
    wall = lambda name, rr=r: rr[name]["real_time"] * 1e-3  # benchmarks report milliseconds
    cpu = lambda name, rr=r: rr[name]["cpu_time"] * 1e-3
    a_exact = astropy_time(1000, 100000, "cython")
    a_fast1 = astropy_time(1000, 100000, "fast", keep_memory=True)
    a_fast5 = astropy_time(5000, 100000, "fast", keep_memory=True)
    a_fast5_default = astropy_time(5000, 100000, "fast")
    rss50 = peak_rss_mb("BM_Fast/50000/")
    print(f"N = 1000, 1e5 frequencies, exact engine; astropy exact {a_exact:.2f} s, astropy fast at its best "
          f"{a_fast1:.3f} s")
    for t in targets:
        ex1 = cpu("BM_ExactOneThread/1000/100000/real_time", runs[t])
        ex2 = wall("BM_ExactTwoThreads/1000/100000/real_time", runs[t])
        print(f"  {t:>7}: 1 thread {ex1:.3f} s CPU ({ex1 / 1e8 * 1e9:.3f} ns/term), 2 threads {ex2:.3f} s wall; "
              f"astropy exact / ours 2 threads = {a_exact / ex2:.0f}x; ours 1 thread / astropy fast = {ex1 / a_fast1:.2f}")
    fa1 = wall("BM_Fast/1000/100000/real_time")
    fa5 = wall("BM_Fast/5000/100000/real_time")
    fa50 = wall("BM_Fast/50000/1000000/iterations:2/real_time")
    print(f"N = 1000, fast: apsides {fa1 * 1e3:.1f} ms vs astropy at its best {a_fast1 * 1e3:.1f} ms ({a_fast1 / fa1:.1f}x)")
    print(f"N = 5000, fast: apsides {fa5 * 1e3:.1f} ms vs astropy at its best {a_fast5 * 1e3:.1f} ms "
          f"({a_fast5 / fa5:.1f}x; target >= 3x), default allocator {a_fast5_default * 1e3:.0f} ms "
          f"({a_fast5_default / fa5:.0f}x)")
    print(f"N = 50000, 1e6 frequencies, fast: apsides {fa50:.2f} s per call (mean of 2, the first one "
          f"plans and touches fresh memory), peak RSS {rss50:.0f} MB")
    _benchlib.save_reference("periodogram", {"astropy_exact_s": a_exact, "astropy_fast_best_s": a_fast1,
                                             "astropy_fast_best_5000_s": a_fast5, "apsides_fast_5000_s": fa5})

if __name__ == "__main__":
    if len(sys.argv) == 5 and sys.argv[1] == "--astropy":
        print(astropy_time_here(int(sys.argv[2]), int(sys.argv[3]), sys.argv[4]))
    else:
        main()
