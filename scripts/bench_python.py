"""Overhead of the Python module: one call of the 2-planet, 2-instrument log-likelihood
(N = 200 and 1000) through apsides.Model, against the C++ benchmark of the same function
(tests/benchmarks/likelihood_benchmark.cpp, BM_LogLikelihood/N).

The data and parameters are the deterministic formula of that benchmark (taken from
scripts/bench_likelihood.py), given to apsides.Project as arrays; the script checks that the
module's ln L equals numpy's and the benchmark's before it reports times. Python times: timeit,
best of several repeats, of `model.log_likelihood(theta)` (theta a contiguous float64 array,
read without a copy) and of `model(theta)` (ln prior + ln L). The C++ time comes from one run
of the benchmark binary in build-bench/ (or $APSIDES_BENCH_DIR; scripts/bench builds it); the
difference is the cost of crossing from Python. Timings are noisy on a loaded machine: the
load is printed. Run as `scripts/python scripts/bench_python.py`.
"""
import importlib.util
import pathlib
import sys
import timeit

import numpy as np

import apsides

HERE = pathlib.Path(__file__).resolve().parent
spec = importlib.util.spec_from_file_location("bench_likelihood", HERE / "bench_likelihood.py")
bl = importlib.util.module_from_spec(spec)
spec.loader.exec_module(bl)


def best_us(fn, repeat=7):
    timer = timeit.Timer(fn)
    loops, _ = timer.autorange()
    return min(timer.repeat(repeat=repeat, number=loops)) / loops * 1e6


def main():
    load = open("/proc/loadavg").read().split()[:3]
    print(f"apsides {apsides.__version__}: Python call overhead, load {' '.join(load)}")
    program = bl._benchlib.BENCH / "likelihood_benchmark"
    # The best SIMD target of this machine: the one the module's run-time dispatch picks too.
    cpp = bl.ours(bl._benchlib.targets("likelihood_benchmark")[0]) if program.exists() else {}
    if not cpp:
        print(f"  ({program} not found: run scripts/bench to build it; C++ column left empty)")
    print(f"{'N':>6} {'C++ us':>8} {'Model.log_likelihood us':>24} {'Model() us':>11} {'overhead us':>12}   lnL (module / numpy / C++)")
    for n in (200, 1000):
        t, y, dy, inst = bl.make_data(n)
        names = np.array(["north", "south"])[inst]
        # Times as the benchmark has them (days after its epoch): the project keeps them exact.
        project = apsides.Project((t, y, dy, names))
        model = apsides.Model(project, planets=2)
        theta = bl.to_theta()
        shift = project.velocities["reference_epoch_bjd"]  # the project's epoch, in the benchmark's days
        for j in range(2):
            theta[5 * j + 4] -= shift
        assert model.names[:10] == ["b.period_d", "b.K_ms", "b.secosw", "b.sesinw", "b.t_conj_d",
                                    "c.period_d", "c.K_ms", "c.secosw", "c.sesinw", "c.t_conj_d"], model.names
        lnl = model.log_likelihood(theta)
        ref = bl.log_likelihood(bl.to_theta(), t, y, dy, inst)
        if abs(lnl - ref) > 1e-9 * abs(ref):
            sys.exit(f"N = {n}: module ln L {lnl!r} differs from numpy's {ref!r}: not like for like")
        cpp_us, cpp_lnl = cpp.get(n, (float("nan"), float("nan")))
        py_us = best_us(lambda: model.log_likelihood(theta))
        post_us = best_us(lambda: model(theta))
        print(f"{n:>6} {cpp_us:>8.2f} {py_us:>24.2f} {post_us:>11.2f} {py_us - cpp_us:>12.2f}   "
              f"{lnl:.10g} / {ref:.10g} / {cpp_lnl:.10g}")


if __name__ == "__main__":
    main()
