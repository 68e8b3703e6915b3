"""Stars: Stefan-Boltzmann relations, textbook main-sequence relations and spectral classes."""

from __future__ import annotations

import numpy as np

from ._constants import T_SUN_K

#: Lower T_eff bounds of the spectral-class codes 0..3 (F, G, K, M; see
#: :data:`sweep.structs.SPECTRAL_CLASSES`) [K]. Common practice, from memory.
SPECTRAL_CLASS_TEFF_BOUNDS_K = {"F": 6000.0, "G": 5300.0, "K": 3900.0, "M": 0.0}

_CLASS_EDGES_K = np.array([3900.0, 5300.0, 6000.0])  # M | K | G | F


def _scalar_or_array(x):
    x = np.asarray(x, dtype=np.float64)
    return x[()] if x.ndim == 0 else x


def luminosity_lsun(radius_rsun, teff_K):
    """Bolometric luminosity from radius and effective temperature (Stefan-Boltzmann law).

    L / L_sun = (R / R_sun)^2 (T_eff / T_sun)^4, with T_sun = 5772 K derived from the IAU 2015
    nominal L_sun and R_sun.

    Parameters
    ----------
    radius_rsun : float or array_like
        Stellar radius [R_sun].
    teff_K : float or array_like
        Effective temperature [K].

    Returns
    -------
    float or ndarray
        Luminosity [L_sun].

    References
    ----------
    .. [1] Prsa, A. et al. 2016, AJ 152, 41 (IAU 2015 Resolution B3);
       doi:10.3847/0004-6256/152/2/41
    """
    r = np.asarray(radius_rsun, np.float64)
    t = np.asarray(teff_K, np.float64) / T_SUN_K
    t2 = t * t
    return _scalar_or_array(r * r * t2 * t2)


def effective_temperature_K(luminosity_lsun, radius_rsun):
    """Effective temperature from luminosity and radius (Stefan-Boltzmann law).

    T_eff = T_sun (L / L_sun)^(1/4) (R / R_sun)^(-1/2).

    Parameters
    ----------
    luminosity_lsun : float or array_like
        Luminosity [L_sun].
    radius_rsun : float or array_like
        Stellar radius [R_sun].

    Returns
    -------
    float or ndarray
        Effective temperature [K].

    References
    ----------
    .. [1] Prsa, A. et al. 2016, AJ 152, 41 (IAU 2015 Resolution B3);
       doi:10.3847/0004-6256/152/2/41
    """
    lum = np.asarray(luminosity_lsun, np.float64)
    r = np.asarray(radius_rsun, np.float64)
    return _scalar_or_array(T_SUN_K * np.sqrt(np.sqrt(lum)) / np.sqrt(r))


def radius_rsun(luminosity_lsun, teff_K):
    """Stellar radius from luminosity and effective temperature (Stefan-Boltzmann law).

    R / R_sun = (L / L_sun)^(1/2) (T_eff / T_sun)^(-2).

    Parameters
    ----------
    luminosity_lsun : float or array_like
        Luminosity [L_sun].
    teff_K : float or array_like
        Effective temperature [K].

    Returns
    -------
    float or ndarray
        Stellar radius [R_sun].

    References
    ----------
    .. [1] Prsa, A. et al. 2016, AJ 152, 41 (IAU 2015 Resolution B3);
       doi:10.3847/0004-6256/152/2/41
    """
    lum = np.asarray(luminosity_lsun, np.float64)
    t = np.asarray(teff_K, np.float64) / T_SUN_K
    return _scalar_or_array(np.sqrt(lum) / (t * t))


def main_sequence_luminosity_lsun(mass_msun):
    """Main-sequence luminosity from mass: a textbook piecewise power law (approximate).

    L = 0.23 M^2.3 (M < 0.43), M^4 (0.43 <= M < 2), 1.4 M^3.5 (M >= 2), in solar units.
    A rough textbook approximation (from memory), good to tens of per cent, for synthetic
    star lists only.

    Parameters
    ----------
    mass_msun : float or array_like
        Stellar mass [M_sun].

    Returns
    -------
    float or ndarray
        Luminosity [L_sun].

    References
    ----------
    .. [1] Textbook mass-luminosity approximation (from memory; no specific edition checked),
       e.g. as quoted in introductory stellar-astrophysics courses.
    """
    m = np.asarray(mass_msun, np.float64)
    return _scalar_or_array(np.where(m < 0.43, 0.23 * m**2.3,
                                     np.where(m < 2.0, m**4, 1.4 * m**3.5)))


def main_sequence_radius_rsun(mass_msun):
    """Main-sequence radius from mass: a textbook piecewise power law (approximate).

    R = M^0.8 (M < 1), M^0.57 (M >= 1), in solar units. A rough textbook approximation (from
    memory), for synthetic star lists only.

    Parameters
    ----------
    mass_msun : float or array_like
        Stellar mass [M_sun].

    Returns
    -------
    float or ndarray
        Stellar radius [R_sun].

    References
    ----------
    .. [1] Textbook mass-radius approximation (from memory; no specific edition checked).
    """
    m = np.asarray(mass_msun, np.float64)
    return _scalar_or_array(np.where(m < 1.0, m**0.8, m**0.57))


def main_sequence_teff_K(mass_msun):
    """Main-sequence effective temperature from mass, via the two textbook relations above.

    T_eff = T_sun (L(M))^(1/4) (R(M))^(-1/2) (Stefan-Boltzmann law); approximate.

    Parameters
    ----------
    mass_msun : float or array_like
        Stellar mass [M_sun].

    Returns
    -------
    float or ndarray
        Effective temperature [K].

    References
    ----------
    .. [1] See :func:`main_sequence_luminosity_lsun` and :func:`main_sequence_radius_rsun`
       (textbook approximations, from memory).
    """
    return effective_temperature_K(main_sequence_luminosity_lsun(mass_msun),
                                   main_sequence_radius_rsun(mass_msun))


def spectral_class_code(teff_K):
    """Spectral-class code from effective temperature.

    Codes index :data:`sweep.structs.SPECTRAL_CLASSES` = ("F", "G", "K", "M"):
    0 = F for T_eff >= 6000 K (stars hotter than 7300 K, nominally A or earlier, also get F),
    1 = G for 5300 <= T_eff < 6000 K, 2 = K for 3900 <= T_eff < 5300 K, 3 = M below 3900 K.
    Boundaries follow common practice (from memory).

    Parameters
    ----------
    teff_K : float or array_like
        Effective temperature [K].

    Returns
    -------
    numpy.int8 or ndarray of int8
        Spectral-class code.

    References
    ----------
    .. [1] Gray, R. O. & Corbally, C. J. 2009, Stellar Spectral Classification (Princeton
       University Press) (boundaries approximate, from memory).
    """
    t = np.asarray(teff_K, np.float64)
    code = (3 - np.searchsorted(_CLASS_EDGES_K, t, side="right")).astype(np.int8)
    return code[()] if code.ndim == 0 else code
