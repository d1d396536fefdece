"""The module's periodogram against astropy (LombScargle, Baluev FAP) and numpy (window)."""
import numpy as np
import pytest
from astropy.timeseries import LombScargle
from astropy.timeseries.periodograms.lombscargle import _statistics as ls_stats

import apsides


def simulated(n=90, seed=3):
    rng = np.random.default_rng(seed)
    t = 2459000.0 + np.sort(rng.uniform(0.0, 400.0, n))
    dy = rng.uniform(1.0, 3.0, n)
    y = 12.0 * np.sin(2 * np.pi * t / 17.3 + 0.4) + 4.0 + dy * rng.normal(size=n)
    return t, y, dy


def test_power_matches_astropy_to_1e8():
    t, y, dy = simulated()
    p = apsides.periodogram(t, y, dy, min_period=1.5, method="exact")
    assert p.normalization == "standard" and p.method == "exact"
    assert p.frequency.shape == p.power.shape == p.window.shape
    assert p.grid["n_frequencies"] == len(p.frequency)
    # Generalised LS with a floating mean in astropy's standard normalisation is the same
    # quantity (CHECKS.md section 4; Zechmeister & Kuerster 2009).
    ref = LombScargle(t, y, dy, fit_mean=True, center_data=True, normalization="standard").power(
        p.frequency, method="cython")
    assert np.max(np.abs(p.power - ref)) <= 1e-8
    # The strongest peak is the injected 17.3 d signal.
    assert p.peaks[0]["period_d"] == pytest.approx(17.3, rel=0.01)
    # Peaks are refined between grid points: their power is astropy's at their frequency.
    f0 = p.peaks[0]["frequency_per_d"]
    assert p.peaks[0]["power"] >= np.max(p.power) - 1e-12
    assert p.peaks[0]["power"] == pytest.approx(LombScargle(t, y, dy).power(np.array([f0]), method="cython")[0], abs=1e-8)


def test_fast_method_and_normalisations_follow_astropy():
    t, y, dy = simulated(n=300, seed=11)
    fast = apsides.periodogram(t, y, dy, method="fast", oversample=5)
    ref = LombScargle(t, y, dy, normalization="standard").power(fast.frequency, method="cython")
    assert np.max(np.abs(fast.power - ref)) <= 1e-5  # the fast method's stated bound
    for norm in ("model", "log"):
        p = apsides.periodogram(t, y, dy, normalization=norm, max_period=100.0, min_period=2.0)
        r = LombScargle(t, y, dy, normalization=norm).power(p.frequency, method="cython")
        np.testing.assert_allclose(p.power, r, rtol=1e-7, atol=1e-9)


def test_false_alarm_probabilities_are_baluev_at_the_grid_top():
    t, y, dy = simulated()
    p = apsides.periodogram(t, y, dy, min_period=1.5)
    fmax = p.grid["max_frequency_per_d"]
    for peak in p.peaks[:5]:
        # astropy's Baluev (2008) formula with the same f_max (its public call would round
        # f_max onto its own grid), given times from the first one: its weighted variance of
        # t, sum w t^2 - (sum w t)^2, loses ~1e-7 to cancellation on full BJD values.
        ref = ls_stats.false_alarm_probability(peak["power_standard"], fmax, t - t[0], y, dy,
                                               normalization="standard", method="baluev")
        assert peak["fap"] == pytest.approx(ref, rel=1e-8, abs=1e-300)


def test_window_function_is_the_weighted_spectral_window():
    t, y, dy = simulated()
    p = apsides.periodogram(t, y, dy, min_period=1.5)
    w = dy ** -2 / np.sum(dy ** -2)
    idx = np.linspace(0, len(p.frequency) - 1, 40).astype(int)
    f = p.frequency[idx]
    ref = np.abs(np.exp(2j * np.pi * np.outer(f, t - t.mean())) @ w) ** 2  # numpy, direct sums
    assert np.max(np.abs(p.window[idx] - ref)) <= 1e-10


def test_project_periodogram_equals_the_arrays_one(demo_project_path):
    project = apsides.Project.from_toml(demo_project_path)
    v = project.velocities
    a = apsides.periodogram(project, max_period=300.0)
    b = apsides.periodogram(v["time_bjd"], v["velocity_ms"], v["uncertainty_ms"], v["instrument"], max_period=300.0)
    assert a.data["instruments"] == b.data["instruments"] == project.instruments
    assert a.data["n_points"] == b.data["n_points"] == 150
    assert a.data["baseline_d"] == pytest.approx(b.data["baseline_d"], abs=1e-9)
    # Times come back as float64 BJD (spacing 4.7e-10 d), so the powers agree to ~1e-8.
    np.testing.assert_allclose(a.power, b.power, rtol=0, atol=1e-7)
    assert a.peaks[0]["period_d"] == pytest.approx(118.6, rel=0.01)  # planet c of the demo (truth.json)


def test_scan_document_equals_the_command_line(demo_project_path, cli, tmp_path):
    out = tmp_path / "scan.json"
    code, _, err = cli("scan", demo_project_path, "--peaks", "6", "--json", out, "--quiet")
    assert code == 0, err
    p = apsides.periodogram(apsides.Project.from_toml(demo_project_path), peaks=6)
    import json
    assert p.document == json.loads(out.read_text())
