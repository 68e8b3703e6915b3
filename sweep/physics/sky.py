"""Sky backgrounds of the photon-noise model: local zodiacal light and exozodiacal light.

Specific intensities in [uJy sr^-1], band centres and widths in [um]; every function broadcasts
over numpy arrays (stars, planets, rows). The relations and their sources are in
``docs/noise_model.md`` (sections 5 and 7); :mod:`sweep.physics.noise` turns these intensities
into count rates.
"""

from __future__ import annotations

import math

import numpy as np

from ._constants import T_SUN_K
from .photometry import (BAND_CENTERS_UM, BAND_WIDTHS_UM, greybody_uJy_sr,
                         surface_brightness_to_uJy_sr)
from .radiation import band_averaged_planck_nu

#: Local zodiacal light at 90 deg from the Sun in ecliptic longitude, versus ecliptic latitude
#: |beta| [deg] -> brightness [S10] (Leinert et al. 1998, A&AS 127, 1, table 17; from memory,
#: rounded, good to ~10%).
ZODI_LATITUDE_DEG = np.array([0.0, 15.0, 30.0, 45.0, 60.0, 75.0, 90.0])
ZODI_S10 = np.array([259.0, 193.0, 132.0, 103.0, 77.0, 64.0, 60.0])
#: V surface brightness of 1 S10 (one 10th-magnitude solar-type star per square degree)
#: [mag arcsec^-2].
S10_V_MAG_ARCSEC2 = 10.0 + 2.5 * math.log10(3600.0**2)
#: Ecliptic latitude used for stars where it is unknown [deg]: the median |beta| of isotropic
#: directions (sin beta uniform).
DEFAULT_ECLIPTIC_LATITUDE_DEG = 30.0
#: Optical depth and temperature of the grey body that stands for the thermal emission of the
#: zodiacal cloud towards the ecliptic pole (one-sided column seen from 1 au; fit to the COBE/DIRBE
#: model of Kelsall et al. 1998, ApJ 508, 44; from memory).
ZODI_THERMAL_TAU = 7.1e-8
ZODI_THERMAL_T_K = 265.0

#: V surface brightness of a 1-zodi disk seen face-on at the Earth-equivalent insolation distance
#: of a solar twin [mag arcsec^-2] (Stark et al. 2014, ApJ 795, 122; from memory).
EXOZODI_V_MAG_ARCSEC2 = 22.0
#: Face-on (two-sided) optical depth of a 1-zodi disk at the Earth-equivalent distance [1]: twice
#: the one-sided polar column of the local cloud.
EXOZODI_TAU = 2.0 * ZODI_THERMAL_TAU
#: Radial slope of the face-on optical depth, tau ~ r^-0.34, from the cloud's density ~ r^-1.34
#: (Kelsall et al. 1998, ApJ 508, 44; from memory).
EXOZODI_TAU_SLOPE = 0.34
#: Dust temperature at the Earth-equivalent distance [K] and its radial slope, T ~ r^-0.467
#: (Kelsall et al. 1998, ApJ 508, 44; from memory).
EXOZODI_T_K = 286.0
EXOZODI_T_SLOPE = 0.467

_V_CENTER_UM = BAND_CENTERS_UM["V"]
_V_WIDTH_UM = BAND_WIDTHS_UM["V"]


def _scalar_or_array(x):
    x = np.asarray(x, dtype=np.float64)
    return x[()] if x.ndim == 0 else x


def _sun_v_planck():
    return band_averaged_planck_nu(_V_CENTER_UM, _V_WIDTH_UM, T_SUN_K)


def zodi_visible_mag_arcsec2(ecliptic_latitude_deg):
    """V surface brightness of the local zodiacal light versus ecliptic latitude.

    Linear interpolation in |beta| of :data:`ZODI_S10` (at 90 deg solar elongation in longitude),
    converted by mu_V = 27.78 - 2.5 log10(S10). NaN latitudes take
    :data:`DEFAULT_ECLIPTIC_LATITUDE_DEG`.

    Parameters
    ----------
    ecliptic_latitude_deg : float or array_like
        Ecliptic latitude of the target [deg]; NaN where unknown.

    Returns
    -------
    float or ndarray
        Surface brightness [V mag arcsec^-2]: about 21.8 in the ecliptic, 23.3 at the pole.

    References
    ----------
    .. [1] Leinert, Ch. et al. 1998, A&AS 127, 1, table 17 (doi:10.1051/aas:1998105; from memory).
    """
    s10 = _zodi_s10(ecliptic_latitude_deg)
    return _scalar_or_array(S10_V_MAG_ARCSEC2 - 2.5 * np.log10(s10))


def _zodi_s10(ecliptic_latitude_deg):
    beta = np.abs(np.asarray(ecliptic_latitude_deg, np.float64))
    beta = np.where(np.isnan(beta), DEFAULT_ECLIPTIC_LATITUDE_DEG, np.minimum(beta, 90.0))
    return np.interp(beta, ZODI_LATITUDE_DEG, ZODI_S10)


def local_zodi_uJy_sr(center_um, width_um, ecliptic_latitude_deg):
    """Specific intensity of the local zodiacal light in a band: scattered plus thermal.

    I = I_V(beta) <B_nu(lambda, T_sun)> / <B_nu(V, T_sun)>
        + tau_z (S10(beta) / S10(90 deg)) <B_nu(lambda, T_z)>,

    solar-coloured scattered light normalised to :func:`zodi_visible_mag_arcsec2`, and a grey
    body (:data:`ZODI_THERMAL_TAU`, :data:`ZODI_THERMAL_T_K`) whose latitude profile is taken
    equal to that of the scattered light (an approximation).

    Parameters
    ----------
    center_um, width_um : float or array_like
        Band centre and full width [um].
    ecliptic_latitude_deg : float or array_like
        Ecliptic latitude of the target [deg]; NaN where unknown.

    Returns
    -------
    float or ndarray
        Specific intensity [uJy sr^-1].

    References
    ----------
    .. [1] Leinert, Ch. et al. 1998, A&AS 127, 1 (doi:10.1051/aas:1998105; from memory).
    .. [2] Kelsall, T. et al. 1998, ApJ 508, 44 (doi:10.1086/306380; from memory).
    """
    s10 = _zodi_s10(ecliptic_latitude_deg)
    i_v = surface_brightness_to_uJy_sr(S10_V_MAG_ARCSEC2 - 2.5 * np.log10(s10), "V")
    colour = band_averaged_planck_nu(center_um, width_um, T_SUN_K) / _sun_v_planck()
    thermal = greybody_uJy_sr(center_um, width_um, ZODI_THERMAL_T_K,
                              ZODI_THERMAL_TAU * s10 / ZODI_S10[-1])
    return _scalar_or_array(i_v * colour + thermal)


def exozodi_uJy_sr(center_um, width_um, zodis, separation_au, star_luminosity_lsun,
                   star_teff_K):
    """Face-on specific intensity of an exozodiacal disk at a separation from its star.

    With x = r / sqrt(L) (the separation in units of the Earth-equivalent insolation distance):

    I = z [ I_V1 x^-0.34 (L / r^2) (<B_nu(lambda, T_*)> / T_*^4) / (<B_nu(V, T_sun)> / T_sun^4)
            + tau_1 x^-0.34 <B_nu(lambda, 286 K x^-0.467)> ],

    scattered starlight (proportional to the level, the optical depth and the star's flux density
    at r, equal to I_V1 for 1 zodi around the Sun at 1 au in V) plus thermal emission of the dust.

    Parameters
    ----------
    center_um, width_um : float or array_like
        Band centre and full width [um].
    zodis : float or array_like
        Exozodi level z [zodi]; 1 zodi is a Solar-System-like disk.
    separation_au : float or array_like
        Projected separation r at which the disk is seen [au].
    star_luminosity_lsun : float or array_like
        Stellar luminosity L [L_sun].
    star_teff_K : float or array_like
        Stellar effective temperature [K] (colour of the scattered light).

    Returns
    -------
    float or ndarray
        Specific intensity [uJy sr^-1].

    References
    ----------
    .. [1] Kelsall, T. et al. 1998, ApJ 508, 44 (radial profiles of density and temperature;
       doi:10.1086/306380; from memory).
    .. [2] Stark, C. C. et al. 2014, ApJ 795, 122 (1 zodi = 22 V mag arcsec^-2 at the
       Earth-equivalent distance; doi:10.1088/0004-637X/795/2/122; from memory).
    """
    r = np.asarray(separation_au, np.float64)
    lum = np.asarray(star_luminosity_lsun, np.float64)
    teff = np.asarray(star_teff_K, np.float64)
    z = np.asarray(zodis, np.float64)
    x = r / np.sqrt(lum)
    tau_profile = x ** -EXOZODI_TAU_SLOPE
    star_colour = band_averaged_planck_nu(center_um, width_um, teff) / teff**4
    sun_colour = _sun_v_planck() / T_SUN_K**4
    i_v1 = surface_brightness_to_uJy_sr(EXOZODI_V_MAG_ARCSEC2, "V")
    scattered = i_v1 * tau_profile * (lum / (r * r)) * (star_colour / sun_colour)
    thermal = greybody_uJy_sr(center_um, width_um, EXOZODI_T_K * x ** -EXOZODI_T_SLOPE,
                              EXOZODI_TAU * tau_profile)
    return _scalar_or_array(z * (scattered + thermal))
