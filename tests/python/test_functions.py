"""Kepler's equation, the Keplerian velocity and the minimum mass from the module, against
independent implementations with scipy (brentq root finding) and numpy."""
import math

import numpy as np
import pytest
from scipy.optimize import brentq

import apsides

TWO_PI = 2.0 * math.pi


def kepler_brentq(M, e):
    """E in [0, 2 pi) with E - e sin E = M mod 2 pi: scipy's brentq (xtol 1e-15)."""
    m = math.fmod(M, TWO_PI)
    if m < 0:
        m += TWO_PI
    if m == 0.0:
        return 0.0
    return brentq(lambda E: E - e * math.sin(E) - m, 0.0, TWO_PI, xtol=1e-15, rtol=4 * np.finfo(float).eps,
                  maxiter=500)


def wrapped(a, b):
    """Difference of angles on the circle."""
    return (np.asarray(a) - np.asarray(b) + math.pi) % TWO_PI - math.pi


def test_solve_kepler_matches_brentq_to_1e12():
    rng = np.random.default_rng(7)
    M = np.concatenate([rng.uniform(-20.0, 30.0, 400), [0.0, 1e-9, math.pi, TWO_PI - 1e-9, 1e-4]])
    e = np.concatenate([rng.uniform(0.0, 0.99, 400), [0.5, 0.999, 0.999, 0.999, 0.995]])
    E = apsides.solve_kepler(M, e)
    ref = np.array([kepler_brentq(m, x) for m, x in zip(M, e)])
    assert E.shape == M.shape
    assert np.max(np.abs(wrapped(E, ref))) <= 1e-12
    assert np.all((E >= 0.0) & (E < TWO_PI))


def test_solve_kepler_broadcasts_and_keeps_scalars():
    assert isinstance(apsides.solve_kepler(1.0, 0.3), float)
    assert apsides.solve_kepler(1.0, 0.3) == pytest.approx(kepler_brentq(1.0, 0.3), abs=1e-12)
    M = np.linspace(0.0, 6.0, 12).reshape(3, 4)
    E = apsides.solve_kepler(M, 0.2)
    assert E.shape == (3, 4)
    E2 = apsides.solve_kepler(M, np.full((3, 4), 0.2))
    np.testing.assert_array_equal(E, E2)
    E3 = apsides.solve_kepler(np.array([1.0, 2.0, 3.0]), np.array([[0.1], [0.5]]))  # (2, 3)
    assert E3.shape == (2, 3)
    assert E3[1, 2] == pytest.approx(kepler_brentq(3.0, 0.5), abs=1e-12)


def velocity_reference(t, P, K, e, omega, t_conj):
    """v = K [cos(nu + omega) + e cos omega], omega of the star, the planet's inferior
    conjunction at nu = pi/2 - omega (DESIGN conventions), E from brentq."""
    nu_c = 0.5 * math.pi - omega
    E_c = 2.0 * math.atan2(math.sqrt(1 - e) * math.sin(nu_c / 2), math.sqrt(1 + e) * math.cos(nu_c / 2))
    M_c = E_c - e * math.sin(E_c)
    out = []
    for ti in t:
        M = TWO_PI * (ti - t_conj) / P + M_c
        E = kepler_brentq(M, e)
        nu = 2.0 * math.atan2(math.sqrt(1 + e) * math.sin(E / 2), math.sqrt(1 - e) * math.cos(E / 2))
        out.append(K * (math.cos(nu + omega) + e * math.cos(omega)))
    return np.array(out)


@pytest.mark.parametrize("P, K, e, omega, t_conj", [
    (4.2308, 55.9, 0.0, 0.0, 3.1),
    (118.6, 14.2, 0.32, 2.1, -40.0),
    (6.41, 9.8, 0.9, -1.3, 0.25),
    (1000.0, 30.0, 0.6, 4.0, 120.0),
])
def test_radial_velocity_matches_scipy_reference_to_1e12(P, K, e, omega, t_conj):
    t = np.linspace(-300.0, 700.0, 257)
    v = apsides.radial_velocity(t, P, K, e, omega, t_conj)
    ref = velocity_reference(t, P, K, e, omega, t_conj)
    assert v.shape == t.shape
    # Absolute 1e-12 of K: Kepler's equation to 1e-12 rad gives velocities to ~K 1e-12 (for
    # e <= 0.6; near e = 0.9 periastron dv/dE grows as 1/(1 - e)).
    assert np.max(np.abs(v - ref)) <= 1e-12 * K / (1.0 - e)


def test_radial_velocity_at_conjunction_and_with_full_bjd():
    # At the planet's inferior conjunction nu + omega = pi/2, so v = K e cos(omega).
    P, K, e, omega = 10.0, 20.0, 0.3, 0.7
    v0 = apsides.radial_velocity(5.0, P, K, e, omega, 5.0)
    assert v0 == pytest.approx(K * e * math.cos(omega), abs=1e-12)
    # Full BJD: the same curve as reduced times (up to the float64 spacing of t, 4.7e-10 d).
    t = np.linspace(0.0, 30.0, 50)
    full = apsides.radial_velocity(t + 2459000.0, P, K, e, omega, 2459003.0)
    reduced = apsides.radial_velocity((t + 2459000.0) - 2459000.0, P, K, e, omega, 3.0)
    assert np.max(np.abs(full - reduced)) <= 1e-9


def minimum_mass_reference(P, K, e, M_star):
    """m sin i from m^3 = f (M + m)^2, f = P K^3 (1 - e^2)^1.5 / (2 pi GM_sun), by brentq.
    GM values: IAU 2015 Resolution B3 nominal (GM_sun 1.3271244e20, GM_J 1.2668653e17,
    GM_E 3.986004e14 m^3 s^-2)."""
    f = P * 86400.0 * K ** 3 * (1 - e * e) ** 1.5 / (TWO_PI * 1.3271244e20)
    m = brentq(lambda m: m ** 3 - f * (M_star + m) ** 2, 0.0, 10.0 * (M_star + 1.0), xtol=1e-300, rtol=1e-15)
    return m, m * 1.3271244e20 / 1.2668653e17, m * 1.3271244e20 / 3.986004e14


def test_minimum_mass_matches_brentq_solution():
    cases = [(4.2308, 55.9, 0.0, 1.11), (118.6, 14.2, 0.32, 0.86), (3.0, 5000.0, 0.1, 0.5), (10.0, 40000.0, 0.5, 0.3)]
    for P, K, e, M in cases:
        msun, mjup, mearth = minimum_mass_reference(P, K, e, M)
        assert apsides.minimum_mass(P, K, e, M, unit="msun") == pytest.approx(msun, rel=1e-12)
        assert apsides.minimum_mass(P, K, e, M) == pytest.approx(mjup, rel=1e-12)
        assert apsides.minimum_mass(P, K, e, M, unit="mearth") == pytest.approx(mearth, rel=1e-12)
    # Vectorised over every argument (numpy broadcasting).
    got = apsides.minimum_mass(np.array([4.2308, 118.6]), np.array([55.9, 14.2]), np.array([0.0, 0.32]), 1.0)
    assert got.shape == (2,)
    assert got[1] == pytest.approx(minimum_mass_reference(118.6, 14.2, 0.32, 1.0)[1], rel=1e-12)


@pytest.mark.parametrize("call, message", [
    (lambda: apsides.solve_kepler(np.array([0.1, 0.2]), np.array([0.1, 1.0])),
     "e[1] = 1: an eccentricity must be in [0, 1)"),
    (lambda: apsides.solve_kepler(np.nan, 0.1), "M[0] = nan: must be finite"),
    (lambda: apsides.radial_velocity([0.0, 1.0], -3.0, 10.0, 0.1, 0.0, 0.0), "P = -3: the period must be > 0 (days)"),
    (lambda: apsides.radial_velocity([0.0, np.inf], 3.0, 10.0, 0.1, 0.0, 0.0), "t[1] = inf: must be finite"),
    (lambda: apsides.minimum_mass(3.0, 10.0, 0.1, 0.0), "star_mass = 0: the star's mass must be > 0 (solar masses)"),
    (lambda: apsides.minimum_mass(3.0, 10.0, 0.1, 1.0, unit="kg"), "unit = 'kg': must be \"mjup\", \"mearth\" or \"msun\""),
])
def test_bad_arguments_raise_value_error_with_the_rule(call, message):
    with pytest.raises(ValueError) as err:
        call()
    assert str(err.value) == message
    assert isinstance(err.value, apsides.InputError)
