"""Photometry: Vega magnitudes, surface brightnesses, photon count rates and the resolution element.

Flux densities are in micro-janskys [uJy] (surface brightnesses in [uJy sr^-1]), wavelengths in
micrometres [um], areas in [m^2], solid angles in steradians [sr], count rates in photons per
second [photons s^-1]. A band is a top hat in wavelength given by its centre and full width, and a
source's flux density is taken as constant across it (its band-averaged value).
"""

from __future__ import annotations

import math

import astropy.units as _u
import numpy as np

from ._constants import H_PLANCK, UJY_SI
from .radiation import band_averaged_planck_nu

#: Square arcseconds in one steradian [arcsec^2 sr^-1] (astropy).
ARCSEC2_PER_SR = float((1.0 * _u.sr).to_value(_u.arcsec**2))

#: Vega-system zero points of the Johnson-Cousins-Glass bands [Jy]: the flux density of a
#: magnitude-0 star (Bessell, Castelli & Plez 1998, A&A 333, 231, table A2, f_nu; from memory).
VEGA_ZERO_POINTS_JY = {"U": 1790.0, "B": 4063.0, "V": 3636.0, "R": 3064.0, "I": 2416.0,
                       "J": 1589.0, "H": 1021.0, "K": 640.0}
#: Effective wavelengths of the same bands [um] (Bessell, Castelli & Plez 1998, table A2; from
#: memory).
BAND_CENTERS_UM = {"U": 0.366, "B": 0.438, "V": 0.545, "R": 0.641, "I": 0.798,
                   "J": 1.22, "H": 1.63, "K": 2.19}
#: Full widths of the same bands [um] (Binney & Merrifield 1998, Galactic Astronomy, table 2.1;
#: from memory).
BAND_WIDTHS_UM = {"U": 0.066, "B": 0.094, "V": 0.088, "R": 0.138, "I": 0.149,
                  "J": 0.213, "H": 0.307, "K": 0.390}

#: Aperture radius [lambda/D] whose solid angle pi (r lambda/D)^2 equals lambda^2 / A for a
#: circular aperture of area A = pi D^2 / 4: one spatial mode (etendue A Omega = lambda^2).
SINGLE_MODE_RADIUS_LOD = 2.0 / math.pi


def _scalar_or_array(x):
    x = np.asarray(x, dtype=np.float64)
    return x[()] if x.ndim == 0 else x


def _zero_point_uJy(band):
    try:
        return VEGA_ZERO_POINTS_JY[band] * 1e6
    except (KeyError, TypeError):
        raise ValueError(f"unknown photometric band {band!r}; known bands: "
                         f"{', '.join(VEGA_ZERO_POINTS_JY)}") from None


def circular_area_m2(diameter_m, n_apertures=1):
    """Collecting area of ``n_apertures`` unobscured circular apertures.

    A = n pi D^2 / 4.

    Parameters
    ----------
    diameter_m : float or array_like
        Diameter of one aperture [m].
    n_apertures : float or array_like, optional
        Number of apertures [1].

    Returns
    -------
    float or ndarray
        Total collecting area [m^2].
    """
    d = np.asarray(diameter_m, np.float64)
    return _scalar_or_array(np.asarray(n_apertures, np.float64) * (0.25 * math.pi) * d * d)


def photon_rate_per_uJy(center_um, width_um, area_m2, throughput):
    """Detected photon rate per micro-jansky of flux density, for a top-hat band.

    N / F_nu = A tau (1 / h) ln(lambda_max / lambda_min), the exact value of
    A tau integral of F_nu / (h nu) d nu over the band for a flux density constant across it
    (d nu / nu = -d lambda / lambda).

    Parameters
    ----------
    center_um : float or array_like
        Band centre wavelength [um].
    width_um : float or array_like
        Full band width [um]; smaller than twice the centre.
    area_m2 : float or array_like
        Collecting area [m^2].
    throughput : float or array_like
        End-to-end throughput, quantum efficiency included [1].

    Returns
    -------
    float or ndarray
        Photon rate per unit flux density [photons s^-1 uJy^-1].

    References
    ----------
    .. [1] Rybicki, G. B. & Lightman, A. P. 1979, Radiative Processes in Astrophysics (Wiley),
       sec. 1.1 (photon energy h nu; specific flux).
    """
    c = np.asarray(center_um, np.float64)
    half = 0.5 * np.asarray(width_um, np.float64)
    log_ratio = np.log((c + half) / (c - half))
    return _scalar_or_array(np.asarray(area_m2, np.float64) * np.asarray(throughput, np.float64)
                            * (UJY_SI / H_PLANCK) * log_ratio)


def photon_rate(flux_density_uJy, center_um, width_um, area_m2, throughput):
    """Detected photon rate from a point source of given flux density, for a top-hat band.

    N = F_nu A tau (1 / h) ln(lambda_max / lambda_min); see :func:`photon_rate_per_uJy`.

    Parameters
    ----------
    flux_density_uJy : float or array_like
        Band-averaged flux density [uJy].
    center_um : float or array_like
        Band centre wavelength [um].
    width_um : float or array_like
        Full band width [um].
    area_m2 : float or array_like
        Collecting area [m^2].
    throughput : float or array_like
        End-to-end throughput, quantum efficiency included [1].

    Returns
    -------
    float or ndarray
        Photon rate [photons s^-1].

    References
    ----------
    .. [1] Rybicki, G. B. & Lightman, A. P. 1979, Radiative Processes in Astrophysics (Wiley),
       sec. 1.1.
    """
    return _scalar_or_array(np.asarray(flux_density_uJy, np.float64)
                            * photon_rate_per_uJy(center_um, width_um, area_m2, throughput))


def resolution_element_sr(center_um, diameter_m, radius_lod=0.7):
    """Solid angle of a circular photometric aperture of radius ``radius_lod`` lambda/D.

    Omega = pi (r lambda / D)^2. With r = :data:`SINGLE_MODE_RADIUS_LOD` (2 / pi),
    Omega = lambda^2 / A: one spatial mode, as for a single-mode (fibre-fed) combiner.

    Parameters
    ----------
    center_um : float or array_like
        Wavelength [um].
    diameter_m : float or array_like
        Aperture diameter D [m].
    radius_lod : float or array_like, optional
        Aperture radius [lambda/D]; 0.7 (about the core of an Airy pattern) is common practice for
        coronagraphic photometry.

    Returns
    -------
    float or ndarray
        Solid angle [sr].

    References
    ----------
    .. [1] Born, M. & Wolf, E. 1999, Principles of Optics, 7th ed. (Cambridge), sec. 8.5.2
       (Airy pattern, first dark ring at 1.22 lambda/D; from memory).
    """
    theta = np.asarray(radius_lod, np.float64) * np.asarray(center_um, np.float64) * 1e-6 / (
        np.asarray(diameter_m, np.float64))
    return _scalar_or_array(math.pi * theta * theta)


def extended_source_rate(surface_brightness_uJy_sr, solid_angle_sr, center_um, width_um,
                         area_m2, throughput):
    """Detected photon rate from a uniform extended source filling the aperture's solid angle.

    N = I_nu Omega A tau (1 / h) ln(lambda_max / lambda_min).

    Parameters
    ----------
    surface_brightness_uJy_sr : float or array_like
        Band-averaged specific intensity [uJy sr^-1].
    solid_angle_sr : float or array_like
        Solid angle of the photometric aperture [sr].
    center_um, width_um : float or array_like
        Band centre and full width [um].
    area_m2 : float or array_like
        Collecting area [m^2].
    throughput : float or array_like
        End-to-end throughput [1].

    Returns
    -------
    float or ndarray
        Photon rate [photons s^-1].
    """
    flux = np.asarray(surface_brightness_uJy_sr, np.float64) * np.asarray(solid_angle_sr,
                                                                          np.float64)
    return photon_rate(flux, center_um, width_um, area_m2, throughput)


def greybody_uJy_sr(center_um, width_um, temperature_K, emissivity):
    """Band-averaged specific intensity of a grey body: epsilon <B_nu(T)>.

    Parameters
    ----------
    center_um, width_um : float or array_like
        Band centre and full width [um].
    temperature_K : float or array_like
        Temperature [K].
    emissivity : float or array_like
        Emissivity, or optical depth of an optically thin layer [1].

    Returns
    -------
    float or ndarray
        Specific intensity [uJy sr^-1].

    References
    ----------
    .. [1] Rybicki, G. B. & Lightman, A. P. 1979, Radiative Processes in Astrophysics (Wiley),
       sec. 1.4-1.5 (optically thin emission, I = tau B).
    """
    b = band_averaged_planck_nu(center_um, width_um, temperature_K)
    return _scalar_or_array(np.asarray(emissivity, np.float64) * b / UJY_SI)


def magnitude_to_flux_density_uJy(magnitude, band):
    """Flux density of a Vega-system magnitude: F = F_0 10^(-0.4 m).

    Parameters
    ----------
    magnitude : float or array_like
        Apparent magnitude [mag].
    band : str
        One of ``U B V R I J H K`` (:data:`VEGA_ZERO_POINTS_JY`).

    Returns
    -------
    float or ndarray
        Flux density [uJy].

    References
    ----------
    .. [1] Bessell, M. S., Castelli, F. & Plez, B. 1998, A&A 333, 231, table A2 (from memory).
    """
    f0 = _zero_point_uJy(band)
    return _scalar_or_array(f0 * 10.0 ** (-0.4 * np.asarray(magnitude, np.float64)))


def flux_density_uJy_to_magnitude(flux_density_uJy, band):
    """Vega-system magnitude of a flux density: m = -2.5 log10(F / F_0).

    Parameters
    ----------
    flux_density_uJy : float or array_like
        Flux density [uJy].
    band : str
        One of ``U B V R I J H K``.

    Returns
    -------
    float or ndarray
        Apparent magnitude [mag].

    References
    ----------
    .. [1] Bessell, M. S., Castelli, F. & Plez, B. 1998, A&A 333, 231, table A2 (from memory).
    """
    f0 = _zero_point_uJy(band)
    return _scalar_or_array(-2.5 * np.log10(np.asarray(flux_density_uJy, np.float64) / f0))


def surface_brightness_to_uJy_sr(mag_arcsec2, band):
    """Specific intensity of a surface brightness given in Vega magnitudes per square arcsecond.

    I = F_0 10^(-0.4 mu) * (arcsec^2 per sr).

    Parameters
    ----------
    mag_arcsec2 : float or array_like
        Surface brightness [mag arcsec^-2].
    band : str
        One of ``U B V R I J H K``.

    Returns
    -------
    float or ndarray
        Specific intensity [uJy sr^-1].
    """
    return _scalar_or_array(magnitude_to_flux_density_uJy(mag_arcsec2, band) * ARCSEC2_PER_SR)


def uJy_sr_to_surface_brightness(intensity_uJy_sr, band):
    """Surface brightness in Vega magnitudes per square arcsecond; inverse of
    :func:`surface_brightness_to_uJy_sr`.

    Parameters
    ----------
    intensity_uJy_sr : float or array_like
        Specific intensity [uJy sr^-1].
    band : str
        One of ``U B V R I J H K``.

    Returns
    -------
    float or ndarray
        Surface brightness [mag arcsec^-2].
    """
    per_arcsec2 = np.asarray(intensity_uJy_sr, np.float64) / ARCSEC2_PER_SR
    return flux_density_uJy_to_magnitude(per_arcsec2, band)
