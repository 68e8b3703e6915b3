"""Radiation: Planck functions, band-averaged thermal flux densities, equilibrium temperature,
the Lambert phase function and reflected-light contrast."""

from __future__ import annotations

import numpy as np

from ._constants import AU_M, C_LIGHT, H_PLANCK, K_B, R_EARTH_M, R_SUN_M, UJY_SI

_HC_OVER_K = H_PLANCK * C_LIGHT / K_B  # [m K]
_H_OVER_K = H_PLANCK / K_B  # [s K]
_TWO_H_OVER_C2 = 2.0 * H_PLANCK / C_LIGHT**2
_TWO_HC2 = 2.0 * H_PLANCK * C_LIGHT**2
_R_EARTH_AU = R_EARTH_M / AU_M
_R_SUN_AU = R_SUN_M / AU_M

_GL_CACHE: dict[int, tuple[np.ndarray, np.ndarray]] = {}

#: Heat-redistribution factors f of :func:`equilibrium_temperature_K`.
REDISTRIBUTION_FACTORS = {"full": 0.25, "dayside": 0.5}


def _scalar_or_array(x):
    x = np.asarray(x, dtype=np.float64)
    return x[()] if x.ndim == 0 else x


def _gauss_legendre(n_nodes):
    """Gauss-Legendre nodes on [-1, 1] and weights normalised to sum to 1 (cached)."""
    if n_nodes not in _GL_CACHE:
        x, w = np.polynomial.legendre.leggauss(n_nodes)
        _GL_CACHE[n_nodes] = (x, 0.5 * w)
    return _GL_CACHE[n_nodes]


_gauss_legendre(16)


def planck_nu(frequency_hz, temperature_K):
    """Planck's law per unit frequency.

    B_nu = (2 h nu^3 / c^2) / (exp(h nu / k T) - 1).

    Parameters
    ----------
    frequency_hz : float or array_like
        Frequency [Hz].
    temperature_K : float or array_like
        Temperature [K].

    Returns
    -------
    float or ndarray
        Specific intensity [W m^-2 Hz^-1 sr^-1]; 0 where the Wien tail underflows.

    References
    ----------
    .. [1] Rybicki, G. B. & Lightman, A. P. 1979, Radiative Processes in Astrophysics (Wiley),
       eq. 1.51.
    """
    nu = np.asarray(frequency_hz, np.float64)
    t = np.asarray(temperature_K, np.float64)
    with np.errstate(over="ignore"):
        return _scalar_or_array(_TWO_H_OVER_C2 * nu**3 / np.expm1(_H_OVER_K * nu / t))


def planck_lambda(wavelength_m, temperature_K):
    """Planck's law per unit wavelength.

    B_lambda = (2 h c^2 / lambda^5) / (exp(h c / lambda k T) - 1).

    Parameters
    ----------
    wavelength_m : float or array_like
        Wavelength [m].
    temperature_K : float or array_like
        Temperature [K].

    Returns
    -------
    float or ndarray
        Specific intensity [W m^-2 m^-1 sr^-1]; 0 where the Wien tail underflows.

    References
    ----------
    .. [1] Rybicki, G. B. & Lightman, A. P. 1979, Radiative Processes in Astrophysics (Wiley),
       eq. 1.52.
    """
    lam = np.asarray(wavelength_m, np.float64)
    t = np.asarray(temperature_K, np.float64)
    with np.errstate(over="ignore"):
        return _scalar_or_array(_TWO_HC2 / lam**5 / np.expm1(_HC_OVER_K / (lam * t)))


def band_averaged_planck_nu(center_um, width_um, temperature_K, n_nodes=16):
    """Planck's law per unit frequency averaged over a top-hat band in wavelength.

    <B_nu> = (1 / w) * integral of B_nu(c / lambda, T) d lambda over [lambda_c - w/2, lambda_c + w/2],
    by ``n_nodes``-point Gauss-Legendre quadrature (one in-place pass per node over the
    temperatures: about 0.2 s for 1e6 temperatures and 16 nodes on one core).

    Parameters
    ----------
    center_um : float or array_like
        Band centre wavelength [um].
    width_um : float or array_like
        Full band width in wavelength [um]; smaller than twice the centre.
    temperature_K : float or array_like
        Temperature [K]; broadcast against the band.
    n_nodes : int, optional
        Number of Gauss-Legendre nodes.

    Returns
    -------
    float or ndarray
        Band-averaged specific intensity [W m^-2 Hz^-1 sr^-1].

    References
    ----------
    .. [1] Rybicki, G. B. & Lightman, A. P. 1979, Radiative Processes in Astrophysics (Wiley),
       eq. 1.51.
    .. [2] Abramowitz, M. & Stegun, I. A. 1964, Handbook of Mathematical Functions (NBS),
       eq. 25.4.29 (Gauss-Legendre quadrature).
    """
    x, w = _gauss_legendre(int(n_nodes))
    centre = np.asarray(center_um, np.float64) * 1e-6
    half = 0.5 * np.asarray(width_um, np.float64) * 1e-6
    inv_t = 1.0 / np.asarray(temperature_K, np.float64)
    shape = np.broadcast_shapes(centre.shape, half.shape, inv_t.shape)
    acc = np.zeros(shape)
    tmp = np.empty(shape)
    with np.errstate(over="ignore"):
        for xk, wk in zip(x, w):
            nu = C_LIGHT / (centre + xk * half)
            np.multiply(_H_OVER_K * nu, inv_t, out=tmp)
            # exp(x) - 1 rather than expm1: three times faster; the relative error, ~2e-16 / x,
            # stays below 1e-12 while x = hc / (lambda k T) > 2e-4, i.e. lambda T < 70 m K.
            np.exp(tmp, out=tmp)
            tmp -= 1.0
            np.divide(wk * _TWO_H_OVER_C2 * nu**3, tmp, out=tmp)
            acc += tmp
    return _scalar_or_array(acc)


def blackbody_flux_density_uJy(center_um, width_um, temperature_K, radius_m, distance_m):
    """Band-averaged flux density of a uniform spherical blackbody at a distance.

    F_nu = pi <B_nu>_band (R / d)^2, for a planet's thermal emission or a star's photosphere.

    Parameters
    ----------
    center_um : float or array_like
        Band centre wavelength [um].
    width_um : float or array_like
        Full band width in wavelength [um].
    temperature_K : float or array_like
        Temperature of the emitting surface [K].
    radius_m : float or array_like
        Radius of the sphere [m].
    distance_m : float or array_like
        Distance from the observer [m].

    Returns
    -------
    float or ndarray
        Flux density [uJy].

    References
    ----------
    .. [1] Rybicki, G. B. & Lightman, A. P. 1979, Radiative Processes in Astrophysics (Wiley),
       sec. 1.4 (flux from a uniformly bright sphere, F = pi B (R/d)^2).
    """
    ratio = np.asarray(radius_m, np.float64) / np.asarray(distance_m, np.float64)
    b = band_averaged_planck_nu(center_um, width_um, temperature_K)
    return _scalar_or_array(b * (np.pi / UJY_SI) * ratio * ratio)


def equilibrium_temperature_K(star_teff_K, star_radius_rsun, distance_au, bond_albedo,
                              redistribution="full"):
    """Planetary equilibrium temperature.

    T_eq = T_* sqrt(R_* / a) (f (1 - A_B))^(1/4), with f = 1/4 for ``"full"`` (absorbed
    starlight re-radiated uniformly over the whole sphere; equivalent to T_* sqrt(R_*/(2a))
    (1 - A_B)^(1/4)) and f = 1/2 for ``"dayside"`` (re-radiated by the day side only).
    Zero internal heat, unit emissivity.

    Parameters
    ----------
    star_teff_K : float or array_like
        Stellar effective temperature [K].
    star_radius_rsun : float or array_like
        Stellar radius [R_sun].
    distance_au : float or array_like
        Star-planet distance [au] (the semi-major axis for the orbit-averaged value of a
        circular orbit).
    bond_albedo : float or array_like
        Bond albedo [1].
    redistribution : {"full", "dayside"}, optional
        Heat redistribution.

    Returns
    -------
    float or ndarray
        Equilibrium temperature [K].

    References
    ----------
    .. [1] Seager, S. 2010, Exoplanet Atmospheres (Princeton University Press), sec. 3.1
       (from memory).
    .. [2] Cowan, N. B. & Agol, E. 2011, ApJ 729, 54 (redistribution factor f;
       doi:10.1088/0004-637X/729/1/54, from memory).
    """
    try:
        f = REDISTRIBUTION_FACTORS[redistribution]
    except KeyError:
        raise ValueError(f"redistribution must be one of {sorted(REDISTRIBUTION_FACTORS)}, "
                         f"not {redistribution!r}") from None
    teff, radius, distance, bond = (np.asarray(v, np.float64) for v in (
        star_teff_K, star_radius_rsun, distance_au, bond_albedo))
    shape = np.broadcast_shapes(teff.shape, radius.shape, distance.shape, bond.shape)
    # T_* sqrt(R_* / a) (f (1 - A_B))^(1/4), in place
    t = np.multiply(radius, _R_SUN_AU, out=np.empty(shape))
    t /= distance
    np.sqrt(t, out=t)
    np.multiply(teff, t, out=t)
    absorbed = np.subtract(1.0, bond, out=np.empty(shape))
    absorbed *= f
    np.sqrt(absorbed, out=absorbed)
    np.sqrt(absorbed, out=absorbed)
    t *= absorbed
    return _scalar_or_array(t)


def lambert_phase(phase_angle_rad):
    """Phase function of a Lambert sphere.

    Phi(alpha) = (sin alpha + (pi - alpha) cos alpha) / pi; Phi(0) = 1, Phi(pi) = 0.

    Parameters
    ----------
    phase_angle_rad : float or array_like
        Star-planet-observer angle alpha in [0, pi] [rad].

    Returns
    -------
    float or ndarray
        Phase function [1].

    References
    ----------
    .. [1] Sobolev, V. V. 1975, Light Scattering in Planetary Atmospheres (Pergamon), ch. 9
       (from memory).
    .. [2] Russell, H. N. 1916, ApJ 43, 173 (from memory).
    """
    a = np.asarray(phase_angle_rad, np.float64)
    return _scalar_or_array((np.sin(a) + (np.pi - a) * np.cos(a)) / np.pi)


def reflected_contrast(geometric_albedo, phase_angle_rad, planet_radius_rearth,
                       orbital_distance_au):
    """Planet-to-star flux ratio in reflected light for a Lambert-sphere phase function.

    C = p Phi(alpha) (R_p / r)^2.

    Parameters
    ----------
    geometric_albedo : float or array_like
        Geometric albedo p [1].
    phase_angle_rad : float or array_like
        Star-planet-observer angle alpha [rad].
    planet_radius_rearth : float or array_like
        Planet radius [R_earth].
    orbital_distance_au : float or array_like
        True star-planet distance r [au].

    Returns
    -------
    float or ndarray
        Flux ratio planet / star [1].

    References
    ----------
    .. [1] Seager, S. 2010, Exoplanet Atmospheres (Princeton University Press), sec. 3.3
       (from memory).
    .. [2] Sobolev, V. V. 1975, Light Scattering in Planetary Atmospheres (Pergamon), ch. 9
       (from memory).
    """
    ratio = np.asarray(planet_radius_rearth, np.float64) * _R_EARTH_AU / np.asarray(
        orbital_distance_au, np.float64)
    return _scalar_or_array(np.asarray(geometric_albedo, np.float64)
                            * lambert_phase(phase_angle_rad) * ratio * ratio)


def geometric_albedo_lambert(bond_albedo):
    """Geometric albedo of a Lambert sphere from its Bond albedo.

    A_B = p q with phase integral q = 3/2 for a Lambert sphere, so p = 2 A_B / 3.

    Parameters
    ----------
    bond_albedo : float or array_like
        Bond albedo A_B [1].

    Returns
    -------
    float or ndarray
        Geometric albedo p [1].

    References
    ----------
    .. [1] Russell, H. N. 1916, ApJ 43, 173 (from memory).
    .. [2] Seager, S. 2010, Exoplanet Atmospheres (Princeton University Press), sec. 3.3
       (from memory).
    """
    return _scalar_or_array(np.asarray(bond_albedo, np.float64) * (2.0 / 3.0))
