"""Tests of sweep.physics.masses."""

import astropy.constants as const
import numpy as np
import pytest

from sweep.physics import masses, orbits

M_JUP_MEARTH = (const.M_jup / const.M_earth).decompose().value  # astropy


def test_chen_kipping_earth_and_neptune():
    # Chen & Kipping 2017, ApJ 834, 17 (from memory): Earth radius -> ~1 M_earth (10 %);
    # Neptune (3.88 R_earth, 17.1 M_earth; NSSDCA fact sheet, from memory) -> within 30 %
    assert masses.chen_kipping2017_mass_mearth(1.0) == pytest.approx(1.0, rel=0.10)
    assert masses.chen_kipping2017_mass_mearth(3.88) == pytest.approx(17.0, rel=0.30)


def test_chen_kipping_continuous_monotonic_and_capped():
    # the mean relation is continuous and increasing on the Terran and Neptunian branches;
    # above the Neptunian/Jovian transition the mass is capped at 0.414 M_jup (documented choice)
    r = np.geomspace(0.3, 14.0, 500)
    m = masses.chen_kipping2017_mass_mearth(r)
    assert np.all(np.diff(m) > 0)
    r_tn = masses._R_TN
    below, above = masses.chen_kipping2017_mass_mearth([r_tn * (1 - 1e-12), r_tn * (1 + 1e-12)])
    assert below == pytest.approx(2.04, rel=1e-9) and above == pytest.approx(2.04, rel=1e-9)
    cap = masses.chen_kipping2017_mass_mearth(np.array([15.0, 20.0, 30.0]))
    np.testing.assert_allclose(cap, 0.414 * M_JUP_MEARTH, rtol=1e-12)
    # forward relation R = 10^0.00346 M^0.279 on the Terran branch (Chen & Kipping 2017)
    m1 = masses.chen_kipping2017_mass_mearth(1.1)
    assert 10**0.00346 * m1**0.279 == pytest.approx(1.1, rel=1e-12)
    assert np.ndim(masses.chen_kipping2017_mass_mearth(2.0)) == 0


def test_rv_semi_amplitude_earth_and_jupiter():
    # textbook values (from memory): Earth induces ~0.09 m/s on the Sun, Jupiter ~12.5 m/s
    assert masses.rv_semi_amplitude_ms(1.0, 1.0, 365.25) == pytest.approx(0.09, rel=0.02)
    p_jup = orbits.orbital_period_d(5.2, 1.0, M_JUP_MEARTH)
    assert masses.rv_semi_amplitude_ms(M_JUP_MEARTH, 1.0, p_jup) == pytest.approx(12.5, rel=0.02)


def test_rv_semi_amplitude_scalings_and_broadcasting():
    # K ~ sin i / sqrt(1 - e^2) and K ~ P^(-1/3) (Lovis & Fischer 2010)
    k0 = masses.rv_semi_amplitude_ms(10.0, 0.8, 50.0)
    assert masses.rv_semi_amplitude_ms(10.0, 0.8, 50.0, np.pi / 6) == pytest.approx(k0 / 2)
    assert masses.rv_semi_amplitude_ms(10.0, 0.8, 50.0, eccentricity=0.6) == pytest.approx(k0 / 0.8)
    assert masses.rv_semi_amplitude_ms(10.0, 0.8, 400.0) == pytest.approx(k0 / 2)
    k = masses.rv_semi_amplitude_ms(np.array([1.0, 10.0]), np.array([[0.5], [1.0]]), 100.0)
    assert k.shape == (2, 2)
    # momentum balance in a circular edge-on orbit: M_* K = m_p v_p, with v_p from Kepler's law
    a_m = orbits.semi_major_axis_au(100.0, 1.0, 10.0) * const.au.value
    v_rel = 2 * np.pi * a_m / (100.0 * 86400.0)
    m_p, m_s = 10 * const.M_earth.value, const.M_sun.value
    assert masses.rv_semi_amplitude_ms(10.0, 1.0, 100.0) == pytest.approx(
        v_rel * m_p / (m_s + m_p), rel=1e-12)


def test_rv_semi_amplitude_from_orbit_equals_the_kepler_form():
    # K = 2 pi a sin i m_p / (P (M_* + m_p) sqrt(1 - e^2)) with a from Kepler's third law is
    # K = (2 pi G / P)^(1/3) m_p sin i / (M_* + m_p)^(2/3) / sqrt(1 - e^2) (Lovis & Fischer 2010,
    # eq. 1; Murray & Dermott 1999, sec. 2.7): equal to rounding
    rng = np.random.default_rng(3)
    m_p, m_s = 10 ** rng.uniform(-1, 3.5, 500), rng.uniform(0.08, 1.5, 500)
    period, inc, ecc = 10 ** rng.uniform(0, 4, 500), np.arccos(rng.uniform(-1, 1, 500)), rng.uniform(0, 0.9, 500)
    sma = orbits.semi_major_axis_au(period, m_s, m_p)
    expected = masses.rv_semi_amplitude_ms(m_p, m_s, period, inc, ecc)
    got = masses.rv_semi_amplitude_from_orbit_ms(m_p, m_s, period, sma, np.sin(inc), ecc)
    np.testing.assert_allclose(got, expected, rtol=1e-12)
    np.testing.assert_allclose(masses.rv_semi_amplitude_ms(m_p, m_s, period, sin_inclination=np.sin(inc),
                                                           eccentricity=ecc), expected, rtol=1e-15)
    # scalars in, scalar out; edge-on circular by default
    k = masses.rv_semi_amplitude_from_orbit_ms(1.0, 1.0, 365.25, orbits.semi_major_axis_au(365.25, 1.0, 1.0))
    assert np.ndim(k) == 0 and k == pytest.approx(masses.rv_semi_amplitude_ms(1.0, 1.0, 365.25), rel=1e-12)


def test_chen_kipping_from_ln_radius_equals_the_power_form():
    # the same relation through exp(S^-1 (ln R - ln R_TN)) instead of (R / R_TN)^(1/S): equal to rounding,
    # on every branch and on the cap (produced by this code)
    r = np.geomspace(0.3, 30.0, 2001)
    np.testing.assert_allclose(masses.chen_kipping2017_mass_mearth(r, ln_radius=np.log(r)),
                               masses.chen_kipping2017_mass_mearth(r), rtol=1e-13)
    assert np.ndim(masses.chen_kipping2017_mass_mearth(2.0, ln_radius=np.log(2.0))) == 0
