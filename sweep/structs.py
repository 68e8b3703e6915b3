"""The two struct-of-arrays records that flow through the planet-yield model.

:class:`StarTable` is a validated star list (made by :mod:`sweep.catalogs`); :class:`PlanetBatch`
holds every planet drawn for a block of rows (made by :mod:`sweep.planets`), one entry per planet,
with the row (within the block) and the star it belongs to. Both are plain numpy arrays in float64
(or small integers), units in the field names, so the physics functions take them directly.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields

import numpy as np

#: Spectral classes, in the order of their integer codes in :attr:`StarTable.spectral_class`.
SPECTRAL_CLASSES = ("F", "G", "K", "M")


@dataclass(frozen=True)
class StarTable:
    """A star list: one entry per star.

    Attributes
    ----------
    name : ndarray of str
        Star names (generated when the list has none).
    distance_pc : ndarray
        Distance from the Sun [pc].
    teff_K : ndarray
        Effective temperature [K].
    radius_rsun : ndarray
        Stellar radius [R_sun].
    mass_msun : ndarray
        Stellar mass [M_sun].
    luminosity_lsun : ndarray
        Bolometric luminosity [L_sun] (from radius and T_eff by Stefan-Boltzmann when absent).
    spectral_class : ndarray of int8
        Index into :data:`SPECTRAL_CLASSES`.
    ecliptic_latitude_deg : ndarray
        Ecliptic latitude [deg]; NaN where unknown.
    magnitudes : dict of str to ndarray
        Apparent magnitudes by band name (``"V"``, ``"J"``...), Vega system [mag]; may be empty.
    """

    name: np.ndarray
    distance_pc: np.ndarray
    teff_K: np.ndarray
    radius_rsun: np.ndarray
    mass_msun: np.ndarray
    luminosity_lsun: np.ndarray
    spectral_class: np.ndarray
    ecliptic_latitude_deg: np.ndarray
    magnitudes: dict = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.distance_pc)


@dataclass
class PlanetBatch:
    """Every planet drawn for a block of rows, as a struct of arrays (one entry per planet).

    Attributes
    ----------
    row : ndarray of int64
        Row of the block the planet belongs to (0 .. n_rows - 1).
    star : ndarray of int64
        Index of its host in the :class:`StarTable`.
    radius_rearth : ndarray
        Planet radius [R_earth].
    period_d : ndarray
        Orbital period [d].
    semi_major_axis_au : ndarray
        Semi-major axis [au].
    eccentricity : ndarray
        Orbital eccentricity [1].
    inclination_rad : ndarray
        Inclination of the orbit to the sky plane [rad] (cos i uniform: isotropic).
    arg_periapsis_rad : ndarray
        Argument of periapsis [rad].
    mean_anomaly_rad : ndarray
        Mean anomaly at the time of observation [rad] (uniform: random orbital phase).
    bond_albedo : ndarray
        Bond albedo [1].
    geometric_albedo : ndarray
        Geometric albedo [1].
    teq_K : ndarray
        Equilibrium temperature [K].
    insolation_searth : ndarray
        Time-averaged insolation [S_earth].
    mass_mearth : ndarray
        Planet mass [M_earth].
    rv_semi_amplitude_ms : ndarray
        Radial-velocity semi-amplitude induced on the star [m/s].
    separation_au : ndarray
        Projected star-planet separation at the time of observation [au].
    orbital_distance_au : ndarray
        True star-planet distance at the time of observation [au].
    phase_angle_rad : ndarray
        Star-planet-observer angle at the time of observation [rad].
    """

    row: np.ndarray
    star: np.ndarray
    radius_rearth: np.ndarray
    period_d: np.ndarray
    semi_major_axis_au: np.ndarray
    eccentricity: np.ndarray
    inclination_rad: np.ndarray
    arg_periapsis_rad: np.ndarray
    mean_anomaly_rad: np.ndarray
    bond_albedo: np.ndarray
    geometric_albedo: np.ndarray
    teq_K: np.ndarray
    insolation_searth: np.ndarray
    mass_mearth: np.ndarray
    rv_semi_amplitude_ms: np.ndarray
    separation_au: np.ndarray
    orbital_distance_au: np.ndarray
    phase_angle_rad: np.ndarray

    def __len__(self) -> int:
        return len(self.row)

    def select(self, mask: np.ndarray) -> "PlanetBatch":
        """The planets where ``mask`` is true (or at the given indices)."""
        return PlanetBatch(**{f.name: getattr(self, f.name)[mask] for f in fields(self)})
