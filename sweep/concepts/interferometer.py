"""Nulling interferometer: planets detected by their thermal emission.

A space nulling interferometer combines the beams of several collectors (diameter ``D``) so that
the star falls on a dark fringe. For the pair that sets the nulling baseline ``B`` the sky
transmission is ``T(theta) = sin^2(pi B theta / lambda)``, whose first maximum lies at
``theta = lambda / (2 B)`` (Bracewell 1978). The detection model per planet and band is:

- **inner limit**: ``theta >= inner_limit_lambda_over_b * lambda / B``. The default 0.5 puts the
  limit at the first transmission maximum; planets closer to the star sit in the central null.
- **outer limit**: ``theta <= outer_limit_lod * lambda / D``, the field of one collector (a
  single-mode beam combiner sees about one diffraction beam; default 1.0).
- **flux**: the band-averaged thermal flux density ``F = pi <B_nu(T_eq)> (R_p / d)^2`` is at least
  the band's point-source limit ``flux_limit_uJy`` (for the reference integration time).

The baseline is either fixed (``baseline_m``) or tuned per star (``baseline_tuning``): for each
star, ``B = lambda_ref / (2 theta_ref)`` so that a chosen orbit (the habitable-zone centre, or the
Earth-equivalent insolation distance) sits on the first transmission maximum at the reference
wavelength, clipped into ``[min_m, max_m]``.

Example section (invented)::

    [[concepts]]
    name = "nuller"
    kind = "interferometer"
    collector_diameter_m = { grid = [1.0, 2.0, 3.5] }
    baseline_tuning = { min_m = 10.0, max_m = 100.0, orbit = "habitable-zone-centre", wavelength_um = 15.0 }
    bands = [
      { name = "N10", center_um = 10.0, width_um = 2.0, flux_limit_uJy = 0.2 },
      { name = "Q18", center_um = 18.0, width_um = 4.0, flux_limit_uJy = { dist = "loguniform", a = 0.2, b = 1.0 } },
    ]

With ``detection = "snr"`` the flux condition is replaced by a photon-noise budget (the
``noise`` table, :mod:`sweep.concepts.noise_budget`): the planet at peak transmission through
``n_collectors`` collectors and ``throughput``; the stellar leakage, null depth plus the geometric
leakage of the star's finite disk ``(pi^2 / 16) (theta_star B / lambda)^2``; local zodiacal and
exozodiacal light in one spatial mode per collector, times the mean fringe transmission
``extended_transmission``; and the optional instrument background. Example (invented)::

    [[concepts]]
    name = "nuller"
    kind = "interferometer"
    detection = "snr"
    collector_diameter_m = 2.0
    baseline_m = 20.0
    bands = [ { name = "N10", center_um = 10.0, width_um = 2.0 } ]

    [concepts.noise]
    integration_time_h = 20.0
    null_depth = { dist = "loguniform", a = 1e-6, b = 1e-4 }
    throughput = 0.05

References
----------
.. [1] Bracewell, R. N. 1978, Nature 274, 780 (nulling interferometry; doi:10.1038/274780a0).
.. [2] Angel, J. R. P. & Woolf, N. J. 1997, ApJ 475, 373 (transmission maps of nulling arrays;
   from memory).
.. [3] Kopparapu, R. K. et al. 2014, ApJL 787, L29 (habitable-zone limits;
   doi:10.1088/2041-8205/787/2/L29).
"""

from __future__ import annotations

from typing import Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, model_validator

from sweep.concepts import (
    BandSchema,
    Concept,
    LastResult,
    angular_separation_rad,
    angular_window,
    cache_key,
    is_scalar,
    per_planet,
    register,
    sensitivity_scale,
    star_blackbody_uJy,
)
from sweep.concepts.noise_budget import (DetectionSchema, NoiseSchema, SnrDetection, check_detection_keys,
                                        instrument_rate)
from sweep.params import FractionParam, PositiveParam, bounds
from sweep.physics import habitability, radiation
from sweep.physics import noise as nz
from sweep.physics._constants import AU_M, PC_M, R_EARTH_M
from sweep.physics.photometry import SINGLE_MODE_RADIUS_LOD, circular_area_m2, resolution_element_sr


class InterferometerBand(BandSchema):
    """A band of the interferometer and its point-source sensitivity."""

    flux_limit_uJy: PositiveParam | None = Field(
        default=None,
        description="Faintest point source detected in the reference integration time [uJy] (detection = 'threshold').",
    )


class InterferometerNoise(NoiseSchema):
    """The photon-noise budget of a nulling interferometer (``detection = "snr"``)."""

    null_depth: FractionParam = Field(
        description="Instrumental null depth: starlight transmitted for a point-like star [1]."
    )
    throughput: FractionParam = Field(description="Fraction of the planet's light reaching the detector [1].")
    n_collectors: PositiveParam = Field(default=4.0, description="Number of collectors [1].")
    extended_transmission: FractionParam = Field(
        default=0.5, description="Mean fringe transmission for extended sources (zodi, exozodi) [1]."
    )


class BaselineTuning(BaseModel):
    """Per-star nulling baseline: put a chosen orbit on the first transmission maximum."""

    model_config = ConfigDict(extra="forbid")

    min_m: PositiveParam = Field(description="Shortest baseline the array can form [m].")
    max_m: PositiveParam = Field(description="Longest baseline the array can form [m].")
    orbit: Literal["habitable-zone-centre", "earth-equivalent"] = Field(
        default="habitable-zone-centre",
        description=(
            "Orbit placed on the first maximum: the middle of the conservative habitable zone "
            "(runaway to maximum greenhouse, Kopparapu et al. 2014), or the distance of Earth's "
            "insolation, sqrt(L / L_sun) au."
        ),
    )
    wavelength_um: PositiveParam = Field(description="Wavelength at which the orbit is placed [um].")

    @model_validator(mode="after")
    def _min_below_max(self):
        if bounds(self.min_m)[1] >= bounds(self.max_m)[0]:
            raise ValueError("min_m must be smaller than max_m for every allowed value")
        return self


class InterferometerSchema(DetectionSchema):
    """Section of a nulling-interferometer concept."""

    kind: Literal["interferometer"]
    collector_diameter_m: PositiveParam = Field(description="Diameter of each collector [m].")
    baseline_m: PositiveParam | None = Field(
        default=None, description="Fixed nulling baseline [m] (or give baseline_tuning)."
    )
    baseline_tuning: BaselineTuning | None = Field(
        default=None, description="Per-star baseline inside [min_m, max_m] (or give baseline_m)."
    )
    inner_limit_lambda_over_b: PositiveParam = Field(
        default=0.5,
        description="Inner angular limit in units of lambda / B [1]; 0.5 = first transmission maximum.",
    )
    outer_limit_lod: PositiveParam = Field(
        default=1.0, description="Outer angular limit in units of lambda / D [lambda/D]: one collector's field."
    )
    sensitivity_reference_diameter_m: PositiveParam | None = Field(
        default=None,
        description=(
            "If given, the flux limits hold for collectors of this diameter and scale as "
            "(reference / D)^2 for others [m]; otherwise they do not depend on D."
        ),
    )
    bands: list[InterferometerBand] = Field(min_length=1, description="Observing bands.")
    noise: InterferometerNoise | None = Field(
        default=None, description="Photon-noise budget; required for detection = 'snr'."
    )

    @model_validator(mode="after")
    def _detection_keys(self):
        check_detection_keys(self, ("flux_limit_uJy",), ("sensitivity_reference_diameter_m",))
        return self

    @model_validator(mode="after")
    def _one_baseline_and_limits_in_order(self):
        if (self.baseline_m is None) == (self.baseline_tuning is None):
            raise ValueError("give exactly one of baseline_m (fixed) and baseline_tuning (per star)")
        shortest = bounds(self.baseline_m if self.baseline_m is not None else self.baseline_tuning.min_m)[0]
        widest_inner = bounds(self.inner_limit_lambda_over_b)[1] / shortest
        narrowest_outer = bounds(self.outer_limit_lod)[0] / bounds(self.collector_diameter_m)[1]
        if widest_inner >= narrowest_outer:
            raise ValueError(
                f"inner_limit_lambda_over_b / baseline (up to {widest_inner:.3g} per m) must be smaller "
                f"than outer_limit_lod / collector_diameter_m (from {narrowest_outer:.3g} per m) for "
                "every allowed value, so that the inner limit lies inside the outer one"
            )
        return self


def reference_orbit_au(stars, orbit: str) -> np.ndarray:
    """The orbit a tuned baseline places on the first transmission maximum, per star [au].

    Parameters
    ----------
    stars : sweep.structs.StarTable
        The star list.
    orbit : {"habitable-zone-centre", "earth-equivalent"}
        Middle of the conservative habitable zone (mean of the runaway- and maximum-greenhouse
        distances, Kopparapu et al. 2014), or the distance with Earth's insolation.

    Returns
    -------
    ndarray
        Orbital distance per star [au].
    """
    lum = np.asarray(stars.luminosity_lsun, np.float64)
    if orbit == "earth-equivalent":
        return np.sqrt(lum)
    inner = habitability.habitable_zone_distance_au(lum, stars.teff_K, "runaway-greenhouse")
    outer = habitability.habitable_zone_distance_au(lum, stars.teff_K, "maximum-greenhouse")
    return 0.5 * (np.asarray(inner) + np.asarray(outer))


class Interferometer(SnrDetection, Concept):
    """Thermal-emission detections of a nulling interferometer (see the module docstring)."""

    Schema = InterferometerSchema

    def __init__(self, section: InterferometerSchema):
        super().__init__(section)
        self._flux_cache = [LastResult() for _ in section.bands]
        self._star_cache = [LastResult() for _ in section.bands]
        self._angle_cache = LastResult()
        self._orbit_cache = LastResult()
        self._init_snr(len(section.bands))

    def thermal_flux_uJy(self, planets, stars, params) -> np.ndarray:
        """Band-averaged thermal flux density of every planet, shape (n_bands, n_planets) [uJy]."""
        return np.stack([self._band_flux(i, band, planets, stars) for i, band in enumerate(params.bands)])

    def _band_flux(self, index, band, planets, stars):
        def compute():
            return radiation.blackbody_flux_density_uJy(
                per_planet(band.center_um, planets.row),
                per_planet(band.width_um, planets.row),
                planets.teq_K,
                planets.radius_rearth * R_EARTH_M,
                np.asarray(stars.distance_pc, np.float64)[planets.star] * PC_M,
            )

        return self._flux_cache[index].get(planets, _key(stars, band.center_um, band.width_um), compute)

    def _angle_rad(self, planets, stars):
        return self._angle_cache.get(planets, (id(stars),), lambda: angular_separation_rad(planets, stars))

    def baseline_m(self, planets, stars, params) -> np.ndarray | float:
        """Nulling baseline for every planet's star [m] (a float when fixed)."""
        if params.baseline_tuning is None:
            return per_planet(params.baseline_m, planets.row)
        tuning = params.baseline_tuning
        orbit_au = self._orbit_cache.get(stars, (tuning.orbit,), lambda: reference_orbit_au(stars, tuning.orbit))
        theta_ref = orbit_au * (AU_M / PC_M) / np.asarray(stars.distance_pc, np.float64)  # [rad]
        if is_scalar(tuning.wavelength_um, tuning.min_m, tuning.max_m):
            per_star = np.clip(tuning.wavelength_um * 1e-6 / (2.0 * theta_ref), tuning.min_m, tuning.max_m)
            return per_star[planets.star]
        row = planets.row
        return np.clip(per_planet(tuning.wavelength_um, row) * 1e-6 / (2.0 * theta_ref[planets.star]),
                       per_planet(tuning.min_m, row), per_planet(tuning.max_m, row))

    def inside(self, planets, stars, params) -> np.ndarray:
        """Between the inner and the outer angular limit: bool, (n_bands, n_planets)."""
        row = planets.row
        theta = self._angle_rad(planets, stars)
        baseline = self.baseline_m(planets, stars, params)
        diameter = per_planet(params.collector_diameter_m, row)
        # inner * lambda <= theta <= outer * lambda, with the lambda-free parts per planet
        inner_per_um = per_planet(params.inner_limit_lambda_over_b, row) * 1e-6 / baseline
        outer_per_um = per_planet(params.outer_limit_lod, row) * 1e-6 / diameter
        return angular_window(theta, inner_per_um, outer_per_um, params.bands, row)

    def detect_threshold(self, planets, stars, params) -> np.ndarray:
        """Inside the field and the thermal flux at least the band's flux limit: bool, (n_bands, n_planets)."""
        row = planets.row
        scale = sensitivity_scale(params.sensitivity_reference_diameter_m,
                                  per_planet(params.collector_diameter_m, row), row)
        out = self.inside(planets, stars, params)
        for i, band in enumerate(params.bands):
            flux = self._band_flux(i, band, planets, stars)
            out[i] &= flux >= per_planet(band.flux_limit_uJy, row) * scale
        return out

    def star_flux_uJy(self, index, band, planets, stars) -> np.ndarray:
        """Blackbody flux density of each planet's star in a band [uJy]."""
        if is_scalar(band.center_um, band.width_um):
            flux = self._star_cache[index].get(stars, cache_key(band.center_um, band.width_um),
                                               lambda: np.atleast_1d(star_blackbody_uJy(band.center_um,
                                                                                        band.width_um, stars)))
            return flux[planets.star]
        row = planets.row
        return star_blackbody_uJy(per_planet(band.center_um, row), per_planet(band.width_um, row), stars,
                                  planets.star)

    def noise_rates(self, planets, stars, params, block=None) -> list:
        """Count rates of every planet in every band (``detection = "snr"``).

        Returns
        -------
        list of sweep.physics.noise.NoiseRates
            One per band, each field of shape (n_planets,) [photons s^-1].
        """
        row, noise = planets.row, params.noise
        diameter = per_planet(params.collector_diameter_m, row)
        n_collectors = per_planet(noise.n_collectors, row)
        throughput = per_planet(noise.throughput, row)
        baseline = self.baseline_m(planets, stars, params)
        star_diameter = nz.stellar_angular_diameter_rad(np.asarray(stars.radius_rsun, np.float64),
                                                        np.asarray(stars.distance_pc, np.float64))
        star_diameter = np.atleast_1d(star_diameter)[planets.star]
        zodis = self.exozodi_zodi(planets, stars, params, block)
        out = []
        for i, band in enumerate(params.bands):
            center, width = per_planet(band.center_um, row), per_planet(band.width_um, row)
            omega = resolution_element_sr(center, diameter, SINGLE_MODE_RADIUS_LOD)
            instrument = instrument_rate(noise.instrument, row, center, width, omega,
                                         circular_area_m2(diameter, n_collectors), throughput)
            out.append(nz.interferometer_rates(
                self._band_flux(i, band, planets, stars), self.star_flux_uJy(i, band, planets, stars),
                star_diameter, per_planet(noise.null_depth, row), baseline, center, width, diameter,
                n_collectors, throughput, self.local_zodi_uJy_sr(i, band, planets, stars),
                zodis * self.exozodi_unit_uJy_sr(i, band, planets, stars), instrument,
                per_planet(noise.extended_transmission, row)))
        return out


def _key(stars, *values) -> tuple:
    return (id(stars),) + cache_key(*values)


register("interferometer", InterferometerSchema, Interferometer)
