"""Tests of sweep.physics.noise and sweep.physics.sky: analytic limits, exact inversions, scalings, priors."""

import math

import astropy.units as u
import numpy as np
import pytest
from astropy.modeling.models import BlackBody
from hypothesis import assume, given, settings
from hypothesis import strategies as st
from scipy import stats
from scipy.integrate import dblquad

from sweep.physics import noise as nz
from sweep.physics import photometry as ph
from sweep.physics import sky

RATE = st.floats(1e-3, 1e4)
SMALL = settings(max_examples=150, deadline=None)


# ---------------------------------------------------------------------------------------------
# SNR: analytic limits (to 1e-9)

def test_snr_pure_photon_noise():
    # analytic: no background, no systematic term -> SNR = sqrt(S t)
    s = np.array([1e-3, 0.5, 3.0, 1e4])
    t = np.array([1e6, 3600.0, 10.0, 1.0])
    np.testing.assert_allclose(nz.snr(s, 0.0, 0.0, t), np.sqrt(s * t), rtol=1e-12)


def test_snr_background_limited():
    # analytic: S << k B -> SNR = S sqrt(t / (k B)); relative error S / (2 k B) <= 5e-11 here
    s, b, k = 1e-6, np.array([1e4, 3e5, 1e7]), np.array([1.0, 2.0, 1.0])
    t = np.array([1e3, 1e5, 1e7])
    got = nz.snr(s, b, 0.2 * b, t, k_background=k)
    np.testing.assert_allclose(got, s * np.sqrt(t / (k * b)), rtol=1e-9)


def test_snr_systematic_ceiling():
    # analytic: t -> infinity gives SNR -> S / (f C); relative error (S + k B) / (2 f^2 C^2 t)
    # is below 1e-10 at t = 1e16 s for these values
    s, b, c, f = np.array([1.0, 0.3]), np.array([10.0, 50.0]), np.array([5.0, 40.0]), 0.01
    ceiling = nz.snr_ceiling(s, c, f)
    np.testing.assert_allclose(ceiling, s / (f * c), rtol=1e-15)
    np.testing.assert_allclose(nz.snr(s, b, c, 1e16, 2.0, f), ceiling, rtol=1e-9)
    assert np.all(nz.snr(s, b, c, 1e3, 2.0, f) < ceiling)
    assert nz.snr_ceiling(1.0, 5.0, 0.0) == np.inf


def test_snr_zero_signal_and_zero_time():
    # definition: no signal or no time gives SNR 0, never NaN
    assert nz.snr(0.0, 0.0, 0.0, 100.0) == 0.0
    assert nz.snr(1.0, 2.0, 1.0, 0.0) == 0.0
    assert nz.time_to_snr(5.0, 0.0, 2.0, 1.0) == np.inf
    assert nz.time_to_snr(0.0, 1.0, 2.0, 1.0) == 0.0
    assert nz.signal_rate_for_snr(5.0, 0.0, 2.0, 1.0) == np.inf


# ---------------------------------------------------------------------------------------------
# exact inversions (property tests)

@SMALL
@given(st.floats(0.5, 50.0), RATE, RATE, st.floats(0.0, 1.0), st.floats(1.0, 3.0),
       st.floats(0.0, 0.1))
def test_time_to_snr_inverts_snr(n, s, b, leak_share, k, f):
    # analytic: the closed-form root of the quadratic is the exact inverse of the SNR formula
    c = leak_share * b
    t = nz.time_to_snr(n, s, b, c, k, f)
    if s <= n * f * c:
        assert t == np.inf
        # and the ceiling indeed lies at or below the target
        assert nz.snr_ceiling(s, c, f) <= n * (1 + 1e-12)
    else:
        assume(t < 1e300)
        assert nz.snr(s, b, c, t, k, f) == pytest.approx(n, rel=1e-9)


@SMALL
@given(st.floats(0.5, 50.0), st.floats(1.0, 1e8), RATE, st.floats(0.0, 1.0), st.floats(1.0, 3.0),
       st.floats(0.0, 0.1))
def test_signal_rate_for_snr_inverts_snr(n, t, b, leak_share, k, f):
    # analytic: positive root of the quadratic in S
    c = leak_share * b
    s = nz.signal_rate_for_snr(n, t, b, c, k, f)
    assert nz.snr(s, b, c, t, k, f) == pytest.approx(n, rel=1e-9)
    # the way back to t amplifies S's rounding by the condition number S^2 / (S^2 - (n f C)^2),
    # large when S nearly sits at the ceiling
    condition = s * s / ((s - n * f * c) * (s + n * f * c))
    assert nz.time_to_snr(n, s, b, c, k, f) == pytest.approx(t, rel=1e-12 * condition + 1e-12)


@SMALL
@given(RATE, RATE, st.floats(0.0, 1.0), st.floats(0.0, 0.1), st.floats(1.0, 1e6),
       st.floats(1.0, 4.0))
def test_snr_increases_with_signal_and_time(s, b, leak_share, f, t, factor):
    # analytic: dSNR/dS > 0 and dSNR/dt >= 0
    c = leak_share * b
    base = nz.snr(s, b, c, t, 1.0, f)
    assert nz.snr(s * factor, b, c, t, 1.0, f) >= base * (1 - 1e-12)
    assert nz.snr(s, b, c, t * factor, 1.0, f) >= base * (1 - 1e-12)


# ---------------------------------------------------------------------------------------------
# flux limit versus the threshold model

def test_flux_limit_separates_detections_exactly():
    # analytic: SNR increases with the planet flux, so the threshold model with F_lim and the
    # photon-noise model agree on every planet whose flux is not within 1e-9 of F_lim
    rng = np.random.default_rng(20261202)
    n_star, n_planet, t = 40, 400, 36000.0
    per_uJy = rng.uniform(5.0, 50.0, n_star)
    background = rng.uniform(10.0, 1e4, n_star)
    leak = rng.uniform(0.0, 1.0, n_star) * background
    f = 0.003
    f_lim = nz.flux_limit_for_snr(5.0, t, background, leak, per_uJy, 2.0, f)
    star = rng.integers(0, n_star, n_planet)
    flux = f_lim[star] * np.exp(rng.uniform(-1.0, 1.0, n_planet))
    noise_detect = nz.snr(flux * per_uJy[star], background[star], leak[star], t, 2.0, f) >= 5.0
    threshold_detect = flux >= f_lim[star]
    clear = np.abs(flux / f_lim[star] - 1.0) > 1e-9
    assert clear.sum() > 0.99 * n_planet
    np.testing.assert_array_equal(noise_detect[clear], threshold_detect[clear])


def test_flux_limit_background_limited_regime():
    # analytic: in the background-limited regime F_lim -> n sqrt(k B / t) / k_F; the exact limit
    # exceeds it by the factor a + sqrt(1 + a^2), a = n / (2 sqrt(k B t)), so the two models
    # disagree only for planets within a relative band a + a^2 / 2 of the limit
    n, k, t, per_uJy = 5.0, 2.0, 36000.0, 20.0
    b = np.array([1e2, 1e3, 1e4])
    exact = nz.flux_limit_for_snr(n, t, b, 0.5 * b, per_uJy, k, 0.0)
    approx = n * np.sqrt(k * b / t) / per_uJy
    a = n / (2.0 * np.sqrt(k * b * t))
    np.testing.assert_allclose(exact / approx, a + np.sqrt(1 + a * a), rtol=1e-12)
    assert np.all(exact / approx - 1.0 <= a + a * a / 2)
    assert np.all(a < 3e-3)  # the regime is background-limited: tolerance below 0.3 %


# ---------------------------------------------------------------------------------------------
# rates: aperture and exozodi scalings

CORONAGRAPH = dict(planet_flux_uJy=0.02, star_flux_uJy=4e7, raw_contrast=1e-10, center_um=0.55,
                   width_um=0.11, throughput=0.2, zodi_uJy_sr=1e5, exozodi_uJy_sr=7e5,
                   instrument_rate=0.01)
NULLER = dict(planet_flux_uJy=0.3, star_flux_uJy=1e8, star_angular_diameter_rad=4.6e-9,
              null_depth=1e-5, baseline_m=20.0, center_um=10.0, width_um=2.0, n_collectors=4,
              throughput=0.05, zodi_uJy_sr=1.2e13, exozodi_uJy_sr=1e14, instrument_rate=5.0)


@SMALL
@given(st.floats(1.0, 12.0), st.floats(1.0, 1e7), st.floats(0.0, 0.05), st.booleans())
def test_doubling_the_aperture(d, t, f, nuller):
    # analytic: point-source rates scale with the area (x4); extended-source rates per
    # resolution element do not change (A Omega ~ lambda^2); hence SNR never drops
    if nuller:
        one = nz.interferometer_rates(collector_diameter_m=d, **NULLER)
        two = nz.interferometer_rates(collector_diameter_m=2 * d, **NULLER)
    else:
        one = nz.coronagraph_rates(diameter_m=d, **CORONAGRAPH)
        two = nz.coronagraph_rates(diameter_m=2 * d, **CORONAGRAPH)
    for name in ("signal", "leak", "per_uJy"):
        assert getattr(two, name) == pytest.approx(4 * getattr(one, name), rel=1e-12)
    for name in ("zodi", "exozodi", "instrument"):
        assert getattr(two, name) == pytest.approx(getattr(one, name), rel=1e-12)
    snr1 = nz.snr(one.signal, one.background, one.leak, t, 2.0, f)
    snr2 = nz.snr(two.signal, two.background, two.leak, t, 2.0, f)
    assert snr2 >= snr1 * (1 - 1e-12)


@SMALL
@given(st.floats(0.0, 100.0), st.floats(1.0, 50.0), st.floats(0.1, 5.0), st.floats(0.05, 3.0),
       st.sampled_from([(0.55, 0.11), (1.0, 0.2), (10.0, 2.0), (15.0, 5.0)]), st.booleans())
def test_more_exozodi_never_raises_snr(z, factor, sep_au, lum, band, nuller):
    # analytic: the exozodi rate grows with the level and enters only the noise
    c, w = band
    rates = []
    for level in (z, z * factor):
        exo = sky.exozodi_uJy_sr(c, w, level, sep_au, lum, 5772.0 * lum ** 0.125)
        kw = dict(center_um=c, width_um=w, exozodi_uJy_sr=exo)
        if nuller:
            r = nz.interferometer_rates(collector_diameter_m=2.0, **{**NULLER, **kw})
        else:
            r = nz.coronagraph_rates(diameter_m=6.0, **{**CORONAGRAPH, **kw})
        rates.append(r)
    lo, hi = (nz.snr(r.signal, r.background, r.leak, 3.6e4, 2.0, 0.01) for r in rates)
    assert hi <= lo * (1 + 1e-12)


def test_coronagraph_rates_compose_photometry():
    # consistency with sweep.physics.photometry: each rate is photon_rate of its flux
    r = nz.coronagraph_rates(diameter_m=6.0, **CORONAGRAPH)
    area = ph.circular_area_m2(6.0)
    omega = ph.resolution_element_sr(0.55, 6.0, 0.7)
    rate = lambda flux: ph.photon_rate(flux, 0.55, 0.11, area, 0.2)  # noqa: E731
    assert r.signal == pytest.approx(rate(0.02), rel=1e-14)
    assert r.leak == pytest.approx(1e-10 * rate(4e7), rel=1e-14)
    assert r.zodi == pytest.approx(rate(1e5 * omega), rel=1e-14)
    assert r.exozodi == pytest.approx(rate(7e5 * omega), rel=1e-14)
    assert r.background == pytest.approx(r.leak + r.zodi + r.exozodi + 0.01, rel=1e-14)


# ---------------------------------------------------------------------------------------------
# leakage

@pytest.mark.parametrize("x", [0.002, 0.01, 0.02])
def test_nuller_finite_star_leakage_matches_disk_integral(x):
    # reference library: scipy dblquad of the exact sin^2(pi B theta_x / lambda) transmission over
    # a uniform disk of diameter theta_* = x lambda / B; the quadratic form is good to
    # O((pi x / 2)^2), below 1e-3 here
    lam_um, baseline = 10.0, 20.0
    theta = x * lam_um * 1e-6 / baseline
    rho = theta / 2
    k = math.pi * baseline / (lam_um * 1e-6)
    integral, _ = dblquad(lambda y, xx: math.sin(k * xx) ** 2, -rho, rho,
                          lambda xx: -math.sqrt(max(rho * rho - xx * xx, 0.0)),
                          lambda xx: math.sqrt(max(rho * rho - xx * xx, 0.0)), epsrel=1e-10)
    ref = integral / (math.pi * rho * rho)
    got = nz.nuller_leak_fraction(0.0, theta, baseline, lam_um)
    assert got == pytest.approx(ref, rel=1e-3)
    assert nz.nuller_leak_fraction(1e-5, theta, baseline, lam_um) == pytest.approx(got + 1e-5,
                                                                                  rel=1e-14)


def test_stellar_angular_diameter():
    # reference library: astropy units, 2 R_sun / 10 pc in radians (about 0.93 mas, from memory)
    ref = (2 * u.R_sun / (10 * u.pc)).decompose().value
    assert nz.stellar_angular_diameter_rad(1.0, 10.0) == pytest.approx(ref, rel=1e-12)
    assert (nz.stellar_angular_diameter_rad(1.0, 10.0) * u.rad).to_value(u.mas) == pytest.approx(
        0.93, abs=0.01)


def test_coronagraph_leak_and_detector_rate():
    # definitions: C = contrast x star rate; CCD equation n_pix (D + RN^2 / t_frame)
    assert nz.coronagraph_leak_rate(2e6, 1e-10) == pytest.approx(2e-4, rel=1e-15)
    assert nz.detector_rate(1e-3, 2.0, 4, 100.0) == pytest.approx(4 * (1e-3 + 0.04), rel=1e-15)


# ---------------------------------------------------------------------------------------------
# local zodiacal light and exozodi

def test_zodi_visible_values():
    # Leinert et al. 1998, A&AS 127, 1: ~60 S10 at the ecliptic pole (V ~ 23.3 mag/arcsec^2) and
    # ~260 S10 in the ecliptic at 90 deg elongation (V ~ 21.7); from memory, 0.1 mag
    assert sky.zodi_visible_mag_arcsec2(90.0) == pytest.approx(23.3, abs=0.1)
    assert sky.zodi_visible_mag_arcsec2(0.0) == pytest.approx(21.7, abs=0.1)
    # 1 S10 = 27.78 V mag/arcsec^2 (definition: a V = 10 star per square degree)
    assert sky.S10_V_MAG_ARCSEC2 == pytest.approx(27.78, abs=0.005)
    beta = np.linspace(-90.0, 90.0, 181)
    mu = sky.zodi_visible_mag_arcsec2(beta)
    np.testing.assert_array_equal(mu, mu[::-1])  # symmetric about the ecliptic
    assert np.all(np.diff(mu[90:]) >= 0.0)  # fainter towards the pole
    # unknown latitude: the median |beta| of isotropic directions, 30 deg
    assert sky.zodi_visible_mag_arcsec2(np.nan) == sky.zodi_visible_mag_arcsec2(30.0)


def test_local_zodi_v_band_matches_visible_fit():
    # consistency: in V the model is the fitted V surface brightness (thermal part negligible)
    beta = np.array([0.0, 20.0, 55.0, 90.0])
    i_v = sky.local_zodi_uJy_sr(ph.BAND_CENTERS_UM["V"], ph.BAND_WIDTHS_UM["V"], beta)
    np.testing.assert_allclose(ph.uJy_sr_to_surface_brightness(i_v, "V"),
                               sky.zodi_visible_mag_arcsec2(beta), atol=1e-9)


def test_local_zodi_mid_infrared_is_grey_body():
    # reference library: astropy BlackBody at 265 K times tau = 7.1e-8 at the ecliptic pole
    # (grey-body fit to Kelsall et al. 1998, from memory); scattered light is < 1e-3 at 10 um
    ref = 7.1e-8 * BlackBody(265.0 * u.K)(10.0 * u.um).to_value(u.uJy / u.sr)
    assert sky.local_zodi_uJy_sr(10.0, 1e-3, 90.0) == pytest.approx(ref, rel=1e-3)
    # same latitude profile as the visible: ecliptic / pole = 259 / 60 S10
    ratio = sky.local_zodi_uJy_sr(10.0, 1e-3, 0.0) / sky.local_zodi_uJy_sr(10.0, 1e-3, 90.0)
    assert ratio == pytest.approx(259.0 / 60.0, rel=1e-3)


def test_exozodi_one_zodi_solar_twin_in_v():
    # Stark et al. 2014, ApJ 795, 122 (from memory): 1 zodi = 22 V mag/arcsec^2 at the
    # Earth-equivalent distance of a solar twin, face-on
    c, w = ph.BAND_CENTERS_UM["V"], ph.BAND_WIDTHS_UM["V"]
    i = sky.exozodi_uJy_sr(c, w, 1.0, 1.0, 1.0, 5772.0)
    assert ph.uJy_sr_to_surface_brightness(i, "V") == pytest.approx(22.0, abs=0.01)


def test_exozodi_scalings():
    c, w = 0.55, 0.1
    base = sky.exozodi_uJy_sr(c, w, 1.0, 1.0, 1.0, 5772.0)
    # analytic: proportional to the level
    assert sky.exozodi_uJy_sr(c, w, 7.5, 1.0, 1.0, 5772.0) == pytest.approx(7.5 * base, rel=1e-14)
    # analytic: scattered light ~ tau(r) x stellar flux(r) ~ r^-0.34 r^-2 (thermal negligible in V)
    assert sky.exozodi_uJy_sr(c, w, 1.0, 2.0, 1.0, 5772.0) == pytest.approx(
        base * 2.0 ** -2.34, rel=1e-9)
    # analytic: at the Earth-equivalent distance sqrt(L) a star of the same temperature has the
    # same disk brightness, scattered and thermal
    for cc, ww in [(c, w), (10.0, 2.0), (20.0, 4.0)]:
        assert sky.exozodi_uJy_sr(cc, ww, 1.0, 2.0, 4.0, 5772.0) == pytest.approx(
            sky.exozodi_uJy_sr(cc, ww, 1.0, 1.0, 1.0, 5772.0), rel=1e-12)


def test_exozodi_thermal_is_grey_body():
    # reference library: astropy BlackBody at 286 K (r / sqrt(L))^-0.467 times
    # 2 x 7.1e-8 (r / sqrt(L))^-0.34 (Kelsall et al. 1998 slopes, from memory); at 15 um the
    # scattered starlight is below 1e-4 of it
    r, lum = 1.7, 0.6
    x = r / math.sqrt(lum)
    ref = 2 * 7.1e-8 * x**-0.34 * BlackBody(286.0 * x**-0.467 * u.K)(15.0 * u.um).to_value(
        u.uJy / u.sr)
    assert sky.exozodi_uJy_sr(15.0, 1.5e-3, 1.0, r, lum, 5000.0) == pytest.approx(ref, rel=1e-3)


# ---------------------------------------------------------------------------------------------
# exozodi prior

def test_exozodi_level_is_lognormal_inverse_cdf():
    # reference library: scipy.stats.lognorm.ppf with s = sigma, scale = median
    q = np.linspace(0.001, 0.999, 101)
    ref = stats.lognorm.ppf(q, s=1.3, scale=4.0)
    np.testing.assert_allclose(nz.exozodi_level(q, 4.0, 1.3), ref, rtol=1e-12)
    np.testing.assert_allclose(nz.exozodi_level(q, 4.0, 1.3, scale=2.5), 2.5 * ref, rtol=1e-12)
    assert nz.exozodi_level(0.5) == pytest.approx(nz.EXOZODI_MEDIAN_ZODI, rel=1e-14)
    np.testing.assert_array_equal(nz.exozodi_level(np.array([0.0, 0.3, 1.0]), 3.0, 0.0), 3.0)


def test_exozodi_level_sample_statistics():
    # statistical: ln z of 1e5 draws has mean ln(median) and sd sigma, each within 4 standard errors
    n = 100_000
    z = nz.exozodi_level(np.random.default_rng(7).random(n), 3.0, 1.0)
    ln = np.log(z)
    assert abs(ln.mean() - math.log(3.0)) < 4 * 1.0 / math.sqrt(n)
    assert abs(ln.std() - 1.0) < 4 * 1.0 / math.sqrt(2 * n)


# ---------------------------------------------------------------------------------------------
# time allocation

def test_allocate_time_budget_worked_example():
    # worked by hand from the documented rule: merits 1, 2, 1/3 -> order 1, 0, 2; budget 3 takes
    # star 1 (2 s) and star 0 (1 s); star 3 is unreachable
    got = nz.allocate_time_budget([1.0, 2.0, 3.0, np.inf], [1.0, 4.0, 1.0, 9.0], 3.0)
    np.testing.assert_array_equal(got, [1.0, 2.0, 0.0, 0.0])


@SMALL
@given(st.lists(st.tuples(st.floats(1.0, 1e5), st.floats(0.0, 3.0), st.booleans()),
                min_size=1, max_size=30),
       st.floats(0.0, 5e5))
def test_allocate_time_budget_properties(stars, budget):
    # definition of the greedy rule: within budget; the chosen stars are the best-merit prefix;
    # the next star in merit order would not have fit
    t = np.array([s[0] if s[2] else np.inf for s in stars])
    e = np.array([s[1] for s in stars])
    got = nz.allocate_time_budget(t, e, budget)
    chosen = got > 0
    assert got.sum() <= budget * (1 + 1e-12)
    np.testing.assert_array_equal(got[chosen], t[chosen])
    usable = np.isfinite(t) & (e > 0)
    assert not np.any(chosen & ~usable)
    merit = np.where(usable, e / np.where(usable, t, 1.0), -np.inf)
    order = np.argsort(-merit, kind="stable")
    taken = chosen[order]
    k = int(taken.sum())
    assert np.all(taken[:k]) and not np.any(taken[k:])
    if k < usable.sum():
        assert got.sum() + t[order[k]] > budget


def test_allocate_time_budget_broadcasts_over_grid_points():
    # consistency: a leading axis of grid points equals separate calls
    rng = np.random.default_rng(3)
    t = rng.uniform(1.0, 10.0, (4, 25))
    e = rng.uniform(0.0, 1.0, (4, 25))
    budgets = np.array([0.0, 10.0, 50.0, 1e3])
    got = nz.allocate_time_budget(t, e, budgets)
    for i in range(4):
        np.testing.assert_array_equal(got[i], nz.allocate_time_budget(t[i], e[i], budgets[i]))
