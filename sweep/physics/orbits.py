"""Orbits: Kepler's third law, Kepler's equation and the sky-projected geometry of an orbit.

Geometry convention used throughout (see :func:`sky_geometry`): the observer lies along +z, far
away; the sky plane is x-y; the longitude of the ascending node is set to zero (it only rotates the
picture in the sky plane and changes neither the projected separation nor the phase angle); the
inclination i is the angle between the orbit normal and the line of sight (i = 0: face-on,
i = pi/2: edge-on).
"""

from __future__ import annotations

import numpy as np

from ._constants import AU_M, DAY_S, G_SI, M_EARTH_KG, M_SUN_KG

_TWO_PI = 2.0 * np.pi
_GM_SUN = G_SI * M_SUN_KG
_EARTH_IN_SUN = M_EARTH_KG / M_SUN_KG


def _scalar_or_array(x):
    x = np.asarray(x, dtype=np.float64)
    return x[()] if x.ndim == 0 else x


def semi_major_axis_au(period_d, star_mass_msun, planet_mass_mearth=0.0):
    """Semi-major axis from the orbital period by Kepler's third law.

    a^3 = G (M_* + m_p) P^2 / (4 pi^2).

    Parameters
    ----------
    period_d : float or array_like
        Orbital period [d].
    star_mass_msun : float or array_like
        Stellar mass [M_sun].
    planet_mass_mearth : float or array_like, optional
        Planet mass [M_earth]; 0 neglects it.

    Returns
    -------
    float or ndarray
        Semi-major axis of the relative orbit [au].

    References
    ----------
    .. [1] Murray, C. D. & Dermott, S. F. 1999, Solar System Dynamics (Cambridge University
       Press), eq. 2.22.
    """
    star, planet, period = (np.asarray(v, np.float64) for v in (star_mass_msun, planet_mass_mearth, period_d))
    shape = np.broadcast_shapes(star.shape, planet.shape, period.shape)
    gm = np.multiply(_EARTH_IN_SUN, planet, out=np.empty(shape))
    gm += star
    gm *= _GM_SUN
    # cbrt(gm (P / 2 pi)^2) / au, in place
    a = np.multiply(period, DAY_S, out=np.empty(shape))
    a /= _TWO_PI
    np.square(a, out=a)
    a *= gm
    np.cbrt(a, out=a)
    a /= AU_M
    return _scalar_or_array(a)


def orbital_period_d(semi_major_axis_au, star_mass_msun, planet_mass_mearth=0.0):
    """Orbital period from the semi-major axis by Kepler's third law.

    P = 2 pi sqrt(a^3 / (G (M_* + m_p))).

    Parameters
    ----------
    semi_major_axis_au : float or array_like
        Semi-major axis of the relative orbit [au].
    star_mass_msun : float or array_like
        Stellar mass [M_sun].
    planet_mass_mearth : float or array_like, optional
        Planet mass [M_earth]; 0 neglects it.

    Returns
    -------
    float or ndarray
        Orbital period [d].

    References
    ----------
    .. [1] Murray, C. D. & Dermott, S. F. 1999, Solar System Dynamics (Cambridge University
       Press), eq. 2.22.
    """
    gm = _GM_SUN * (np.asarray(star_mass_msun, np.float64)
                    + _EARTH_IN_SUN * np.asarray(planet_mass_mearth, np.float64))
    a_m = np.asarray(semi_major_axis_au, np.float64) * AU_M
    return _scalar_or_array(_TWO_PI * np.sqrt(a_m**3 / gm) / DAY_S)


def eccentric_anomaly(mean_anomaly_rad, eccentricity, tol=1e-12, max_iter=50):
    """Solve Kepler's equation E - e sin E = M for the eccentric anomaly (elliptic orbits).

    Vectorised Newton iteration from Danby's starting guess E0 = M + 0.85 e sign(sin M), on the
    mean anomaly reduced to [-pi, pi); the result is put back on the branch of the input
    (E - M is the same as for the reduced anomaly). Each element is iterated until its own
    residual |E - e sin E - M| < ``tol`` (for e < 0.95 a handful of steps) or ``max_iter``, and
    is then left alone: an element's result depends only on its own M and e, never on the other
    elements of the call (so it is the same whatever array the element is solved in).

    Parameters
    ----------
    mean_anomaly_rad : float or array_like
        Mean anomaly M, any finite real [rad].
    eccentricity : float or array_like
        Eccentricity e, 0 <= e < 1 [1].
    tol : float, optional
        Largest residual |E - e sin E - M| accepted [rad].
    max_iter : int, optional
        Largest number of Newton steps.

    Returns
    -------
    float or ndarray
        Eccentric anomaly E [rad], broadcast shape of the inputs.

    References
    ----------
    .. [1] Danby, J. M. A. 1988, Fundamentals of Celestial Mechanics, 2nd ed. (Willmann-Bell),
       sec. 6.6 (starting value; from memory).
    .. [2] Murray, C. D. & Dermott, S. F. 1999, Solar System Dynamics (Cambridge University
       Press), sec. 2.4.
    """
    m_in, e = np.broadcast_arrays(np.asarray(mean_anomaly_rad, np.float64),
                                  np.asarray(eccentricity, np.float64))
    m = np.remainder(m_in + np.pi, _TWO_PI) - np.pi
    flat_m, flat_ecc = np.ravel(m), np.ravel(e)
    flat_e = flat_m + 0.85 * flat_ecc * np.sign(np.sin(flat_m))
    active = np.arange(flat_e.size)  # elements not yet converged
    for _ in range(max_iter):
        e_a, ecc_a = flat_e[active], flat_ecc[active]
        f = e_a - ecc_a * np.sin(e_a) - flat_m[active]
        going = np.abs(f) >= tol
        if not going.any():
            break
        if not going.all():
            active, e_a, ecc_a, f = active[going], e_a[going], ecc_a[going], f[going]
        flat_e[active] = e_a - f / (1.0 - ecc_a * np.cos(e_a))
    return _scalar_or_array(flat_e.reshape(m.shape) + (m_in - m))


def true_anomaly(eccentric_anomaly_rad, eccentricity):
    """True anomaly from the eccentric anomaly.

    nu = 2 atan2(sqrt(1 + e) sin(E/2), sqrt(1 - e) cos(E/2)), in (-pi, pi].

    Parameters
    ----------
    eccentric_anomaly_rad : float or array_like
        Eccentric anomaly E [rad].
    eccentricity : float or array_like
        Eccentricity e, 0 <= e < 1 [1].

    Returns
    -------
    float or ndarray
        True anomaly nu [rad].

    References
    ----------
    .. [1] Murray, C. D. & Dermott, S. F. 1999, Solar System Dynamics (Cambridge University
       Press), eq. 2.46.
    """
    big_e = np.asarray(eccentric_anomaly_rad, np.float64)
    e = np.asarray(eccentricity, np.float64)
    half = 0.5 * big_e
    return _scalar_or_array(2.0 * np.arctan2(np.sqrt(1.0 + e) * np.sin(half),
                                             np.sqrt(1.0 - e) * np.cos(half)))


def sky_geometry(semi_major_axis_au, eccentricity, inclination_rad, arg_periapsis_rad,
                 mean_anomaly_rad, *, cos_inclination=None, sin_inclination=None):
    """Projected separation, true distance and phase angle of a planet at a given orbital phase.

    Convention: observer along +z; sky plane x-y; ascending node on +x (node longitude 0, which
    changes neither output); inclination i between the orbit normal and the line of sight. With
    theta = omega + nu (argument of latitude) and r = a (1 - e cos E), the planet sits at
    x = r cos(theta), y = r sin(theta) cos(i), z = r sin(theta) sin(i) (z > 0: towards the observer).
    The phase angle alpha is the star-planet-observer angle, cos(alpha) = -z / r: alpha = 0 (full
    phase) behind the star, alpha = pi (new phase) in front of it, alpha = pi/2 for any face-on
    orbit. The projected separation is s = r sqrt(cos^2 theta + sin^2 theta cos^2 i) = r sin(alpha).
    Circular orbits (e == 0) skip Kepler's equation (nu = M, r = a).

    Parameters
    ----------
    semi_major_axis_au : float or array_like
        Semi-major axis [au].
    eccentricity : float or array_like
        Eccentricity, 0 <= e < 1 [1].
    inclination_rad : float or array_like
        Inclination of the orbit normal to the line of sight [rad].
    arg_periapsis_rad : float or array_like
        Argument of periapsis omega, measured from the ascending node [rad].
    mean_anomaly_rad : float or array_like
        Mean anomaly at the time of observation [rad].
    cos_inclination, sin_inclination : float or array_like, optional
        cos i and sin i [1], when the caller has them already (a draw that makes i from cos i);
        they must be those of ``inclination_rad``. Computed from it when not given.

    Returns
    -------
    separation_au : float or ndarray
        Projected star-planet separation on the sky [au].
    orbital_distance_au : float or ndarray
        True star-planet distance r [au].
    phase_angle_rad : float or ndarray
        Star-planet-observer angle alpha in [0, pi] [rad].

    References
    ----------
    .. [1] Murray, C. D. & Dermott, S. F. 1999, Solar System Dynamics (Cambridge University
       Press), sec. 2.8 (orbit in three dimensions).
    .. [2] Brown, R. A. 2004, ApJ 607, 1003 (projected separation and phase angle of an
       inclined orbit; from memory).
    """
    a, e, inc, omega, m = np.broadcast_arrays(
        *(np.asarray(v, np.float64) for v in (semi_major_axis_au, eccentricity, inclination_rad,
                                              arg_periapsis_rad, mean_anomaly_rad)))
    shape = a.shape
    a, e, inc, omega, m = (np.ravel(v) for v in (a, e, inc, omega, m))
    cos_i = np.cos(inc) if cos_inclination is None else np.ravel(np.broadcast_to(cos_inclination, shape))
    sin_i = np.sin(inc) if sin_inclination is None else np.ravel(np.broadcast_to(sin_inclination, shape))
    r = np.array(a, dtype=np.float64)
    ecc = e > 0.0
    if np.any(ecc):
        nu = np.array(m, dtype=np.float64)
        e_k = e[ecc]
        big_e = eccentric_anomaly(m[ecc], e_k)
        nu[ecc] = true_anomaly(big_e, e_k)
        r[ecc] = a[ecc] * (1.0 - e_k * np.cos(big_e))
    else:  # circular: nu = M, r = a
        nu = m
    # sep = r sqrt(cos^2 theta + (sin theta cos i)^2), alpha = arccos(-sin theta sin i), in place
    theta = omega + nu
    sin_t = np.sin(theta)
    cos_t = np.cos(theta, out=theta)
    term = sin_t * cos_i
    term *= term
    cos_t *= cos_t
    cos_t += term
    sep = np.sqrt(cos_t, out=cos_t)
    sep *= r
    proj = np.negative(sin_t, out=sin_t)
    proj *= sin_i
    alpha = np.arccos(np.clip(proj, -1.0, 1.0, out=proj), out=proj)
    return tuple(_scalar_or_array(x.reshape(shape)) for x in (sep, r, alpha))


def projected_separation_fraction_above(s_over_a):
    """Fraction of time a circular, isotropically oriented orbit shows a projected separation > s.

    For a circular orbit of radius a seen from a random direction (cos i uniform, phase uniform),
    the planet's direction is isotropic and P(s > x a) = sqrt(1 - x^2) for 0 <= x <= 1 (1 below 0,
    0 above 1).

    Parameters
    ----------
    s_over_a : float or array_like
        Projected separation in units of the orbital radius [1].

    Returns
    -------
    float or ndarray
        Fraction of time (or of random orientations) with separation above s [1].

    References
    ----------
    .. [1] Brown, R. A. 2004, ApJ 607, 1003 (from memory).
    """
    x = np.clip(np.asarray(s_over_a, np.float64), 0.0, 1.0)
    return _scalar_or_array(np.sqrt(1.0 - x * x))
