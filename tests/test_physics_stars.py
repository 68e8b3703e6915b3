"""Tests of sweep.physics.stars."""

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest

from sweep.physics import stars
from sweep.physics._constants import T_SUN_K
from sweep.structs import SPECTRAL_CLASSES


def test_nominal_solar_effective_temperature():
    # IAU 2015 Resolution B3 (Prsa et al. 2016, AJ 152, 41): nominal T_eff,sun = 5772 K
    assert T_SUN_K == pytest.approx(5772.0, abs=1.0)
    ref = ((const.L_sun / (4 * np.pi * const.R_sun**2 * const.sigma_sb)) ** 0.25).to_value(u.K)
    assert stars.effective_temperature_K(1.0, 1.0) == pytest.approx(ref, rel=1e-12)  # astropy
    assert stars.luminosity_lsun(1.0, 5772.0) == pytest.approx(1.0, rel=1e-3)


def test_stefan_boltzmann_against_astropy():
    # L = 4 pi R^2 sigma T^4 evaluated with astropy quantities (reference library)
    r = np.array([0.1, 0.5, 1.0, 2.5])
    t = np.array([3000.0, 4000.0, 5772.0, 9000.0])
    ref = (4 * np.pi * (r * const.R_sun) ** 2 * const.sigma_sb * (t * u.K) ** 4 / const.L_sun)
    np.testing.assert_allclose(stars.luminosity_lsun(r, t), ref.decompose().value, rtol=1e-12)


def test_stefan_boltzmann_round_trips():
    # the three forms of the Stefan-Boltzmann law are inverses of each other (definition)
    rng = np.random.default_rng(3)
    r = rng.uniform(0.1, 10, 100)
    t = rng.uniform(2500, 12000, 100)
    lum = stars.luminosity_lsun(r, t)
    np.testing.assert_allclose(stars.effective_temperature_K(lum, r), t, rtol=1e-13)
    np.testing.assert_allclose(stars.radius_rsun(lum, t), r, rtol=1e-13)
    assert np.ndim(stars.radius_rsun(1.0, 5772.0)) == 0
    grid = stars.luminosity_lsun(r[:3, None], t[None, :4])
    assert grid.shape == (3, 4)


def test_main_sequence_relations_at_one_solar_mass():
    # textbook relations (from memory): 1 M_sun gives 1 L_sun, 1 R_sun, so T_eff = T_sun
    assert stars.main_sequence_luminosity_lsun(1.0) == pytest.approx(1.0)
    assert stars.main_sequence_radius_rsun(1.0) == pytest.approx(1.0)
    assert stars.main_sequence_teff_K(1.0) == pytest.approx(5772.0, abs=1.0)


def test_main_sequence_relations_are_monotonic_and_roughly_right():
    # increasing with mass (textbook); an M dwarf of 0.3 M_sun has roughly 0.01 L_sun and
    # T_eff near 3300 K (textbook, from memory; loose)
    m = np.geomspace(0.08, 10, 200)
    assert np.all(np.diff(stars.main_sequence_luminosity_lsun(m)) > 0)
    assert np.all(np.diff(stars.main_sequence_radius_rsun(m)) > 0)
    assert 0.005 < stars.main_sequence_luminosity_lsun(0.3) < 0.03
    assert 2800 < stars.main_sequence_teff_K(0.3) < 3800


def test_spectral_class_codes():
    # boundaries F >= 6000, G 5300-6000, K 3900-5300, M < 3900 K (common practice, from memory)
    t = np.array([9000.0, 7300.0, 6000.0, 5999.0, 5772.0, 5300.0, 5299.0, 3900.0, 3899.0, 2500.0])
    codes = stars.spectral_class_code(t)
    assert codes.dtype == np.int8
    assert [SPECTRAL_CLASSES[c] for c in codes] == ["F", "F", "F", "G", "G", "G", "K", "K", "M", "M"]
    assert SPECTRAL_CLASSES[stars.spectral_class_code(5772.0)] == "G"  # the Sun
    assert stars.spectral_class_code(np.array([[3000.0], [6500.0]])).shape == (2, 1)
