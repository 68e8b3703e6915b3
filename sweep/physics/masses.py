"""Masses: planet mass from radius (Chen & Kipping 2017) and the radial-velocity semi-amplitude."""

from __future__ import annotations

import numpy as np

from ._constants import AU_M, DAY_S, G_SI, M_EARTH_KG, M_JUP_KG, M_SUN_KG

#: Chen & Kipping 2017 mean relation, log10 R = C + S log10 M (Earth units): offset of the Terran
#: regime, slopes of the Terran, Neptunian and Jovian regimes, and the transition masses
#: Terran/Neptunian (2.04 M_earth) and Neptunian/Jovian (0.414 M_jup) [M_earth]. From memory.
CHEN_KIPPING2017_TERRAN_C = 0.00346
CHEN_KIPPING2017_SLOPES = {"terran": 0.2790, "neptunian": 0.589, "jovian": -0.044,
                           "stellar": 0.881}
CHEN_KIPPING2017_TRANSITIONS_MEARTH = (2.04, 0.414 * M_JUP_KG / M_EARTH_KG,
                                       0.0800 * M_SUN_KG / M_EARTH_KG)

_TWO_PI = 2.0 * np.pi
_EARTH_IN_SUN = M_EARTH_KG / M_SUN_KG

_S_T = CHEN_KIPPING2017_SLOPES["terran"]
_S_N = CHEN_KIPPING2017_SLOPES["neptunian"]
_M_TN, _M_NJ, _ = CHEN_KIPPING2017_TRANSITIONS_MEARTH
#: Radii of the two lower transitions on the (continuous) mean relation [R_earth].
_R_TN = 10.0**CHEN_KIPPING2017_TERRAN_C * _M_TN**_S_T
_R_NJ = _R_TN * (_M_NJ / _M_TN) ** _S_N
_LN_R_TN, _LN_R_NJ = np.log(_R_TN), np.log(_R_NJ)
#: 1 / slope of the Neptunian and Terran branches, indexed by (radius <= the transition radius).
_INVERSE_SLOPES = np.array([1.0 / _S_N, 1.0 / _S_T])


def _scalar_or_array(x):
    x = np.asarray(x, dtype=np.float64)
    return x[()] if x.ndim == 0 else x


def chen_kipping2017_mass_mearth(radius_rearth, *, ln_radius=None):
    """Planet mass from radius by inverting the mean mass-radius relation of Chen & Kipping 2017.

    The relation is a continuous broken power law R = C M^S: Terran (S = 0.279, C = 10^0.00346)
    up to 2.04 M_earth (R = 1.23 R_earth), Neptunian (S = 0.589) up to 0.414 M_jup
    (131.6 M_earth, R = 14.3 R_earth), then Jovian (S = -0.044) and Stellar (above 0.0800 M_sun).
    It is inverted deterministically (no intrinsic scatter) on the Terran and Neptunian branches.
    The Jovian branch is nearly flat and decreasing, so it cannot be inverted: for radii above the
    Neptunian/Jovian transition radius the mass is capped at the transition mass, 0.414 M_jup.
    Note that gas giants smaller than that radius (Jupiter itself, 11.2 R_earth) come out on the
    Neptunian branch, below their true masses: this is the mean relation, not a best mass.

    Parameters
    ----------
    radius_rearth : float or array_like
        Planet radius [R_earth].
    ln_radius : float or array_like, optional
        ln of the radius in Earth radii [1], when the caller has it already: the mass is then
        ``exp`` of a linear function of it rather than a power of the radius (equal to a few
        units in the last place).

    Returns
    -------
    float or ndarray
        Planet mass [M_earth].

    References
    ----------
    .. [1] Chen, J. & Kipping, D. 2017, "Probabilistic forecasting of the masses and radii of
       other worlds", ApJ 834, 17; doi:10.3847/1538-4357/834/1/17 (parameters from memory).
    """
    r = np.asarray(radius_rearth, np.float64)
    # one power per radius, with its own branch's exponent (the cap never reaches the Terran branch)
    exponent = _INVERSE_SLOPES[(r <= _R_TN).view(np.uint8)]  # 1 / S of the radius's branch
    if ln_radius is None:
        return _scalar_or_array(_M_TN * (np.minimum(r, _R_NJ) / _R_TN) ** exponent)
    ln_radius = np.asarray(ln_radius, np.float64)
    x = np.minimum(ln_radius, _LN_R_NJ, out=np.empty(np.broadcast_shapes(ln_radius.shape, r.shape)))
    x -= _LN_R_TN
    x *= exponent
    mass = np.exp(x, out=x)
    mass *= _M_TN
    return _scalar_or_array(mass)


def rv_semi_amplitude_ms(planet_mass_mearth, star_mass_msun, period_d, inclination_rad=np.pi / 2,
                         eccentricity=0.0, *, sin_inclination=None):
    """Radial-velocity semi-amplitude induced on the star by a planet.

    K = (2 pi G / (P (M_* + m_p)^2))^(1/3) m_p sin i / sqrt(1 - e^2).

    Parameters
    ----------
    planet_mass_mearth : float or array_like
        Planet mass [M_earth].
    star_mass_msun : float or array_like
        Stellar mass [M_sun].
    period_d : float or array_like
        Orbital period [d].
    inclination_rad : float or array_like, optional
        Inclination of the orbit normal to the line of sight [rad]; pi/2 is edge-on.
    eccentricity : float or array_like, optional
        Orbital eccentricity [1].
    sin_inclination : float or array_like, optional
        sin i [1], when the caller has it already; it must be that of ``inclination_rad``.

    Returns
    -------
    float or ndarray
        Semi-amplitude [m/s].

    References
    ----------
    .. [1] Lovis, C. & Fischer, D. A. 2010, "Radial velocity techniques for exoplanets", in
       Exoplanets, ed. S. Seager (University of Arizona Press), p. 27, eq. 1 (from memory).
    """
    m_p = np.asarray(planet_mass_mearth, np.float64) * M_EARTH_KG
    m_s = np.asarray(star_mass_msun, np.float64) * M_SUN_KG
    p_s = np.asarray(period_d, np.float64) * DAY_S
    e = np.asarray(eccentricity, np.float64)
    if sin_inclination is None:
        sin_inclination = np.sin(np.asarray(inclination_rad, np.float64))
    total = m_s + m_p
    k = np.cbrt(2.0 * np.pi * G_SI / (p_s * total * total)) * m_p * np.asarray(sin_inclination, np.float64)
    if np.any(e):
        k = k / np.sqrt(1.0 - e * e)
    return _scalar_or_array(k)


def rv_semi_amplitude_from_orbit_ms(planet_mass_mearth, star_mass_msun, period_d, semi_major_axis_au,
                                    sin_inclination=1.0, eccentricity=0.0):
    """Radial-velocity semi-amplitude of a planet whose relative orbit is known (no cube root).

    K = 2 pi a sin i m_p / (P (M_* + m_p) sqrt(1 - e^2)): the star's speed on its orbit about the
    barycentre, of semi-major axis a m_p / (M_* + m_p), projected on the line of sight. With the
    ``a`` of Kepler's third law (:func:`sweep.physics.orbits.semi_major_axis_au`, same masses)
    this equals :func:`rv_semi_amplitude_ms`.

    Parameters
    ----------
    planet_mass_mearth : float or array_like
        Planet mass [M_earth].
    star_mass_msun : float or array_like
        Stellar mass [M_sun].
    period_d : float or array_like
        Orbital period [d].
    semi_major_axis_au : float or array_like
        Semi-major axis of the relative orbit [au].
    sin_inclination : float or array_like, optional
        sin i, i the inclination of the orbit normal to the line of sight [1]; 1 is edge-on.
    eccentricity : float or array_like, optional
        Orbital eccentricity [1].

    Returns
    -------
    float or ndarray
        Semi-amplitude [m/s].

    References
    ----------
    .. [1] Lovis, C. & Fischer, D. A. 2010, "Radial velocity techniques for exoplanets", in
       Exoplanets, ed. S. Seager (University of Arizona Press), p. 27, eq. 1 (from memory).
    .. [2] Murray, C. D. & Dermott, S. F. 1999, Solar System Dynamics (Cambridge University
       Press), sec. 2.7 (barycentric orbits).
    """
    m_p, m_s, p, a, sin_i = (np.asarray(v, np.float64) for v in (
        planet_mass_mearth, star_mass_msun, period_d, semi_major_axis_au, sin_inclination))
    shape = np.broadcast_shapes(m_p.shape, m_s.shape, p.shape, a.shape, sin_i.shape)
    m_p = m_p * _EARTH_IN_SUN
    # K = (2 pi a / (1 d)) m_p sin i / (P (M_* + m_p)), in place
    k = np.multiply(a, _TWO_PI * AU_M / DAY_S, out=np.empty(shape))  # 2 pi a / (1 d) [m/s]
    k *= m_p
    k *= sin_i
    denominator = np.add(m_s, m_p, out=np.empty(shape))
    np.multiply(p, denominator, out=denominator)
    k /= denominator
    e = np.asarray(eccentricity, np.float64)
    if np.any(e):
        k = k / np.sqrt(1.0 - e * e)
    return _scalar_or_array(k)
