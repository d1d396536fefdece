"""apsides.ephemeris against the command line's --json and against numpy's weighted least
squares (linear and quadratic ephemerides) on published WASP-12b transit times."""
import numpy as np
import pytest

import apsides

from conftest import SOURCE, read_json

WASP12 = SOURCE / "tests" / "data" / "real" / "wasp12b_transits_wong2022.txt"


def read_times(path):
    rows = [line.split() for line in open(path) if line.strip() and line.lstrip()[0] in "-0123456789"]
    a = np.array([[float(x) for x in r[:3]] for r in rows])
    return a[:, 0], a[:, 1], a[:, 2]


def test_ephemeris_equals_the_command_lines_json(cli, tmp_path):
    code, _, err = cli("ephemeris", WASP12, "--next", "3", "--json", tmp_path / "cli.json")
    assert code == 0, err
    got = apsides.ephemeris(WASP12, next=3)
    assert got == read_json(tmp_path / "cli.json")  # every number to the last digit


def test_ephemeris_from_arrays_matches_numpy_least_squares():
    n, t, s = read_times(WASP12)
    got = apsides.ephemeris((n, t, s), ttv=False, next=2)
    assert got["n_transits"] == len(t)
    # Linear ephemeris: weighted least squares t = T0 + P n (numpy.linalg.lstsq on rows / sigma).
    A = np.column_stack([np.ones_like(n), n]) / s[:, None]
    coef, *_ = np.linalg.lstsq(A, t / s, rcond=None)
    cov = np.linalg.inv(A.T @ A)
    assert got["period_d"]["value"] == pytest.approx(coef[1], abs=1e-10)
    assert got["period_d"]["err"] == pytest.approx(np.sqrt(cov[1, 1]), rel=1e-6)
    resid = (t - (coef[0] + coef[1] * n)) / s
    assert got["chi2"] == pytest.approx(np.sum(resid ** 2), rel=1e-6)
    # Quadratic: t = c0 + c1 n + c2 n^2, dP/dn = 2 c2 (Wong et al. 2022 Eq. 8c: -1.031e-9 d per
    # orbit, +-0.033e-9; their fit, so compared within 3 of their sigma).
    A2 = np.column_stack([np.ones_like(n), n, n * n]) / s[:, None]
    c2, *_ = np.linalg.lstsq(A2, t / s, rcond=None)
    dp_dn = got["quadratic"]["dp_dn"]["value"]
    assert dp_dn == pytest.approx(2 * c2[2], rel=1e-5)
    assert abs(dp_dn - (-1.031e-9)) < 3 * 0.033e-9


def test_ephemeris_bad_input_is_a_value_error():
    n, t, s = read_times(WASP12)
    s = s.copy()
    s[2] = -s[2]
    with pytest.raises(ValueError, match=r"^transits:2: .*uncertainty"):
        apsides.ephemeris((n, t, s))
    with pytest.raises(ValueError, match="planet = c: .* has no transits of that planet"):
        apsides.ephemeris(WASP12, "c")
