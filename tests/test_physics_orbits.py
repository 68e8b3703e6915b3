"""Tests of sweep.physics.orbits."""

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from sweep.physics import orbits


def test_kepler_third_law_one_au_one_year():
    # Kepler's third law with astropy constants: 1 au around 1 M_sun is 365.25 d to 0.1 %
    assert orbits.orbital_period_d(1.0, 1.0) == pytest.approx(365.25, rel=1e-3)
    ref = (2 * np.pi * np.sqrt(const.au**3 / (const.G * const.M_sun))).to_value(u.day)  # astropy
    assert orbits.orbital_period_d(1.0, 1.0) == pytest.approx(ref, rel=1e-12)


def test_kepler_third_law_round_trip_and_planet_mass():
    # inverse functions of each other (definition); planet mass shortens the period
    p = np.array([1.0, 10.0, 365.25, 1e4])
    m = np.array([[0.2], [1.0], [2.0]])
    a = orbits.semi_major_axis_au(p, m, 300.0)
    assert a.shape == (3, 4)
    np.testing.assert_allclose(orbits.orbital_period_d(a, m, 300.0), np.broadcast_to(p, a.shape),
                               rtol=1e-12)
    jup = (const.M_jup / const.M_earth).decompose().value
    ratio = orbits.orbital_period_d(5.2, 1.0, jup) / orbits.orbital_period_d(5.2, 1.0)
    # P ~ (M + m)^(-1/2) (Murray & Dermott 1999, eq. 2.22), with astropy masses
    assert ratio == pytest.approx((1 + (const.M_jup / const.M_sun).value) ** -0.5, rel=1e-12)


def _wrapped_residual(big_e, e, m):
    r = big_e - e * np.sin(big_e) - m
    return (r + np.pi) % (2 * np.pi) - np.pi


@settings(max_examples=200, deadline=None)
@given(m=st.floats(-1e3, 1e3, allow_nan=False), e=st.floats(0.0, 0.95, exclude_max=True))
def test_kepler_equation_scalar(m, e):
    # Kepler's equation E - e sin E = M (Murray & Dermott 1999, eq. 2.52) to 1e-12
    big_e = orbits.eccentric_anomaly(m, e)
    assert np.ndim(big_e) == 0
    assert abs(big_e - e * np.sin(big_e) - m) < 1e-12 + 4 * np.spacing(abs(m) + 2 * np.pi)


@settings(max_examples=50, deadline=None)
@given(m=arrays(np.float64, 64, elements=st.floats(-1e8, 1e8, allow_nan=False)),
       e=arrays(np.float64, 64, elements=st.floats(0.0, 0.95, exclude_max=True)))
def test_kepler_equation_array(m, e):
    # Kepler's equation to 1e-12 modulo 2 pi (M any real; large |M| is reduced first)
    big_e = orbits.eccentric_anomaly(m, e)
    assert big_e.shape == m.shape
    tol = 1e-12 + 4 * np.spacing(np.abs(m) + 2 * np.pi)
    assert np.all(np.abs(_wrapped_residual(big_e, e, m)) < tol)


def test_kepler_equation_hard_cases():
    # near periapsis at high eccentricity, where Newton's method is slowest (Danby 1988)
    m = np.concatenate([np.geomspace(1e-12, 1e-1, 50), -np.geomspace(1e-12, 1e-1, 50), [0.0, np.pi]])
    for e in (0.0, 0.5, 0.9, 0.949999):
        big_e = orbits.eccentric_anomaly(m, e)
        assert np.all(np.abs(big_e - e * np.sin(big_e) - m) < 1e-12)


def test_true_anomaly_known_values():
    # nu(E) (Murray & Dermott 1999, eq. 2.46): E = 0 -> 0, E = pi -> pi, and cos nu formula
    assert orbits.true_anomaly(0.0, 0.5) == 0.0
    assert abs(orbits.true_anomaly(np.pi, 0.5)) == pytest.approx(np.pi)
    big_e = np.linspace(-3, 3, 25)
    e = 0.6
    nu = orbits.true_anomaly(big_e, e)
    np.testing.assert_allclose(np.cos(nu), (np.cos(big_e) - e) / (1 - e * np.cos(big_e)),
                               atol=1e-13)
    np.testing.assert_allclose(orbits.true_anomaly(big_e, 0.0), big_e, atol=1e-15)


def test_sky_geometry_face_on_orbit():
    # face-on (i = 0): separation = distance, phase angle = pi/2 (geometry, by hand)
    m = np.linspace(0, 2 * np.pi, 13)
    sep, r, alpha = orbits.sky_geometry(2.0, 0.4, 0.0, 0.7, m)
    np.testing.assert_allclose(sep, r, rtol=1e-14)
    np.testing.assert_allclose(alpha, np.pi / 2, atol=1e-15)
    assert np.all((r >= 2.0 * 0.6 - 1e-12) & (r <= 2.0 * 1.4 + 1e-12))


def test_sky_geometry_edge_on_at_periapsis_and_apoapsis():
    # edge-on, omega = pi/2: periapsis lies towards the observer (in front of the star),
    # apoapsis behind it; both are on the line of sight (by hand)
    a, e = 1.5, 0.3
    sep, r, alpha = orbits.sky_geometry(a, e, np.pi / 2, np.pi / 2, np.array([0.0, np.pi]))
    np.testing.assert_allclose(r, [a * (1 - e), a * (1 + e)], rtol=1e-14)
    np.testing.assert_allclose(sep, 0.0, atol=1e-14)
    np.testing.assert_allclose(alpha, [np.pi, 0.0], atol=1e-7)
    # omega = 0: periapsis at the ascending node, on the sky plane: separation = distance
    sep, r, alpha = orbits.sky_geometry(a, e, np.pi / 2, 0.0, 0.0)
    assert sep == pytest.approx(a * (1 - e), rel=1e-14)
    assert alpha == pytest.approx(np.pi / 2, rel=1e-14)


def test_sky_geometry_matches_plain_formulas():
    # independent computation: rotation of the perifocal position vector (Murray & Dermott
    # 1999, eq. 2.119-2.121) with node longitude 0; Kepler solved by fixed-point iteration
    rng = np.random.default_rng(1)
    for _ in range(20):
        a, e = rng.uniform(0.1, 10), rng.uniform(0.0, 0.9)
        inc, om, m = rng.uniform(0, np.pi), rng.uniform(0, 2 * np.pi), rng.uniform(-7, 7)
        big_e = m
        for _ in range(500):
            big_e = m + e * np.sin(big_e)
        xp, yp = a * (np.cos(big_e) - e), a * np.sqrt(1 - e * e) * np.sin(big_e)
        rz = lambda t: np.array([[np.cos(t), -np.sin(t), 0], [np.sin(t), np.cos(t), 0], [0, 0, 1]])
        rx = np.array([[1, 0, 0], [0, np.cos(inc), -np.sin(inc)], [0, np.sin(inc), np.cos(inc)]])
        pos = rx @ rz(om) @ np.array([xp, yp, 0.0])
        # observer along +z: planet-to-star is -pos / r, planet-to-observer is +z
        r = np.linalg.norm(pos)
        sep, dist, alpha = orbits.sky_geometry(a, e, inc, om, m)
        assert dist == pytest.approx(r, rel=1e-10)
        assert sep == pytest.approx(np.hypot(pos[0], pos[1]), rel=1e-9, abs=1e-12)
        assert np.cos(alpha) == pytest.approx(-pos[2] / r, abs=1e-9)


def test_sky_geometry_circular_fast_path_matches_tiny_eccentricity():
    # e == 0 skips Kepler's equation; continuity with e -> 0 (produced by this code)
    m = np.linspace(-4, 4, 17)
    s0, r0, a0 = orbits.sky_geometry(1.0, np.zeros_like(m), 1.0, 0.3, m)
    s1, r1, a1 = orbits.sky_geometry(1.0, np.full_like(m, 1e-12), 1.0, 0.3, m)
    np.testing.assert_allclose(s0, s1, atol=1e-10)
    np.testing.assert_allclose(r0, 1.0, rtol=0)
    np.testing.assert_allclose(a0, a1, atol=1e-10)
    mixed = orbits.sky_geometry(1.0, np.where(np.arange(17) % 2 == 0, 0.0, 0.5), 1.0, 0.3, m)
    ecc = orbits.sky_geometry(1.0, 0.5, 1.0, 0.3, m)
    np.testing.assert_allclose(mixed[0][1::2], ecc[0][1::2], rtol=1e-14)
    np.testing.assert_allclose(mixed[0][0::2], s0[0::2], rtol=1e-14)


def test_projected_separation_fraction_monte_carlo():
    # Brown 2004, ApJ 607, 1003 (from memory): P(s > x a) = sqrt(1 - x^2) for circular,
    # isotropic orbits; Monte Carlo through sky_geometry, 4 standard errors
    rng = np.random.default_rng(20240601)
    n = 200_000
    inc = np.arccos(rng.uniform(-1, 1, n))
    om = rng.uniform(0, 2 * np.pi, n)
    m = rng.uniform(0, 2 * np.pi, n)
    sep, r, alpha = orbits.sky_geometry(3.0, 0.0, inc, om, m)
    np.testing.assert_allclose(sep, r * np.sin(alpha), atol=1e-12)
    for x in (0.1, 0.3, 0.5, 0.7, 0.9, 0.99):
        p = orbits.projected_separation_fraction_above(x)
        frac = np.mean(sep > x * 3.0)
        assert abs(frac - p) < 4 * np.sqrt(p * (1 - p) / n)
    np.testing.assert_allclose(orbits.projected_separation_fraction_above([-1, 0, 1, 2]),
                               [1, 1, 0, 0])


def test_kepler_solution_of_an_element_does_not_depend_on_its_neighbours():
    rng = np.random.default_rng(11)
    m, e = rng.uniform(-20.0, 20.0, 5000), rng.beta(0.867, 3.03, 5000)
    e[::97] = 0.97  # slow to converge: in one call with the others, they must not change the others
    together = orbits.eccentric_anomaly(m, e)
    alone = np.array([orbits.eccentric_anomaly(a, b) for a, b in zip(m, e)])
    in_pieces = np.concatenate([orbits.eccentric_anomaly(m[i:i + 7], e[i:i + 7]) for i in range(0, 5000, 7)])
    assert np.array_equal(together, alone) and np.array_equal(together, in_pieces)
    # Kepler's equation E - e sin E = M holds (Murray & Dermott 1999, eq. 2.52; from memory)
    assert np.abs(together - e * np.sin(together) - m).max() < 1e-11


def test_sky_geometry_with_given_cos_and_sin_of_the_inclination():
    rng = np.random.default_rng(12)
    n = 2000
    a, e, omega, m = rng.uniform(0.1, 5, n), rng.uniform(0, 0.9, n), rng.uniform(0, 6.3, n), rng.uniform(0, 6.3, n)
    cos_i = 1.0 - 2.0 * rng.random(n)
    inc = np.arccos(cos_i)
    plain = orbits.sky_geometry(a, e, inc, omega, m)
    given = orbits.sky_geometry(a, e, inc, omega, m, cos_inclination=cos_i,
                                sin_inclination=np.sqrt((1 - cos_i) * (1 + cos_i)))
    for x, y in zip(plain, given):  # the same geometry up to the rounding of cos(arccos c) (common practice)
        np.testing.assert_allclose(x, y, rtol=1e-9, atol=1e-12)
