"""Habitability: habitable-zone limits of Kopparapu et al. (2014) and insolation."""

from __future__ import annotations

import numpy as np

#: Kopparapu et al. 2014 (ApJL 787, L29), Table 1, 1 Earth-mass planet: coefficients
#: (S_eff_sun, a, b, c, d) of S_eff = S_eff_sun + a T + b T^2 + c T^3 + d T^4, T = T_eff - 5780 K.
#: Values from memory; checked against the Sun's limits (runaway greenhouse 0.95 au, maximum
#: greenhouse 1.67 au) in the tests.
KOPPARAPU2014_LIMITS = {
    "recent-venus": (1.776, 2.136e-4, 2.533e-8, -1.332e-11, -3.097e-15),
    "runaway-greenhouse": (1.107, 1.332e-4, 1.580e-8, -8.308e-12, -1.931e-15),
    "maximum-greenhouse": (0.356, 6.171e-5, 1.698e-9, -3.198e-12, -5.575e-16),
    "early-mars": (0.320, 5.547e-5, 1.526e-9, -2.874e-12, -5.011e-16),
}

#: Range of stellar effective temperature where the fits hold [K]; inputs are clipped into it.
KOPPARAPU2014_TEFF_RANGE_K = (2600.0, 7200.0)

_T_REF_K = 5780.0


def _scalar_or_array(x):
    x = np.asarray(x, dtype=np.float64)
    return x[()] if x.ndim == 0 else x


def effective_flux_limit(teff_K, limit):
    """Effective stellar flux at a habitable-zone limit (Kopparapu et al. 2014).

    S_eff = S_eff_sun + a T + b T^2 + c T^3 + d T^4 with T = T_eff - 5780 K, for a 1 Earth-mass
    planet. The fit holds for 2600 K <= T_eff <= 7200 K; T_eff outside is clipped into that range
    (the limit of the nearest valid star is used).

    Parameters
    ----------
    teff_K : float or array_like
        Stellar effective temperature [K].
    limit : {"recent-venus", "runaway-greenhouse", "maximum-greenhouse", "early-mars"}
        Which limit; keys of :data:`KOPPARAPU2014_LIMITS`.

    Returns
    -------
    float or ndarray
        Effective flux at the limit [S_earth] (in units of the solar constant at Earth).

    References
    ----------
    .. [1] Kopparapu, R. K. et al. 2014, "Habitable zones around main-sequence stars: dependence
       on planetary mass", ApJL 787, L29, Table 1; doi:10.1088/2041-8205/787/2/L29
       (coefficients from memory).
    """
    try:
        s0, a, b, c, d = KOPPARAPU2014_LIMITS[limit]
    except KeyError:
        raise ValueError(f"limit must be one of {sorted(KOPPARAPU2014_LIMITS)}, "
                         f"not {limit!r}") from None
    lo, hi = KOPPARAPU2014_TEFF_RANGE_K
    t = np.clip(np.asarray(teff_K, np.float64), lo, hi) - _T_REF_K
    return _scalar_or_array(s0 + t * (a + t * (b + t * (c + t * d))))


def habitable_zone_distance_au(luminosity_lsun, teff_K, limit):
    """Distance of a habitable-zone limit from the star (Kopparapu et al. 2014).

    d = sqrt((L / L_sun) / S_eff).

    Parameters
    ----------
    luminosity_lsun : float or array_like
        Stellar luminosity [L_sun].
    teff_K : float or array_like
        Stellar effective temperature [K] (clipped into 2600-7200 K, see
        :func:`effective_flux_limit`).
    limit : str
        Which limit; keys of :data:`KOPPARAPU2014_LIMITS`.

    Returns
    -------
    float or ndarray
        Distance [au].

    References
    ----------
    .. [1] Kopparapu, R. K. et al. 2014, ApJL 787, L29; doi:10.1088/2041-8205/787/2/L29
    .. [2] Kopparapu, R. K. et al. 2013, ApJ 765, 131 (d = sqrt(L / S_eff));
       doi:10.1088/0004-637X/765/2/131 (from memory)
    """
    return _scalar_or_array(np.sqrt(np.asarray(luminosity_lsun, np.float64)
                                    / effective_flux_limit(teff_K, limit)))


def insolation_searth(luminosity_lsun, distance_au):
    """Bolometric stellar flux received by a planet, in units of Earth's.

    S = (L / L_sun) / (d / 1 au)^2 (inverse-square law).

    Parameters
    ----------
    luminosity_lsun : float or array_like
        Stellar luminosity [L_sun].
    distance_au : float or array_like
        Star-planet distance [au].

    Returns
    -------
    float or ndarray
        Insolation [S_earth].

    References
    ----------
    .. [1] Kopparapu, R. K. et al. 2013, ApJ 765, 131; doi:10.1088/0004-637X/765/2/131
       (from memory).
    """
    d = np.asarray(distance_au, np.float64)
    luminosity = np.asarray(luminosity_lsun, np.float64)
    d_squared = np.multiply(d, d, out=np.empty(np.broadcast_shapes(d.shape, luminosity.shape)))
    return _scalar_or_array(np.divide(luminosity, d_squared, out=d_squared))
