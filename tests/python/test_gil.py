"""Long calls release the GIL: another Python thread keeps running while they compute."""
import threading
import time

import numpy as np

import apsides


def test_periodogram_releases_the_gil():
    rng = np.random.default_rng(3)
    t = 2459000.0 + np.sort(rng.uniform(0, 2000, 3000))
    y = 5 * np.sin(2 * np.pi * t / 37.0) + rng.normal(0, 1, t.size)
    dy = np.ones_like(t)
    span = {}

    def work():
        span["start"] = time.perf_counter()
        apsides.periodogram(t, y, dy, method="exact", oversample=20, threads=1)
        span["end"] = time.perf_counter()

    th = threading.Thread(target=work)
    stamps = [time.perf_counter()]
    th.start()
    while th.is_alive():
        stamps.append(time.perf_counter())
    th.join()
    duration = span["end"] - span["start"]
    inside = [s for s in stamps if span["start"] <= s <= span["end"]]
    assert duration > 0.05, duration  # long enough for the check to mean something
    # With the GIL held for the whole call this thread would stop for `duration`; released,
    # it keeps stamping (gaps are scheduling noise, far below the call's length).
    assert len(inside) > 100
    assert np.max(np.diff(stamps)) < 0.5 * duration
