"""Tests of sweep.physics.photometry against scipy, astropy and handbook values."""

import math

import astropy.units as u
import numpy as np
import pytest
from astropy.modeling.models import BlackBody
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import quad

from sweep.physics import photometry as ph
from sweep.physics._constants import C_LIGHT, H_PLANCK, PC_M, R_SUN_M, T_SUN_K, UJY_SI
from sweep.physics.radiation import blackbody_flux_density_uJy


@pytest.mark.parametrize("center_um, width_um", [(0.545, 0.088), (0.5, 0.1), (1.6, 0.3),
                                                 (10.0, 2.0), (15.0, 10.0)])
def test_photon_rate_matches_quad(center_um, width_um):
    # reference library: scipy.integrate.quad of F_nu A tau / (h nu) d nu over the band
    flux_uJy, area, tau = 12.5, 7.3, 0.31
    nu_lo = C_LIGHT / ((center_um + width_um / 2) * 1e-6)
    nu_hi = C_LIGHT / ((center_um - width_um / 2) * 1e-6)
    ref, _ = quad(lambda nu: flux_uJy * UJY_SI * area * tau / (H_PLANCK * nu), nu_lo, nu_hi,
                  epsrel=1e-13)
    got = ph.photon_rate(flux_uJy, center_um, width_um, area, tau)
    assert got == pytest.approx(ref, rel=1e-10)
    assert ph.photon_rate_per_uJy(center_um, width_um, area, tau) * flux_uJy == pytest.approx(
        got, rel=1e-14)


def test_photon_rate_broadcasts():
    # consistency: array evaluation equals element-by-element scalar evaluation
    f = np.array([[1.0], [2.0], [3.0]])
    c = np.array([0.5, 1.0, 10.0, 20.0])
    got = ph.photon_rate(f, c, 0.2 * c, 3.0, 0.5)
    assert got.shape == (3, 4)
    for i in range(3):
        for j in range(4):
            assert got[i, j] == pytest.approx(ph.photon_rate(f[i, 0], c[j], 0.2 * c[j], 3.0, 0.5),
                                              rel=1e-14)


def test_circular_area():
    # analytic: n pi D^2 / 4
    assert ph.circular_area_m2(2.0) == pytest.approx(math.pi, rel=1e-15)
    np.testing.assert_allclose(ph.circular_area_m2(np.array([1.0, 4.0]), 4),
                               [math.pi, 16 * math.pi], rtol=1e-15)


def test_vega_zero_magnitude_is_zero_point():
    # Bessell, Castelli & Plez 1998, A&A 333, 231, table A2: V zero point 3636 Jy (from memory)
    assert ph.magnitude_to_flux_density_uJy(0.0, "V") == pytest.approx(3636e6, rel=1e-12)
    # Pogson's ratio: 5 magnitudes = factor 100 exactly
    assert ph.magnitude_to_flux_density_uJy(5.0, "K") == pytest.approx(640e6 / 100, rel=1e-12)


@settings(max_examples=100, deadline=None)
@given(st.floats(-5.0, 35.0), st.sampled_from(list(ph.VEGA_ZERO_POINTS_JY)))
def test_magnitude_round_trip(mag, band):
    # consistency: the two conversions are inverses
    flux = ph.magnitude_to_flux_density_uJy(mag, band)
    assert ph.flux_density_uJy_to_magnitude(flux, band) == pytest.approx(mag, abs=1e-10)
    sb = ph.surface_brightness_to_uJy_sr(mag, band)
    assert ph.uJy_sr_to_surface_brightness(sb, band) == pytest.approx(mag, abs=1e-10)


def test_unknown_band_is_refused():
    with pytest.raises(ValueError, match="unknown photometric band 'Z'"):
        ph.magnitude_to_flux_density_uJy(1.0, "Z")


def test_sun_absolute_v_magnitude():
    # Willmer 2018, ApJS 236, 47: M_V(Sun) = 4.81 (from memory); a 5772 K blackbody of one
    # nominal solar radius at 10 pc through V (centre 0.545 um, width 0.088 um, Bessell et al.
    # 1998 / Binney & Merrifield 1998) with the 3636 Jy zero point; 0.1 mag tolerance (the Sun is
    # not a blackbody)
    c, w = ph.BAND_CENTERS_UM["V"], ph.BAND_WIDTHS_UM["V"]
    assert (c, w) == (0.545, 0.088)
    flux = blackbody_flux_density_uJy(c, w, T_SUN_K, R_SUN_M, 10.0 * PC_M)
    assert ph.flux_density_uJy_to_magnitude(flux, "V") == pytest.approx(4.81, abs=0.1)


def test_arcsec2_per_sr():
    # analytic: (180 / pi * 3600)^2 arcsec^2 per steradian
    assert ph.ARCSEC2_PER_SR == pytest.approx((180.0 / math.pi * 3600.0) ** 2, rel=1e-14)


def test_surface_brightness_of_one_s10():
    # definition of S10: one V = 10 mag star per square degree (Leinert et al. 1998, A&AS 127, 1)
    per_deg2 = ph.magnitude_to_flux_density_uJy(10.0, "V")
    sb = ph.uJy_sr_to_surface_brightness(per_deg2 * (u.sr.to(u.deg**2)), "V")
    assert sb == pytest.approx(10.0 + 2.5 * math.log10(3600.0**2), abs=1e-10)


def test_single_mode_solid_angle():
    # analytic: one spatial mode has etendue A Omega = lambda^2 (common practice)
    lam_um, d = np.array([0.55, 10.0, 20.0]), np.array([2.0, 3.5, 8.0])
    omega = ph.resolution_element_sr(lam_um, d, ph.SINGLE_MODE_RADIUS_LOD)
    np.testing.assert_allclose(omega * ph.circular_area_m2(d), (lam_um * 1e-6) ** 2, rtol=1e-14)
    # analytic: pi (0.7 lambda / D)^2
    assert ph.resolution_element_sr(1.0, 1.0) == pytest.approx(math.pi * 0.49e-12, rel=1e-14)


def test_greybody_matches_astropy():
    # reference library: astropy BlackBody at the centre of a very narrow band, times emissivity
    for lam_um, t_k in [(10.0, 265.0), (0.55, 5772.0), (20.0, 150.0)]:
        ref = 0.3 * BlackBody(t_k * u.K)(lam_um * u.um).to_value(u.uJy / u.sr)
        assert ph.greybody_uJy_sr(lam_um, 1e-4 * lam_um, t_k, 0.3) == pytest.approx(ref, rel=1e-7)


def test_extended_source_rate_is_point_rate_of_integrated_flux():
    # consistency: I Omega treated as a point flux
    got = ph.extended_source_rate(2e9, 3e-12, 10.0, 2.0, 5.0, 0.2)
    assert got == pytest.approx(ph.photon_rate(2e9 * 3e-12, 10.0, 2.0, 5.0, 0.2), rel=1e-14)
