"""apsides: planets from stellar radial velocities and transit times, in Python.

A thin module over the apsides C++ library (the one the ``apsides`` command line uses):
every number is computed there. Arrays are numpy float64; times are BJD_TDB in days,
velocities m/s, periods days, angles of the star's orbit.

    import apsides
    p = apsides.Project.from_toml("datasets_synthetic/demo/project.toml")
    f = apsides.fit(p, search=True)            # the dict of `apsides fit --json`
    s = apsides.periodogram(p)                 # frequencies, power, peaks with FAP, window
    apsides.sample(p, "run.h5"); r = apsides.Results.open("run.h5")

Bad input raises ``apsides.InputError`` (a ``ValueError``) with the library's one-line
message; long calls release the GIL and show progress on stderr unless ``quiet=True``.
"""
from __future__ import annotations

import json
import os
import warnings
from dataclasses import dataclass, field
from typing import Any, Optional

import numpy as np

from ._apsides import (  # noqa: F401  (the public API)
    InputError,
    Model,
    ProjectCore as _ProjectCore,
    Results,
    __version__,
    analyze,
    compare,
    fit,
    minimum_mass,
    radial_velocity,
    sample,
    solve_kepler,
)
from . import _apsides

__all__ = [
    "InputError", "Model", "Periodogram", "Project", "Results", "analyze", "compare", "ephemeris", "fit",
    "minimum_mass", "periodogram", "radial_velocity", "sample", "solve_kepler",
]

# Column names accepted in tables (dict, numpy structured array, astropy Table, pandas
# DataFrame): those of apsides' own CSV files first.
_VELOCITY_COLUMNS = {
    "time": ("time_bjd", "time"),
    "velocity": ("velocity", "velocity_ms"),
    "uncertainty": ("uncertainty", "uncertainty_ms"),
    "instrument": ("instrument",),
}
_TRANSIT_COLUMNS = {
    "epoch": ("epoch",),
    "time": ("t_mid_bjd", "time_bjd", "time"),
    "uncertainty": ("uncertainty_d", "uncertainty"),
    "planet": ("planet",),
}


def _has(table: Any, key: str) -> bool:
    if isinstance(table, (tuple, list, str, bytes)) or (isinstance(table, np.ndarray) and table.dtype.names is None):
        return False
    try:
        if hasattr(table, "dtype") and table.dtype.names is not None:
            return key in table.dtype.names
        return key in table
    except TypeError:
        return False


def _column(table: Any, kind: dict, what: str, source: str, required: bool = True):
    for key in kind[what]:
        if _has(table, key):
            return table[key]
    if required:
        raise InputError(f"{source}: no '{kind[what][0]}' column (accepted names: {', '.join(kind[what])})")
    return None


def _numbers(values: Any, source: str, name: str) -> np.ndarray:
    a = np.ascontiguousarray(values, dtype=np.float64)  # no copy for contiguous float64
    if a.ndim != 1:
        raise InputError(f"{source}: {name} must be a 1-D array (got shape {a.shape})")
    return a


def _labels(values: Any) -> list:
    if values is None:
        return []
    if isinstance(values, (str, bytes)):
        values = [values]
    return [v.decode() if isinstance(v, bytes) else str(v) for v in np.asarray(values).ravel()]


def _is_table(obj: Any, kind: dict) -> bool:
    return any(_has(obj, k) for k in kind["time"])


def _rows(obj: Any, kind: dict, names: tuple, source: str):
    """(numeric columns..., labels) from a table or a tuple (c1, c2, c3[, labels])."""
    if _is_table(obj, kind):
        cols = [_column(obj, kind, n, source) for n in names]
        labels = _column(obj, kind, list(kind)[3], source, required=False)
    elif isinstance(obj, (tuple, list)) and len(obj) in (3, 4):
        cols, labels = list(obj[:3]), (obj[3] if len(obj) == 4 else None)
    else:
        raise InputError(f"{source}: give a table with columns {', '.join(kind[n][0] for n in names)} "
                         f"or a tuple of three arrays (optionally a fourth with labels)")
    return [_numbers(c, source, n) for c, n in zip(cols, names)], _labels(labels)


def _gather(obj: Any, kind: dict, names: tuple, source: str):
    """One table / tuple, or a dict {label: table or tuple} of several (instruments, planets)."""
    if isinstance(obj, dict) and not _is_table(obj, kind):
        parts, labels = [], []
        for label, part in obj.items():
            cols, own = _rows(part, kind, names, f"{source}['{label}']")
            if own and any(x != str(label) for x in own):
                raise InputError(f"{source}['{label}']: its label column contradicts the key '{label}'")
            parts.append(cols)
            labels += [str(label)] * len(cols[0])
        if not parts:
            raise InputError(f"{source}: no data (the dict is empty)")
        return [np.concatenate([p[i] for p in parts]) for i in range(3)], labels
    return _rows(obj, kind, names, source)


def _star_settings(name, mass, mass_err, radius) -> str:
    lines = []
    if name is not None:
        lines.append(f"name = {json.dumps(str(name))}")
    for key, value in (("mass_msun", mass), ("mass_err_msun", mass_err), ("radius_rsun", radius)):
        if value is not None:
            lines.append(f"{key} = {float(value)!r}")
    return "[star]\n" + "\n".join(lines) + "\n" if lines else ""


def _warn(core) -> None:
    for w in core.warnings:
        warnings.warn(w, stacklevel=3)


class Project:
    """A star's data and settings: what every stage runs on.

    ``Project.from_toml(path)`` reads a project file (the format of ``apsides``; keys in
    include/apsides/project.h) and loads its data once. ``Project(velocities=...)`` builds
    one from arrays:

    velocities: a table with columns ``time_bjd`` (BJD_TDB, days), ``velocity`` and
        ``uncertainty`` (in ``velocity_unit``, default m/s) and optionally ``instrument``
        (a dict of arrays, numpy structured array, astropy Table or pandas DataFrame; also
        ``time``, ``velocity_ms``, ``uncertainty_ms``); or a tuple ``(t, v, sigma[,
        instrument])``; or a dict ``{instrument: table or tuple}`` for several spectrographs.
    transits: mid-transit times, a table with ``epoch`` (integer), ``t_mid_bjd`` (or
        ``time_bjd``), ``uncertainty_d`` (days) and optionally ``planet`` (default "b"); or
        ``(epoch, t, sigma[, planet])``; or ``{planet: table or tuple}``.
    star_mass, star_mass_err: solar masses (m sin i, a, the periastron limit);
    star_radius: solar radii; star_name.
    settings: TOML text with any other table of a project file ([search], [model],
        [priors], [sampler], [evidence]).

    The data are checked as the file readers check them (finite numbers, uncertainties
    > 0, equal lengths, ...): ``InputError`` (a ``ValueError``) names the row, e.g.
    ``velocities:16: uncertainty is -0.4; it must be > 0`` (rows counted from 0).
    """

    def __init__(self, velocities, transits=None, *, star_mass: Optional[float] = None,
                 star_mass_err: Optional[float] = None, star_radius: Optional[float] = None,
                 star_name: Optional[str] = None, velocity_unit: str = "m/s", settings: str = "",
                 name: str = "<arrays>"):
        (t, v, s), inst = _gather(velocities, _VELOCITY_COLUMNS, ("time", "velocity", "uncertainty"), "velocities")
        if transits is None:
            (te, tt, ts), planet = (np.empty(0), np.empty(0), np.empty(0)), []
        else:
            (te, tt, ts), planet = _gather(transits, _TRANSIT_COLUMNS, ("epoch", "time", "uncertainty"), "transits")
        text = _star_settings(star_name, star_mass, star_mass_err, star_radius) + settings
        self._core = _ProjectCore.from_arrays(t, v, s, inst, velocity_unit, te, tt, ts, planet, text, name)
        _warn(self._core)

    @classmethod
    def from_toml(cls, path) -> "Project":
        """Reads a project file and its data files (paths relative to the project file)."""
        self = cls.__new__(cls)
        self._core = _ProjectCore.load(os.fspath(path))
        _warn(self._core)
        return self

    path = property(lambda self: self._core.path, doc="the project file ('<arrays>' when built from arrays)")
    text = property(lambda self: self._core.text, doc="the project text a results file stores")
    star_name = property(lambda self: self._core.star_name)
    star_mass = property(lambda self: self._core.star_mass, doc="solar masses, or None")
    star_mass_err = property(lambda self: self._core.star_mass_err, doc="solar masses")
    star_radius = property(lambda self: self._core.star_radius, doc="solar radii, or None")
    instruments = property(lambda self: self._core.instruments, doc="instrument names, in data order")
    n_points = property(lambda self: self._core.n_points, doc="number of velocities")
    baseline_d = property(lambda self: self._core.baseline_d, doc="time span of the velocities (days)")
    velocities = property(lambda self: self._core.velocities,
                          doc="dict: arrays time_bjd, velocity_ms, uncertainty_ms, instrument (sorted by time), and "
                              "time_days, the exact times after reference_epoch_bjd (time_bjd is rounded to float64)")
    transits = property(lambda self: self._core.transits,
                        doc="dict: arrays epoch, time_bjd, uncertainty_d, planet, and time_days after reference_epoch_bjd")
    warnings = property(lambda self: self._core.warnings, doc="notes about the data that are not errors")

    def __repr__(self) -> str:
        star = f", star {self.star_mass} Msun" if self.star_mass is not None else ""
        return (f"<apsides.Project {self.path}: {self.n_points} velocities from "
                f"{', '.join(self.instruments)}, {len(self.transits['epoch'])} transit times{star}>")


@dataclass
class Periodogram:
    """A generalised Lomb-Scargle periodogram (Zechmeister & Kuerster 2009), as ``apsides scan``.

    frequency: grid (1/day); power: in ``normalization`` (standard: (chi2_0 - chi2) / chi2_0,
    one offset per instrument fitted at every frequency); window: window function on the same
    grid; peaks: strongest first, dicts with period_d, frequency_per_d, power, fap (Baluev 2008
    analytic), power_standard, possible_alias, ...; window_peaks; the rest of the ``scan
    --json`` document in normalization, method, grid, data, offsets.
    """
    frequency: np.ndarray
    power: np.ndarray
    window: np.ndarray
    peaks: list
    window_peaks: list
    normalization: str
    method: str
    grid: dict
    data: dict
    offsets: str
    document: dict = field(repr=False)

    @property
    def period(self) -> np.ndarray:
        """Periods of the grid (days)."""
        return 1.0 / self.frequency


def periodogram(t, y=None, dy=None, instrument=None, *, min_period: Optional[float] = None,
                max_period: Optional[float] = None, oversample: float = 10.0, normalization: str = "standard",
                method: str = "auto", peaks: int = 10, window_peaks: int = 5, bootstrap: int = 0, seed: int = 1,
                threads: int = 0, velocity_unit: str = "m/s") -> Periodogram:
    """Periodogram of velocities: ``periodogram(t, y, dy[, instrument])`` with arrays (t in
    BJD_TDB days, y and dy in velocity_unit) or ``periodogram(project)``.

    Grid (defaults as ``apsides scan``): periods from 3 x baseline down to a limit from the
    sampling (0.1-0.5 d), ``oversample`` points per peak width 1/baseline; min_period /
    max_period in days override. normalization: "standard", "model", "log", "psd";
    method: "exact", "fast" (FFT, power error <= 1e-5) or "auto". bootstrap > 0 adds an
    empirical FAP per peak. threads: 0 = all cores.
    """
    if isinstance(t, Project) or isinstance(t, _ProjectCore):
        if y is not None or dy is not None or instrument is not None:
            raise InputError("periodogram: give a project or arrays (t, y, dy[, instrument]), not both")
        project = t
    else:
        if y is None or dy is None:
            raise InputError("periodogram: give t, y and dy (or a project)")
        project = Project((t, y, dy) if instrument is None else (t, y, dy, instrument), velocity_unit=velocity_unit)
    doc, freq, power, window = _apsides._periodogram(
        project, min_period, max_period, float(oversample), normalization, method, int(peaks), int(window_peaks),
        int(bootstrap), int(seed), int(threads))
    return Periodogram(frequency=freq, power=power, window=window, peaks=doc["peaks"],
                       window_peaks=doc["window_peaks"], normalization=doc["normalization"], method=doc["method"],
                       grid=doc["grid"], data=doc["data"], offsets=doc["offsets"], document=doc)


def ephemeris(transits, planet: Optional[str] = None, *, next: int = 10, from_bjd: Optional[float] = None,
              to_bjd: Optional[float] = None, epoch: int = 0, scale_errors: bool = False,
              outlier_sigma: float = 5.0, drop_outliers: bool = False, companion_period: float = 0.0,
              model: str = "auto", ttv: bool = True) -> dict:
    """Transit ephemeris, as ``apsides ephemeris TIMES --json`` (same dict).

    transits: a transit-time file (path) or a table / tuple of arrays (epoch, mid-transit
    BJD_TDB, uncertainty in days[, planet]). planet: the label to use when there are several.
    Linear and quadratic ephemerides, O-C with outliers beyond outlier_sigma (drop_outliers
    refits without them), a timing-variation search (ttv=False skips it) and predictions of the
    next ``next`` transits (or every one from from_bjd to to_bjd) with the model ``model``
    ("auto": the best supported by BIC, "linear", "quadratic", "sinusoid"). Returns
    {"period_d": {"value", "err"}, "t0_bjd", "t_ref_bjd", "oc", "quadratic", "ttv",
    "predictions", "chi2", "dof", "notes", ...}: days, BJD_TDB. Raises RuntimeError when the
    fit does not converge.
    """
    if isinstance(transits, (str, os.PathLike)):
        path, (te, tt, ts), labels = os.fspath(transits), (np.empty(0), np.empty(0), np.empty(0)), []
    else:
        path = ""
        (te, tt, ts), labels = _gather(transits, _TRANSIT_COLUMNS, ("epoch", "time", "uncertainty"), "transits")
    return _apsides._ephemeris(path, te, tt, ts, labels, planet or "", int(next), from_bjd, to_bjd, int(epoch),
                               bool(scale_errors), float(outlier_sigma), bool(drop_outliers), float(companion_period),
                               model, bool(ttv))
