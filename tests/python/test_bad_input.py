"""Bad input raises apsides.InputError (a ValueError) with the library's one-line message,
the same line the command line prints (after its "apsides: " prefix)."""
import numpy as np
import pytest

import apsides

T = np.array([2459000.1, 2459001.3, 2459002.2, 2459004.8, 2459007.5, 2459011.0])
V = np.array([3.1, -2.0, 0.5, 4.4, -1.2, 0.3])
S = np.array([1.0, 1.1, 0.9, 1.2, 1.0, 1.0])


def message(call):
    with pytest.raises(ValueError) as err:
        call()
    assert isinstance(err.value, apsides.InputError)
    return str(err.value)


def with_value(a, i, x):
    a = a.copy()
    a[i] = x
    return a


def test_nan_and_infinity_are_refused_naming_the_row():
    assert message(lambda: apsides.Project((with_value(T, 3, np.nan), V, S))) == \
        "velocities:3: time is nan; it must be a finite number"
    assert message(lambda: apsides.Project((T, with_value(V, 0, np.inf), S))) == \
        "velocities:0: velocity is inf; it must be a finite number"
    assert message(lambda: apsides.periodogram(T, V, with_value(S, 5, np.nan))) == \
        "velocities:5: uncertainty is nan; it must be a finite number"


def test_negative_or_zero_uncertainty_is_refused():
    assert message(lambda: apsides.Project((T, V, with_value(S, 2, -0.4)))) == \
        "velocities:2: uncertainty is -0.4; it must be > 0"
    assert message(lambda: apsides.Project({"time_bjd": T, "velocity": V, "uncertainty": with_value(S, 1, 0.0)})) == \
        "velocities:1: uncertainty is 0; it must be > 0"


def test_mismatched_lengths_are_refused():
    assert message(lambda: apsides.Project((T[:5], V, S))) == \
        "velocities: velocity has 6 values but time has 5; every column needs one value per row"
    assert message(lambda: apsides.Project((T, V, S, ["a", "b"]))) == \
        "velocities: instrument has 2 labels but time has 6 values; give one label per row or one for all"
    assert message(lambda: apsides.periodogram(T, V[:4], S)) == \
        "velocities: velocity has 4 values but time has 6; every column needs one value per row"


def test_other_data_rules_of_the_file_readers():
    # A repeated (time, instrument) pair is kept with one warning (data.h RepeatPolicy kKeep,
    # the file readers' default).
    with pytest.warns(UserWarning, match=r"1 repeated \(time, instrument\) pair, every point kept: lines 0 and 1"):
        p = apsides.Project((with_value(T, 1, T[0]), V, S))
    assert len(p.velocities["time_bjd"]) == len(T)
    assert message(lambda: apsides.Project((T, V * 1e9, S))) == \
        "velocities:0: velocity is 3100000000 m/s; it must be below the speed of light"
    tr = (np.array([0, 1.5]), np.array([2459000.2, 2459003.4]), np.array([0.001, 0.001]))
    assert message(lambda: apsides.Project((T, V, S), transits=tr)) == \
        "transits:1: epoch is 1.5; it must be an integer transit number"
    tr = (np.array([0, 1]), np.array([2459000.2, 2459003.4]), np.array([0.001, 2.0]))
    assert message(lambda: apsides.Project((T, V, S), transits=tr)) == \
        "transits:1: uncertainty is 2 days; it must be below 1 day (transit-time errors are in days, not minutes)"


def test_settings_and_star_are_validated_like_a_project_file():
    assert message(lambda: apsides.Project((T, V, S), star_mass=-1.0)) == \
        "<arrays>:2: star.mass_msun is -1; it must be > 0"
    assert message(lambda: apsides.Project((T, V, S), settings="[search]\nmax_planet = 2\n")) == \
        "<arrays>:2: unknown key 'search.max_planet'; did you mean 'max_planets'?"
    assert message(lambda: apsides.Project((T, V, S), settings="[[velocities]]\nfile = 'x.csv'\n")) == \
        "<arrays>:1: [[velocities]] names a file, but this project's data are given as arrays"


def test_stage_arguments_are_checked():
    p = apsides.Project((T, V, S))
    assert message(lambda: apsides.fit(p, 1, search=True)) == "give planets=N or search=True, not both"
    assert message(lambda: apsides.fit(p, 12)) == "planets = 12: must be between 0 and 9"
    assert "too few" in message(lambda: apsides.fit(p, 2))
    assert message(lambda: apsides.Model(p, 0)([1.0, 2.0, 3.0])) == \
        "theta has 3 values; this model has 2 parameters (velocities.offset_ms, velocities.jitter_ms)"


def test_a_bad_file_gives_the_command_lines_message(tmp_path, cli):
    (tmp_path / "rv.csv").write_text("2459000.5,1.0,0.5\n2459001.5,2.0,-0.4\n2459002.5,1.5,0.5\n")
    (tmp_path / "p.toml").write_text('[[velocities]]\nfile = "rv.csv"\n')
    code, _, err = cli("scan", tmp_path / "p.toml")
    assert code == 2
    got = message(lambda: apsides.Project.from_toml(tmp_path / "p.toml"))
    assert err.strip() == "apsides: " + got
    assert got.endswith("rv.csv:2: uncertainty is -0.4; it must be > 0")
    assert message(lambda: apsides.Project.from_toml(tmp_path / "missing.toml")).endswith("missing.toml: no such file")
