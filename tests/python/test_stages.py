"""fit, sample, compare, analyze, Model and Results: the module gives the command line's
--json documents to the last digit, reads the HDF5 file as h5py does, and its likelihood is
numpy's."""
import json
import math

import h5py
import numpy as np
import pytest
from scipy.optimize import brentq

import apsides

from conftest import DEMO, read_json


def test_fit_on_the_demo_equals_the_command_lines_json(demo_project_path, cli, tmp_path):
    code, _, err = cli("fit", demo_project_path, "--json", tmp_path / "fit.json", "--quiet")
    assert code == 0, err
    expected = read_json(tmp_path / "fit.json")
    got = apsides.fit(apsides.Project.from_toml(demo_project_path))
    assert got == expected  # every number to the last digit (the same library and JSON writer)
    assert got["selected_n_planets"] == 2
    assert [p["label"] for p in got["planets"]] == ["b", "c"]
    # The star's mass error is the project's (the command line used to write 0 here).
    assert got["star"] == {"mass_msun": 0.86, "mass_err_msun": 0.03}


def demo_arrays():
    """The demo's files read by numpy (Petrel reports km/s: converted here)."""
    velocities = {}
    for name in ("Kestrel", "Tern", "Petrel"):
        table = np.genfromtxt(DEMO / f"velocities_{name}.csv", delimiter=",", names=True, dtype=None, encoding="utf-8")
        scale = 1000.0 if name == "Petrel" else 1.0
        velocities[name] = (table["time_bjd"], table["velocity"] * scale, table["uncertainty"] * scale)
    transits = np.genfromtxt(DEMO / "transits.csv", delimiter=",", names=True)
    return velocities, transits


def test_a_project_from_arrays_holds_the_files_data_and_fits_alike(demo_project_path):
    velocities, transits = demo_arrays()
    arrays = apsides.Project(velocities, transits, star_mass=0.86, star_mass_err=0.03, star_radius=0.82,
                             settings="[search]\nmax_planets = 3\n")
    files = apsides.Project.from_toml(demo_project_path)
    assert arrays.instruments == files.instruments == ["Kestrel", "Tern", "Petrel"]
    a, f = arrays.velocities, files.velocities
    np.testing.assert_array_equal(a["instrument"], f["instrument"])
    np.testing.assert_array_equal(a["velocity_ms"], f["velocity_ms"])
    np.testing.assert_allclose(a["time_bjd"], f["time_bjd"], rtol=0, atol=1e-9)  # float64 BJD vs long double
    np.testing.assert_array_equal(arrays.transits["epoch"], files.transits["epoch"])
    # The same posterior: at one theta both models agree to the times' float64 rounding.
    ff = apsides.fit(files, 2)
    theta = np.array(ff["theta"])
    theta_arrays = theta.copy()
    ma, mf = apsides.Model(arrays, 2), apsides.Model(files, 2)
    assert ma.names == mf.names
    for j, name in enumerate(ma.names):  # t_conj counts from each project's reference epoch
        if name.endswith(".t_conj_d"):
            theta_arrays[j] += mf.reference_epoch_bjd - ma.reference_epoch_bjd
    assert ma(theta_arrays) == pytest.approx(mf(theta), abs=1e-4)
    # And the fits agree within a small fraction of the posterior widths (README: P_c 0.11 d,
    # K 0.23-0.25 m/s, e 0.02): the optimiser's path differs with the last bits of the times.
    fa = apsides.fit(arrays, 2)
    for pa, pf in zip(fa["planets"], ff["planets"]):
        assert pa["period_d"]["value"] == pytest.approx(pf["period_d"]["value"], rel=1e-5)
        assert pa["K_ms"]["value"] == pytest.approx(pf["K_ms"]["value"], abs=0.02)
        assert pa["ecc"]["value"] == pytest.approx(pf["ecc"]["value"], abs=0.002)
    # Both fits stop "converged" ~0.01 nats apart (measured 0.012: BOBYQA's objective
    # tolerance is met first along the flat jitter directions).
    assert fa["ln_posterior"] == pytest.approx(ff["ln_posterior"], abs=0.05)


def test_model_log_likelihood_is_the_fits_and_numpys(demo_project_path):
    project = apsides.Project.from_toml(demo_project_path)
    f = apsides.fit(project, 2)
    model = apsides.Model(project, 2)
    assert model.names == f["parameter_names"]
    theta = np.array(f["theta"])
    assert model.log_likelihood(theta) == pytest.approx(f["ln_like"], rel=1e-12)
    assert model(theta) == pytest.approx(f["ln_posterior"], rel=1e-12)
    assert model.log_prior(theta) == pytest.approx(f["ln_prior"], rel=1e-12)
    # Rows of a 2-D array: one value each.
    both = model(np.vstack([theta, theta]))
    assert both.shape == (2,) and both[0] == model(theta)
    # The velocities' part, in numpy + scipy from the parameters (DESIGN conventions), plus the
    # transit times' Gaussian term T_n = T_conj + n P for planet b.
    v = project.velocities
    assert v["reference_epoch_bjd"] == model.reference_epoch_bjd
    t = v["time_days"]  # exact; time_bjd is rounded to float64 (4.7e-10 d)
    names = f["parameter_names"]
    par = dict(zip(names, theta))
    signal = np.zeros_like(t)
    for p in ("b", "c"):
        P, K, h, k, tc = (par[f"{p}.{x}"] for x in ("period_d", "K_ms", "secosw", "sesinw", "t_conj_d"))
        e, w = h * h + k * k, math.atan2(k, h)
        nu_c = 0.5 * math.pi - w
        E_c = 2 * math.atan2(math.sqrt(1 - e) * math.sin(nu_c / 2), math.sqrt(1 + e) * math.cos(nu_c / 2))
        for i, ti in enumerate(t):
            M = (2 * math.pi * (ti - tc) / P + E_c - e * math.sin(E_c)) % (2 * math.pi)
            E = brentq(lambda x: x - e * math.sin(x) - M, 0.0, 2 * math.pi, xtol=1e-15)
            nu = 2 * math.atan2(math.sqrt(1 + e) * math.sin(E / 2), math.sqrt(1 - e) * math.cos(E / 2))
            signal[i] += K * (math.cos(nu + w) + e * math.cos(w))
    offset = np.array([par[f"{n}.offset_ms"] for n in v["instrument"]])
    jitter = np.array([par[f"{n}.jitter_ms"] for n in v["instrument"]])
    var = v["uncertainty_ms"] ** 2 + jitter ** 2
    r = v["velocity_ms"] - offset - signal
    lnl_rv = -0.5 * np.sum(r * r / var + np.log(2 * math.pi * var))
    tr = project.transits
    tt = tr["time_days"] + (tr["reference_epoch_bjd"] - model.reference_epoch_bjd)  # whole days: exact
    rt = tt - (par["b.t_conj_d"] + tr["epoch"] * par["b.period_d"])
    # The fit's theta puts t_conj near the middle of the data: the epochs count from the
    # conjunction nearest T_conj, i.e. shift n so that the residuals are small.
    shift = np.round(np.median(rt) / par["b.period_d"])
    rt = rt - shift * par["b.period_d"]
    s2 = tr["uncertainty_d"] ** 2
    lnl_tt = -0.5 * np.sum(rt * rt / s2 + np.log(2 * math.pi * s2))
    assert model.log_likelihood(theta) == pytest.approx(lnl_rv + lnl_tt, rel=1e-9)


def test_sample_equals_the_command_line_and_results_read_like_h5py(demo_project_path, cli, tmp_path):
    code, _, err = cli("sample", demo_project_path, "--out", tmp_path / "cli.h5", "--max-steps", "60",
                       "--json", tmp_path / "cli.json", "--quiet")
    assert code == 0, err
    got = apsides.sample(apsides.Project.from_toml(demo_project_path), str(tmp_path / "py.h5"), max_steps=60, quiet=True)
    assert got == read_json(tmp_path / "cli.json")
    assert got["sampler"]["steps"] == 60 and got["sampler"]["termination"] == "max_steps reached"
    with apsides.Results.open(str(tmp_path / "py.h5")) as r, h5py.File(tmp_path / "cli.h5", "r") as h:
        steps = int(h["chains"].attrs["steps"])
        stride = int(h["chains"].attrs["stride"])
        rows = steps // stride
        assert r.steps == steps == 60 and r.burn_in_steps == int(h["chains"].attrs["burn_in_steps"])
        assert r.stride == stride and r.chains.shape == (rows, r.walkers, len(r.names))
        np.testing.assert_array_equal(r.chain_steps, h["chains/step"][:rows])
        np.testing.assert_array_equal(r.chains, h["chains/positions"][:rows])  # bitwise, another reader
        np.testing.assert_array_equal(r.log_prob, h["chains/log_prob"][:rows])
        assert r.names == [n.decode() if isinstance(n, bytes) else n for n in h["parameters/names"][:]]
        s = r.summary()
        assert [row["name"] for row in s["parameters"]] == r.names
        kept = r.samples()
        np.testing.assert_array_equal(kept, r.chains[r.chain_steps > r.burn_in_steps].reshape(-1, len(r.names)))
        i = r.names.index("c.period_d")
        assert s["parameters"][i]["median"] == pytest.approx(np.percentile(kept[:, i], 50), rel=1e-12)
        assert r.summary_json()["planets"][1]["label"] == "c"
        d = r.derived()
        assert d["b.msini_mjup"].shape == (kept.shape[0],)
        np.testing.assert_array_equal(d["b.msini_mjup"], h["derived/b.msini_mjup"][:])
        assert "c.period_d" in r.report()


def small_system(tmp_path):
    """An invented one-planet star (40 velocities, one spectrograph) as files and a project."""
    rng = np.random.default_rng(5)
    t = 2459500.0 + np.sort(rng.uniform(0, 200, 40))
    s = np.full(40, 2.0)
    v = apsides.radial_velocity(t, 12.3, 15.0, 0.1, 1.0, 2459503.0) + s * rng.normal(size=40) - 3.0
    np.savetxt(tmp_path / "rv.csv", np.c_[t, v, s], delimiter=",", fmt="%.9f", header="time_bjd,velocity,uncertainty",
               comments="")
    (tmp_path / "p.toml").write_text('[star]\nmass_msun = 0.9\n[[velocities]]\nfile = "rv.csv"\ninstrument = "Wren"\n'
                                     '[search]\nmax_planets = 1\n[evidence]\nlive_points = 60\n')
    return tmp_path / "p.toml"


def without_times(doc):
    for row in doc["comparison"]:
        row.pop("seconds")
    return doc


def test_compare_equals_the_command_line(tmp_path, cli):
    path = small_system(tmp_path)
    code, _, err = cli("compare", path, "--json", tmp_path / "cmp.json", "--quiet")
    assert code == 0, err
    got = apsides.compare(apsides.Project.from_toml(path), out=str(tmp_path / "cmp.h5"), quiet=True)
    assert without_times(got) == without_times(read_json(tmp_path / "cmp.json"))
    assert got["selected_n_planets"] == 1
    with h5py.File(tmp_path / "cmp.h5", "r") as h:
        np.testing.assert_array_equal(h["comparison/n_planets"][:], [0, 1])


def test_analyze_returns_its_summary_json(tmp_path):
    path = small_system(tmp_path)
    out = tmp_path / "run"
    got = apsides.analyze(apsides.Project.from_toml(path), str(out), max_steps=400, quiet=True)
    assert got == read_json(out / "summary.json")
    assert got["selected_n_planets"] == 1
    assert got["planets"][0]["period_d"]["median"] == pytest.approx(12.3, rel=0.01)
    assert (out / "report.md").exists() and (out / "results.h5").exists()
