"""Tests of sweep.physics.radiation against astropy, scipy and handbook values."""

import astropy.units as u
import numpy as np
import pytest
from astropy.modeling.models import BlackBody
from scipy.integrate import quad

from sweep.physics import radiation
from sweep.physics._constants import AU_M, C_LIGHT, PC_M, R_SUN_M, T_SUN_K

TEMPS_K = np.geomspace(3.0, 30_000.0, 41)
WAVES_UM = np.geomspace(0.3, 30.0, 37)


@pytest.mark.filterwarnings("ignore:overflow encountered")
def test_planck_nu_matches_astropy():
    # reference library: astropy.modeling.models.BlackBody (per Hz, per sr)
    t, lam = np.meshgrid(TEMPS_K, WAVES_UM, indexing="ij")
    nu = C_LIGHT / (lam * 1e-6)
    ref = BlackBody(t * u.K)(nu * u.Hz).to_value(u.W / (u.m**2 * u.Hz * u.sr))
    got = radiation.planck_nu(nu, t)
    assert np.all(np.isfinite(got))
    # atol only covers values near the float64 underflow (astropy works in cgs, so it flushes
    # to zero at a different point)
    np.testing.assert_allclose(got, ref, rtol=1e-8, atol=1e-280)
    assert np.count_nonzero(ref) > 0.8 * ref.size


@pytest.mark.filterwarnings("ignore:overflow encountered")
def test_planck_lambda_matches_astropy():
    # reference library: astropy BlackBody with a per-wavelength scale returns B_lambda per sr
    t, lam = np.meshgrid(TEMPS_K, WAVES_UM, indexing="ij")
    model = BlackBody(t * u.K, scale=1.0 * u.W / (u.m**2 * u.m * u.sr))
    ref = model(lam * u.um).to_value(u.W / (u.m**2 * u.m * u.sr))
    got = radiation.planck_lambda(lam * 1e-6, t)
    np.testing.assert_allclose(got, ref, rtol=1e-8, atol=1e-280)


def test_planck_scalar_inputs():
    # consistency: B_nu |d nu / d lambda| = B_lambda (Rybicki & Lightman 1979, sec. 1.5)
    lam, t = 10e-6, 300.0
    b_nu = radiation.planck_nu(C_LIGHT / lam, t)
    b_lam = radiation.planck_lambda(lam, t)
    assert np.ndim(b_nu) == 0 and np.ndim(b_lam) == 0
    assert b_nu * C_LIGHT / lam**2 == pytest.approx(b_lam, rel=1e-12)


@pytest.mark.parametrize("center_um, width_um, temp_K", [
    (0.55, 0.11, 5772.0),
    (1.0, 0.5, 3000.0),
    (10.0, 2.0, 300.0),
    (15.0, 5.0, 150.0),
    (5.0, 2.0, 60.0),
    (20.0, 4.0, 1500.0),
])
def test_band_average_matches_quad(center_um, width_um, temp_K):
    # reference library: scipy.integrate.quad of planck_nu over the band divided by its width
    lo, hi = (center_um - width_um / 2) * 1e-6, (center_um + width_um / 2) * 1e-6
    integral, _ = quad(lambda lam: radiation.planck_nu(C_LIGHT / lam, temp_K), lo, hi,
                       epsrel=1e-12, epsabs=0.0)
    ref = integral / (hi - lo)
    assert radiation.band_averaged_planck_nu(center_um, width_um, temp_K) == pytest.approx(
        ref, rel=1e-6)


def test_band_average_broadcasts():
    # consistency with the scalar path (produced by this code)
    temps = np.array([200.0, 300.0, 5000.0])
    centres = np.array([[1.0], [10.0]])
    got = radiation.band_averaged_planck_nu(centres, 0.2 * centres, temps)
    assert got.shape == (2, 3)
    for i, c in enumerate(centres[:, 0]):
        for j, t in enumerate(temps):
            assert got[i, j] == radiation.band_averaged_planck_nu(c, 0.2 * c, t)


def test_narrow_band_average_is_monochromatic():
    # limit of a vanishing band: <B_nu> -> B_nu at the centre (definition)
    got = radiation.band_averaged_planck_nu(10.0, 1e-6, np.array([100.0, 1000.0]))
    ref = radiation.planck_nu(C_LIGHT / 10e-6, np.array([100.0, 1000.0]))
    np.testing.assert_allclose(got, ref, rtol=1e-10)


def test_blackbody_flux_density_of_the_sun_at_10_pc():
    # pi B_nu (R/d)^2 with astropy BlackBody at band centre for a narrow band (reference library)
    d = 10 * PC_M
    got = radiation.blackbody_flux_density_uJy(0.55, 1e-5, T_SUN_K, R_SUN_M, d)
    b = BlackBody(T_SUN_K * u.K)(0.55 * u.um).to_value(u.W / (u.m**2 * u.Hz * u.sr))
    ref = (np.pi * b * (R_SUN_M / d) ** 2 * u.W / u.m**2 / u.Hz).to_value(u.uJy)
    assert got == pytest.approx(ref, rel=1e-7)
    # the Sun at 10 pc (M_V = 4.83) with a ~3.6 kJy V zero point is ~42 Jy (from memory); a
    # 5772 K blackbody is within a few tens of per cent of that
    assert 3e7 < got < 6e7


def test_equilibrium_temperature_of_earth():
    # NSSDCA Earth fact sheet: black-body temperature 254 K for Bond albedo 0.306 (from memory)
    t = radiation.equilibrium_temperature_K(T_SUN_K, 1.0, 1.0, 0.306)
    assert t == pytest.approx(254.0, abs=1.0)
    # f = 1/2 versus 1/4 raises T_eq by 2^(1/4) (Cowan & Agol 2011, ApJ 729, 54)
    t_day = radiation.equilibrium_temperature_K(T_SUN_K, 1.0, 1.0, 0.306, redistribution="dayside")
    assert t_day / t == pytest.approx(2**0.25, rel=1e-12)


def test_equilibrium_temperature_broadcasts_and_rejects_unknown_mode():
    # T_eq ~ a^(-1/2) (Seager 2010, sec. 3.1); shapes broadcast
    t = radiation.equilibrium_temperature_K(np.array([[5000.0], [6000.0]]), 1.0,
                                            np.array([1.0, 4.0]), 0.3)
    assert t.shape == (2, 2)
    np.testing.assert_allclose(t[:, 0] / t[:, 1], 2.0, rtol=1e-12)
    with pytest.raises(ValueError, match="redistribution"):
        radiation.equilibrium_temperature_K(5000.0, 1.0, 1.0, 0.3, redistribution="night")


def test_lambert_phase_values_and_phase_integral():
    # Lambert sphere (Sobolev 1975; Russell 1916): Phi(0)=1, Phi(pi/2)=1/pi, Phi(pi)=0, q=3/2
    assert radiation.lambert_phase(0.0) == pytest.approx(1.0, abs=1e-15)
    assert radiation.lambert_phase(np.pi / 2) == pytest.approx(1 / np.pi, rel=1e-14)
    assert radiation.lambert_phase(np.pi) == pytest.approx(0.0, abs=1e-15)
    q = 2 * quad(lambda a: radiation.lambert_phase(a) * np.sin(a), 0.0, np.pi)[0]  # scipy
    assert q == pytest.approx(1.5, rel=1e-10)
    phi = radiation.lambert_phase(np.linspace(0, np.pi, 50))
    assert np.all(np.diff(phi) < 0)


def test_reflected_contrast_of_earth_at_quadrature():
    # geometric albedo 0.367 (NSSDCA Earth fact sheet, from memory); ~2.1e-10 at quadrature
    # (p / pi (R_earth / 1 au)^2, from memory)
    c = radiation.reflected_contrast(0.367, np.pi / 2, 1.0, 1.0)
    assert c == pytest.approx(2.1e-10, rel=0.05)
    c2 = radiation.reflected_contrast(0.367, np.array([0.0, np.pi / 2]), 1.0, np.array([[1.0], [2.0]]))
    assert c2.shape == (2, 2)
    np.testing.assert_allclose(c2[0] / c2[1], 4.0, rtol=1e-12)  # inverse-square law
    assert c2[0, 0] / c2[0, 1] == pytest.approx(np.pi, rel=1e-12)  # Phi(0)/Phi(pi/2)


def test_geometric_albedo_lambert():
    # p = 2 A_B / 3 for a Lambert sphere (Russell 1916, ApJ 43, 173)
    np.testing.assert_allclose(radiation.geometric_albedo_lambert(np.array([0.0, 0.3, 0.9])),
                               [0.0, 0.2, 0.6], rtol=1e-15)
    assert radiation.geometric_albedo_lambert(0.3) == pytest.approx(0.2)


def test_au_constant():
    # the module's au constant is the IAU 2012 exact value (astropy)
    assert AU_M == 149_597_870_700.0
