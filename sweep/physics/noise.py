"""Photon-noise detection model: stellar leakage, count rates, SNR, time and exozodi levels.

The equations, each term with its source, are in ``docs/noise_model.md``; the sky backgrounds
(local zodiacal and exozodiacal light) are in :mod:`sweep.physics.sky`. Rates are detected
photons per second [photons s^-1], times in seconds [s], surface brightnesses in [uJy sr^-1];
everything broadcasts over numpy arrays (stars, planets, rows).

The model of a detection: after an integration time t,

    SNR = S t / sqrt((S + k B) t + (f C t)^2),

with S the planet's rate, B the total background rate (stellar leakage C included), k the
background-subtraction factor and f the *systematic fraction*: the fraction of the leaked starlight
whose fluctuations (speckle drift, null instability) do not average down with time.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from scipy.special import ndtri

from ._constants import PC_M, R_SUN_M
from .photometry import (SINGLE_MODE_RADIUS_LOD, circular_area_m2, photon_rate_per_uJy,
                         resolution_element_sr)

#: Population prior of exozodi levels: lognormal, median [zodi] (Ertel et al. 2020, AJ 159, 177,
#: median of about 3 zodis for Sun-like stars; from memory) and log-width [1] (our choice, not a
#: fit; it puts the 95th percentile near 15 zodis).
EXOZODI_MEDIAN_ZODI = 3.0
EXOZODI_SIGMA_LN = 1.0


def _scalar_or_array(x):
    x = np.asarray(x, dtype=np.float64)
    return x[()] if x.ndim == 0 else x


# ---------------------------------------------------------------------------------------------
# instrument background


def detector_rate(dark_rate, read_noise_e, n_pixels, frame_time_s):
    """Detector noise as an equivalent background count rate (its variance per second).

    B_det = n_pix (D + sigma_read^2 / t_frame).

    Parameters
    ----------
    dark_rate : float or array_like
        Dark current (and clock-induced charge) per pixel [e- s^-1].
    read_noise_e : float or array_like
        Read noise per pixel per frame [e- rms].
    n_pixels : float or array_like
        Pixels in the photometric aperture [1].
    frame_time_s : float or array_like
        Time between reads [s].

    Returns
    -------
    float or ndarray
        Equivalent background rate [counts s^-1].

    References
    ----------
    .. [1] Howell, S. B. 2006, Handbook of CCD Astronomy, 2nd ed. (Cambridge), sec. 4.4
       (the CCD equation; from memory).
    """
    rn = np.asarray(read_noise_e, np.float64)
    return _scalar_or_array(np.asarray(n_pixels, np.float64) * (
        np.asarray(dark_rate, np.float64) + rn * rn / np.asarray(frame_time_s, np.float64)))


# ---------------------------------------------------------------------------------------------
# stellar leakage


def stellar_angular_diameter_rad(radius_rsun, distance_pc):
    """Angular diameter of a star: theta_* = 2 R_* / d (small angles).

    Parameters
    ----------
    radius_rsun : float or array_like
        Stellar radius [R_sun].
    distance_pc : float or array_like
        Distance [pc].

    Returns
    -------
    float or ndarray
        Angular diameter [rad].
    """
    return _scalar_or_array(2.0 * R_SUN_M * np.asarray(radius_rsun, np.float64)
                            / (PC_M * np.asarray(distance_pc, np.float64)))


def coronagraph_leak_rate(star_rate, raw_contrast):
    """Stellar leakage of a coronagraph in the planet's photometric aperture: C = c(r) N_*.

    Parameters
    ----------
    star_rate : float or array_like
        Photon rate of the unocculted star through the same band and throughput [photons s^-1].
    raw_contrast : float or array_like
        Raw contrast at the planet's separation [1].

    Returns
    -------
    float or ndarray
        Leaked stellar rate [photons s^-1].
    """
    return _scalar_or_array(np.asarray(star_rate, np.float64) * np.asarray(raw_contrast,
                                                                           np.float64))


def nuller_leak_fraction(null_depth, star_angular_diameter_rad, baseline_m, center_um):
    """Fraction of the starlight transmitted by a two-beam (Bracewell) nuller.

    L = N + (pi^2 / 16) (theta_* B / lambda)^2: the instrumental null depth N plus the
    geometric leakage of a uniform stellar disk of angular diameter theta_* through the
    transmission sin^2(pi B theta_x / lambda) ~ (pi B theta_x / lambda)^2 (normalised to 1 at
    the peak), averaged over the disk (<theta_x^2> = theta_*^2 / 16).

    Parameters
    ----------
    null_depth : float or array_like
        Instrumental null depth N [1].
    star_angular_diameter_rad : float or array_like
        Stellar angular diameter theta_* [rad].
    baseline_m : float or array_like
        Nulling baseline B [m].
    center_um : float or array_like
        Wavelength [um].

    Returns
    -------
    float or ndarray
        Transmitted fraction of the star's photons [1].

    References
    ----------
    .. [1] Bracewell, R. N. 1978, Nature 274, 780 (doi:10.1038/274780a0; from memory).
    """
    u = (math.pi / 4.0) * np.asarray(star_angular_diameter_rad, np.float64) * np.asarray(
        baseline_m, np.float64) / (np.asarray(center_um, np.float64) * 1e-6)
    return _scalar_or_array(np.asarray(null_depth, np.float64) + u * u)


# ---------------------------------------------------------------------------------------------
# rates of one observation


class NoiseRates(NamedTuple):
    """Detected count rates of one observation of a planet in one band [photons s^-1].

    ``per_uJy`` converts a planet flux density into ``signal`` [photons s^-1 uJy^-1];
    ``background`` is the sum of every rate other than the planet's (the leak included).
    """

    signal: np.ndarray
    leak: np.ndarray
    zodi: np.ndarray
    exozodi: np.ndarray
    instrument: np.ndarray
    per_uJy: np.ndarray

    @property
    def background(self):
        """Total background rate B = C + zodi + exozodi + instrument [photons s^-1]."""
        return self.leak + self.zodi + self.exozodi + self.instrument


def coronagraph_rates(planet_flux_uJy, star_flux_uJy, raw_contrast, center_um, width_um,
                      diameter_m, throughput, zodi_uJy_sr, exozodi_uJy_sr, instrument_rate=0.0,
                      aperture_radius_lod=0.7):
    """Count rates of a coronagraphic observation.

    S = F_p k_b A tau; C = c N_* with N_* = F_* k_b A tau; zodi and exozodi = I Omega k_b A tau
    with Omega = pi (r lambda / D)^2 and k_b = ln(lambda_max / lambda_min) / h
    (:func:`~sweep.physics.photometry.photon_rate_per_uJy`).

    Parameters
    ----------
    planet_flux_uJy, star_flux_uJy : float or array_like
        Flux densities of the planet and the star [uJy].
    raw_contrast : float or array_like
        Raw contrast at the planet's separation [1].
    center_um, width_um : float or array_like
        Band centre and full width [um].
    diameter_m : float or array_like
        Telescope diameter D [m].
    throughput : float or array_like
        End-to-end throughput for off-axis light [1].
    zodi_uJy_sr, exozodi_uJy_sr : float or array_like
        Local and exozodiacal specific intensities at the planet [uJy sr^-1].
    instrument_rate : float or array_like, optional
        Detector and thermal instrument background [counts s^-1].
    aperture_radius_lod : float, optional
        Photometric aperture radius [lambda/D].

    Returns
    -------
    NoiseRates
    """
    area = circular_area_m2(diameter_m)
    per_uJy = photon_rate_per_uJy(center_um, width_um, area, throughput)
    omega = resolution_element_sr(center_um, diameter_m, aperture_radius_lod)
    star = np.asarray(star_flux_uJy, np.float64) * per_uJy
    return _rates(planet_flux_uJy, per_uJy, coronagraph_leak_rate(star, raw_contrast),
                  omega * per_uJy, zodi_uJy_sr, exozodi_uJy_sr, instrument_rate)


def interferometer_rates(planet_flux_uJy, star_flux_uJy, star_angular_diameter_rad, null_depth,
                         baseline_m, center_um, width_um, collector_diameter_m, n_collectors,
                         throughput, zodi_uJy_sr, exozodi_uJy_sr, instrument_rate=0.0,
                         extended_transmission=0.5):
    """Count rates of a nulling-interferometer observation (planet at peak transmission).

    S = F_p k_b A tau with A = n pi D^2 / 4; C = L N_* (:func:`nuller_leak_fraction`);
    extended sources = I Omega k_b A tau t_ext with Omega = lambda^2 / (pi D^2 / 4), one spatial
    mode per collector, and t_ext the mean transmission of the fringe pattern over the field
    (1/2 for sin^2 fringes).

    Parameters
    ----------
    planet_flux_uJy, star_flux_uJy : float or array_like
        Flux densities of the planet and the star [uJy].
    star_angular_diameter_rad : float or array_like
        Stellar angular diameter [rad] (:func:`stellar_angular_diameter_rad`).
    null_depth : float or array_like
        Instrumental null depth [1].
    baseline_m : float or array_like
        Nulling baseline [m].
    center_um, width_um : float or array_like
        Band centre and full width [um].
    collector_diameter_m : float or array_like
        Diameter of one collector D [m].
    n_collectors : float or array_like
        Number of collectors [1].
    throughput : float or array_like
        End-to-end throughput for the planet [1].
    zodi_uJy_sr, exozodi_uJy_sr : float or array_like
        Local and exozodiacal specific intensities [uJy sr^-1].
    instrument_rate : float or array_like, optional
        Detector and thermal instrument background [counts s^-1].
    extended_transmission : float or array_like, optional
        Mean fringe transmission for extended sources [1].

    Returns
    -------
    NoiseRates
    """
    area = circular_area_m2(collector_diameter_m, n_collectors)
    per_uJy = photon_rate_per_uJy(center_um, width_um, area, throughput)
    omega = resolution_element_sr(center_um, collector_diameter_m, SINGLE_MODE_RADIUS_LOD)
    leak = np.asarray(star_flux_uJy, np.float64) * per_uJy * nuller_leak_fraction(
        null_depth, star_angular_diameter_rad, baseline_m, center_um)
    extended = omega * per_uJy * np.asarray(extended_transmission, np.float64)
    return _rates(planet_flux_uJy, per_uJy, leak, extended, zodi_uJy_sr, exozodi_uJy_sr,
                  instrument_rate)


def _rates(planet_flux_uJy, per_uJy, leak, extended_per_uJy_sr, zodi, exozodi, instrument):
    arrays = np.broadcast_arrays(
        np.asarray(planet_flux_uJy, np.float64) * per_uJy, leak,
        extended_per_uJy_sr * np.asarray(zodi, np.float64),
        extended_per_uJy_sr * np.asarray(exozodi, np.float64),
        np.asarray(instrument, np.float64), np.asarray(per_uJy, np.float64))
    return NoiseRates(*(_scalar_or_array(a) for a in arrays))


# ---------------------------------------------------------------------------------------------
# signal-to-noise ratio and time


def snr(signal_rate, background_rate, leak_rate, time_s, k_background=1.0,
        systematic_fraction=0.0):
    """Signal-to-noise ratio after an integration time.

    SNR = S t / sqrt((S + k B) t + (f C t)^2); 0 where S t = 0.

    Parameters
    ----------
    signal_rate : float or array_like
        Planet rate S [photons s^-1].
    background_rate : float or array_like
        Total background rate B, stellar leakage included [photons s^-1].
    leak_rate : float or array_like
        Stellar leakage rate C [photons s^-1].
    time_s : float or array_like
        Integration time t [s].
    k_background : float or array_like, optional
        Background-subtraction factor k [1]: 1 for a perfectly known background, 2 for one
        measured in an equal time.
    systematic_fraction : float or array_like, optional
        Fraction f of the leak whose fluctuations do not average down [1].

    Returns
    -------
    float or ndarray
        Signal-to-noise ratio [1].

    References
    ----------
    .. [1] Howell, S. B. 2006, Handbook of CCD Astronomy, 2nd ed. (Cambridge), sec. 4.4
       (photon-noise SNR; from memory). The systematic term is common practice.
    """
    s = np.asarray(signal_rate, np.float64)
    t = np.asarray(time_s, np.float64)
    fct = np.asarray(systematic_fraction, np.float64) * np.asarray(leak_rate, np.float64) * t
    var = (s + np.asarray(k_background, np.float64) * np.asarray(background_rate, np.float64)) * t
    var = var + fct * fct
    num = s * t
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.where(num > 0.0, num / np.sqrt(var), 0.0)
    return _scalar_or_array(out)


def snr_ceiling(signal_rate, leak_rate, systematic_fraction):
    """Limit of :func:`snr` for long integrations: S / (f C) (infinite where f C = 0).

    Parameters
    ----------
    signal_rate : float or array_like
        Planet rate S [photons s^-1].
    leak_rate : float or array_like
        Stellar leakage rate C [photons s^-1].
    systematic_fraction : float or array_like
        Systematic fraction f [1].

    Returns
    -------
    float or ndarray
        Highest reachable signal-to-noise ratio [1].
    """
    fc = np.asarray(systematic_fraction, np.float64) * np.asarray(leak_rate, np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        return _scalar_or_array(np.where(fc > 0.0, np.asarray(signal_rate, np.float64) / fc,
                                         np.inf))


def time_to_snr(snr_target, signal_rate, background_rate, leak_rate, k_background=1.0,
                systematic_fraction=0.0):
    """Integration time to reach a signal-to-noise ratio; exact inverse of :func:`snr`.

    Squaring SNR = n gives the quadratic (S^2 - n^2 f^2 C^2) t^2 - n^2 (S + k B) t = 0, whose
    roots are 0 and t = n^2 (S + k B) / (S^2 - n^2 f^2 C^2); infinite where S <= n f C (the
    ceiling S / (f C) lies at or below n).

    Parameters
    ----------
    snr_target : float or array_like
        Target signal-to-noise ratio n [1].
    signal_rate, background_rate, leak_rate : float or array_like
        S, B (leak included) and C [photons s^-1].
    k_background : float or array_like, optional
        Background-subtraction factor k [1].
    systematic_fraction : float or array_like, optional
        Systematic fraction f [1].

    Returns
    -------
    float or ndarray
        Integration time [s].
    """
    n = np.asarray(snr_target, np.float64)
    s = np.asarray(signal_rate, np.float64)
    nfc = n * np.asarray(systematic_fraction, np.float64) * np.asarray(leak_rate, np.float64)
    denom = (s - nfc) * (s + nfc)
    num = n * n * (s + np.asarray(k_background, np.float64) * np.asarray(background_rate,
                                                                          np.float64))
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.where(denom > 0.0, num / denom, np.inf)
    return _scalar_or_array(np.where(n <= 0.0, 0.0, out))


def signal_rate_for_snr(snr_target, time_s, background_rate, leak_rate, k_background=1.0,
                        systematic_fraction=0.0):
    """Planet rate that reaches exactly a signal-to-noise ratio in a given time.

    Solving S^2 t^2 = n^2 ((S + k B) t + (f C t)^2) for S > 0:
    S = n^2 / (2 t) + sqrt(n^4 / (4 t^2) + n^2 (k B / t + f^2 C^2)).
    :func:`snr` increases with S, so planets with a larger rate reach the target and smaller
    ones do not.

    Parameters
    ----------
    snr_target : float or array_like
        Target signal-to-noise ratio n [1].
    time_s : float or array_like
        Integration time t [s]; 0 gives an infinite rate.
    background_rate, leak_rate : float or array_like
        B (leak included) and C [photons s^-1].
    k_background : float or array_like, optional
        Background-subtraction factor k [1].
    systematic_fraction : float or array_like, optional
        Systematic fraction f [1].

    Returns
    -------
    float or ndarray
        Limiting planet rate [photons s^-1].
    """
    n = np.asarray(snr_target, np.float64)
    t = np.asarray(time_s, np.float64)
    fc = np.asarray(systematic_fraction, np.float64) * np.asarray(leak_rate, np.float64)
    kb = np.asarray(k_background, np.float64) * np.asarray(background_rate, np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        half = n * n / (2.0 * t)
        out = half + np.sqrt(half * half + n * n * (kb / t + fc * fc))
    return _scalar_or_array(np.where(t > 0.0, out, np.inf))


def flux_limit_for_snr(snr_target, time_s, background_rate, leak_rate, rate_per_uJy,
                       k_background=1.0, systematic_fraction=0.0):
    """Limiting planet flux density: the one that reaches exactly ``snr_target`` in ``time_s``.

    F_lim = S_lim / k_F with S_lim from :func:`signal_rate_for_snr` and k_F the detected rate per
    uJy (``NoiseRates.per_uJy``). Used as the flux limit of the threshold model, it detects the
    same planets as the photon-noise model whenever the background does not depend on the planet.

    Parameters
    ----------
    snr_target : float or array_like
        Detection threshold n [1].
    time_s : float or array_like
        Integration time [s].
    background_rate, leak_rate : float or array_like
        B (leak included) and C [photons s^-1].
    rate_per_uJy : float or array_like
        Detected planet rate per unit flux density [photons s^-1 uJy^-1].
    k_background : float or array_like, optional
        Background-subtraction factor k [1].
    systematic_fraction : float or array_like, optional
        Systematic fraction f [1].

    Returns
    -------
    float or ndarray
        Limiting flux density [uJy].
    """
    s_lim = signal_rate_for_snr(snr_target, time_s, background_rate, leak_rate, k_background,
                                systematic_fraction)
    return _scalar_or_array(s_lim / np.asarray(rate_per_uJy, np.float64))


# ---------------------------------------------------------------------------------------------
# exozodi levels and time allocation


def exozodi_level(uniform, median_zodi=EXOZODI_MEDIAN_ZODI, sigma_ln=EXOZODI_SIGMA_LN, scale=1.0):
    """Per-star exozodi levels from uniforms by the inverse CDF of a lognormal prior.

    z = s * m * exp(sigma Phi^-1(u)), with Phi^-1 the standard normal quantile; one uniform per
    star (common random numbers: a changed ``median_zodi``, ``sigma_ln`` or ``scale`` moves
    every level smoothly).

    Parameters
    ----------
    uniform : float or array_like
        Uniforms in (0, 1) [1], e.g. from the row's ``STAR_PROPERTIES`` stream.
    median_zodi : float or array_like, optional
        Median m of the population [zodi].
    sigma_ln : float or array_like, optional
        Standard deviation of ln z [1]; 0 gives every star the median.
    scale : float or array_like, optional
        Sweep-level factor s multiplying every level [1].

    Returns
    -------
    float or ndarray
        Exozodi level [zodi].

    References
    ----------
    .. [1] Ertel, S. et al. 2020, AJ 159, 177 (median level of about 3 zodis for Sun-like stars;
       doi:10.3847/1538-3881/ab7817; from memory).
    """
    sigma = np.asarray(sigma_ln, np.float64)
    q = ndtri(np.asarray(uniform, np.float64))
    with np.errstate(invalid="ignore"):
        lnz = np.where(sigma == 0.0, 0.0, sigma * q)
    return _scalar_or_array(np.asarray(scale, np.float64) * np.asarray(median_zodi, np.float64)
                            * np.exp(lnz))


def allocate_time_budget(time_needed_s, expected_detections, budget_s):
    """Share a total time budget among stars in order of expected detections per hour.

    Greedy rule: rank the stars by merit = E / t_need (stable for ties: lower index first); give
    each star, in that order, its t_need while the running total stays within the budget; stop at
    the first star that does not fit. Stars with infinite or non-positive t_need, or no expected
    detection, get nothing. Works along the last axis (stars); leading axes are independent
    allocations (grid points).

    Parameters
    ----------
    time_needed_s : array_like
        Time each star needs [s], e.g. :func:`time_to_snr` for a reference planet in the nominal
        model; ``inf`` where unreachable.
    expected_detections : array_like
        Expected detections at each star with that time [1], from the nominal model.
    budget_s : float or array_like
        Total time budget [s], broadcast over the leading axes.

    Returns
    -------
    ndarray
        Time allocated to each star [s]: t_need or 0.
    """
    t = np.asarray(time_needed_s, np.float64)
    e = np.broadcast_to(np.asarray(expected_detections, np.float64), t.shape)
    usable = np.isfinite(t) & (t > 0.0) & (e > 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        merit = np.where(usable, e / t, -np.inf)
    order = np.argsort(-merit, axis=-1, kind="stable")
    t_sorted = np.take_along_axis(np.where(usable, t, 0.0), order, axis=-1)
    u_sorted = np.take_along_axis(usable, order, axis=-1)
    budget = np.asarray(budget_s, np.float64)[..., None]
    # times are >= 0, so the running total only grows: the stars that fit are a prefix
    take_sorted = (np.cumsum(t_sorted, axis=-1) <= budget) & u_sorted
    take = np.empty_like(take_sorted)
    np.put_along_axis(take, order, take_sorted, axis=-1)
    return np.where(take, t, 0.0)
