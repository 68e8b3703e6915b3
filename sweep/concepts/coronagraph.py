"""Coronagraph: planets detected in reflected starlight.

A coronagraph on a telescope of aperture ``D`` suppresses the star between an inner and an outer
working angle (in units of ``lambda / D``) down to a contrast floor. The detection model per
planet and band is:

- **angles**: ``inner_working_angle_lod * lambda / D <= theta <= outer_working_angle_lod * lambda / D``
  with ``theta`` the projected separation over the distance;
- **contrast**: ``C = p Phi(alpha) (R_p / r)^2 >= contrast_floor`` (Lambert phase function);
- **flux**: ``throughput * C * F_star >= flux limit``, where ``F_star`` is the star's flux density
  in the band and the flux limit is that of a loss-free instrument of this aperture in the
  reference integration time (``flux_limit_uJy``, or ``limiting_mag`` with the band's
  ``zero_point_Jy``: ``F = zero_point * 10^(-0.4 m)``).

The star's flux density in a band is its blackbody (``T_eff`` and radius at its distance) unless
the band has a ``zero_point_Jy`` and the star list carries a magnitude for the band (column named
by ``star_magnitude``, by default the band's name): then ``zero_point * 10^(-0.4 m_star)``,
star by star where the magnitude is known.

Example section (invented)::

    [[concepts]]
    name = "mirror"
    kind = "coronagraph"
    aperture_diameter_m = { grid = [4.0, 6.0, 8.0] }
    inner_working_angle_lod = 3.0
    outer_working_angle_lod = 30.0
    contrast_floor = { dist = "loguniform", a = 1e-11, b = 1e-10 }
    throughput = 0.2
    bands = [
      { name = "V", center_um = 0.55, width_um = 0.11, limiting_mag = 30.0, zero_point_Jy = 3640.0 },
      { name = "I", center_um = 0.80, width_um = 0.16, flux_limit_uJy = 0.005 },
    ]

With ``detection = "snr"`` the flux condition is replaced by a photon-noise budget (the
``noise`` table, :mod:`sweep.concepts.noise_budget`): the planet's rate, the stellar leakage
``raw_contrast * N_star`` (the raw contrast is taken as constant across the dark hole), local
zodiacal and exozodiacal light in a photometric aperture of radius ``aperture_radius_lod *
lambda / D``, and the optional instrument background give an SNR after the integration time; the
contrast floor becomes optional there. Example (invented)::

    [[concepts]]
    name = "mirror"
    kind = "coronagraph"
    detection = "snr"
    aperture_diameter_m = 6.0
    inner_working_angle_lod = 3.0
    outer_working_angle_lod = 30.0
    throughput = 0.2
    bands = [ { name = "V", center_um = 0.55, width_um = 0.11 } ]

    [concepts.noise]
    integration_time_h = { dist = "loguniform", a = 5.0, b = 50.0 }
    raw_contrast = 1e-10
    exozodi = { median_zodi = 3.0, sigma_ln = 1.0, scale = { dist = "loguniform", a = 0.3, b = 3.0 } }

References
----------
.. [1] Traub, W. A. & Oppenheimer, B. R. 2010, in Exoplanets (ed. S. Seager, Univ. of Arizona
   Press), 111 (direct imaging, working angles and contrast; from memory).
.. [2] Sobolev, V. V. 1975, Light Scattering in Planetary Atmospheres (Pergamon), ch. 9
   (Lambert phase function; from memory).
"""

from __future__ import annotations

from typing import Literal

import numpy as np
from pydantic import Field, model_validator

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
from sweep.errors import UserInputError
from sweep.params import FractionParam, Param, PositiveParam, bounds
from sweep.physics import noise as nz
from sweep.physics import radiation
from sweep.physics.photometry import circular_area_m2, resolution_element_sr


class CoronagraphBand(BandSchema):
    """A band of the coronagraph and its point-source sensitivity."""

    flux_limit_uJy: PositiveParam | None = Field(
        default=None, description="Faintest point source detected in the reference integration time [uJy]."
    )
    limiting_mag: Param | None = Field(
        default=None, description="The same limit as a magnitude (needs zero_point_Jy) [mag]."
    )
    zero_point_Jy: PositiveParam | None = Field(
        default=None, description="Flux density of magnitude 0 in this band [Jy] (Vega system for most lists)."
    )
    star_magnitude: str | None = Field(
        default=None,
        description="Star-list magnitude for this band (default: the band's name, when the list has it).",
    )

    @model_validator(mode="after")
    def _one_limit(self):
        if self.flux_limit_uJy is not None and self.limiting_mag is not None:
            raise ValueError(f"band {self.name!r}: give only one of flux_limit_uJy and limiting_mag")
        if self.zero_point_Jy is None and self.limiting_mag is not None:
            raise ValueError(f"band {self.name!r}: limiting_mag needs zero_point_Jy to become a flux density")
        if self.zero_point_Jy is None and self.star_magnitude is not None:
            raise ValueError(f"band {self.name!r}: star_magnitude needs zero_point_Jy to become a flux density")
        return self


class CoronagraphNoise(NoiseSchema):
    """The photon-noise budget of a coronagraph (``detection = "snr"``)."""

    raw_contrast: PositiveParam = Field(
        description="Stellar leakage in the planet's aperture as a fraction of the star's light [1]."
    )
    aperture_radius_lod: PositiveParam = Field(
        default=0.7, description="Radius of the photometric aperture [lambda/D]."
    )


class CoronagraphSchema(DetectionSchema):
    """Section of a coronagraph concept."""

    kind: Literal["coronagraph"]
    aperture_diameter_m: PositiveParam = Field(description="Telescope aperture diameter [m].")
    inner_working_angle_lod: PositiveParam = Field(description="Inner working angle [lambda/D].")
    outer_working_angle_lod: PositiveParam = Field(description="Outer working angle [lambda/D].")
    contrast_floor: PositiveParam | None = Field(
        default=None,
        description="Faintest planet/star flux ratio detected [1]; required for detection = 'threshold'.",
    )
    throughput: FractionParam = Field(description="Fraction of the planet's light reaching the detector [1].")
    sensitivity_reference_diameter_m: PositiveParam | None = Field(
        default=None,
        description=(
            "If given, the flux limits hold for this aperture and scale as (reference / D)^2 for "
            "others [m]; otherwise they do not depend on D."
        ),
    )
    bands: list[CoronagraphBand] = Field(min_length=1, description="Observing bands.")
    noise: CoronagraphNoise | None = Field(
        default=None, description="Photon-noise budget; required for detection = 'snr'."
    )

    @model_validator(mode="after")
    def _detection_keys(self):
        check_detection_keys(self, ("flux_limit_uJy", "limiting_mag"), ("sensitivity_reference_diameter_m",))
        if self.detection == "threshold" and self.contrast_floor is None:
            raise ValueError("contrast_floor is required for detection = 'threshold'")
        return self

    @model_validator(mode="after")
    def _inner_below_outer(self):
        inner = bounds(self.inner_working_angle_lod)[1]
        outer = bounds(self.outer_working_angle_lod)[0]
        if inner >= outer:
            raise ValueError(
                f"inner_working_angle_lod (up to {inner:g}) must be smaller than "
                f"outer_working_angle_lod (from {outer:g}) for every allowed value"
            )
        return self


class Coronagraph(SnrDetection, Concept):
    """Reflected-light detections of a coronagraph (see the module docstring)."""

    Schema = CoronagraphSchema

    def __init__(self, section: CoronagraphSchema):
        super().__init__(section)
        self._star_cache = [LastResult() for _ in section.bands]
        self._planet_cache = LastResult()
        self._init_snr(len(section.bands))

    def contrast(self, planets) -> np.ndarray:
        """Planet/star flux ratio p Phi(alpha) (R_p / r)^2 of every planet [1] (grey: all bands)."""
        return radiation.reflected_contrast(planets.geometric_albedo, planets.phase_angle_rad,
                                            planets.radius_rearth, planets.orbital_distance_au)

    def _planet_terms(self, planets, stars):
        def compute():
            return np.atleast_1d(self.contrast(planets)), angular_separation_rad(planets, stars)

        return self._planet_cache.get(planets, (id(stars),), compute)

    def _magnitudes(self, band, stars):
        if band.zero_point_Jy is None:
            return None
        column = band.star_magnitude or band.name
        mags = (stars.magnitudes or {}).get(column)
        if mags is None and band.star_magnitude is not None:
            raise UserInputError(
                f"concepts.{self.name}.bands.{band.name}.star_magnitude: the star list has no "
                f"magnitude {column!r} (it has: {', '.join(sorted(stars.magnitudes)) or 'none'})"
            )
        return None if mags is None else np.asarray(mags, np.float64)

    def star_flux_uJy(self, band, stars, star_index=None, row=None):
        """The star's flux density in a band [uJy].

        Parameters
        ----------
        band : CoronagraphBand
            A resolved band.
        stars : sweep.structs.StarTable
            The star list.
        star_index, row : ndarray of int, optional
            Per-planet star and row indices; needed when a band parameter is a per-row factor
            (the result is then per planet, otherwise per star).
        """
        mags = self._magnitudes(band, stars)
        if row is None:
            center, width, zero_point, index = band.center_um, band.width_um, band.zero_point_Jy, slice(None)
        else:
            center, width = per_planet(band.center_um, row), per_planet(band.width_um, row)
            zero_point = None if band.zero_point_Jy is None else per_planet(band.zero_point_Jy, row)
            index = star_index
        flux = np.atleast_1d(np.asarray(star_blackbody_uJy(center, width, stars, index), np.float64))
        if mags is not None:
            m = mags[index]
            known = np.isfinite(m)
            flux = np.where(known, zero_point * 1e6 * 10.0 ** (-0.4 * np.where(known, m, 0.0)), flux)
        return flux

    def _star_flux_at_planets(self, index, band, planets, stars):
        if is_scalar(band.center_um, band.width_um, *([band.zero_point_Jy] if band.zero_point_Jy is not None else [])):
            key = (id(stars),) + cache_key(band.center_um, band.width_um,
                                           band.zero_point_Jy if band.zero_point_Jy is not None else 0.0)
            per_star = self._star_cache[index].get(stars, key, lambda: self.star_flux_uJy(band, stars))
            return per_star[planets.star]
        return self.star_flux_uJy(band, stars, planets.star, planets.row)

    @staticmethod
    def flux_limit_uJy(band, row):
        """A band's flux limit [uJy] from ``flux_limit_uJy`` or ``limiting_mag`` and ``zero_point_Jy``."""
        if band.flux_limit_uJy is not None:
            return per_planet(band.flux_limit_uJy, row)
        return per_planet(band.zero_point_Jy, row) * 1e6 * 10.0 ** (-0.4 * per_planet(band.limiting_mag, row))

    def inside(self, planets, stars, params) -> np.ndarray:
        """Inside the working angles and above the contrast floor (if any): bool, (n_bands, n_planets)."""
        row = planets.row
        contrast, theta = self._planet_terms(planets, stars)
        diameter = per_planet(params.aperture_diameter_m, row)
        inner_per_um = per_planet(params.inner_working_angle_lod, row) * 1e-6 / diameter
        outer_per_um = per_planet(params.outer_working_angle_lod, row) * 1e-6 / diameter
        out = angular_window(theta, inner_per_um, outer_per_um, params.bands, row)
        if params.contrast_floor is not None:
            out &= contrast >= per_planet(params.contrast_floor, row)
        return out

    def detect_threshold(self, planets, stars, params) -> np.ndarray:
        """Inside the field and the collected flux at least the band's flux limit: bool, (n_bands, n_planets)."""
        row = planets.row
        contrast, _ = self._planet_terms(planets, stars)
        diameter = per_planet(params.aperture_diameter_m, row)
        collected = contrast * per_planet(params.throughput, row)
        scale = sensitivity_scale(params.sensitivity_reference_diameter_m, diameter, row)
        out = self.inside(planets, stars, params)
        for i, band in enumerate(params.bands):
            star_flux = self._star_flux_at_planets(i, band, planets, stars)
            out[i] &= collected * star_flux >= self.flux_limit_uJy(band, row) * scale
        return out

    def noise_rates(self, planets, stars, params, block=None) -> list:
        """Count rates of every planet in every band (``detection = "snr"``).

        Returns
        -------
        list of sweep.physics.noise.NoiseRates
            One per band, each field of shape (n_planets,) [photons s^-1].
        """
        row, noise = planets.row, params.noise
        contrast, _ = self._planet_terms(planets, stars)
        diameter = per_planet(params.aperture_diameter_m, row)
        throughput = per_planet(params.throughput, row)
        radius_lod = per_planet(noise.aperture_radius_lod, row)
        raw_contrast = per_planet(noise.raw_contrast, row)
        zodis = self.exozodi_zodi(planets, stars, params, block)
        out = []
        for i, band in enumerate(params.bands):
            center, width = per_planet(band.center_um, row), per_planet(band.width_um, row)
            star_flux = self._star_flux_at_planets(i, band, planets, stars)
            omega = resolution_element_sr(center, diameter, radius_lod)
            instrument = instrument_rate(noise.instrument, row, center, width, omega,
                                         circular_area_m2(diameter), throughput)
            out.append(nz.coronagraph_rates(
                contrast * star_flux, star_flux, raw_contrast, center, width, diameter, throughput,
                self.local_zodi_uJy_sr(i, band, planets, stars),
                zodis * self.exozodi_unit_uJy_sr(i, band, planets, stars), instrument, radius_lod))
        return out


register("coronagraph", CoronagraphSchema, Coronagraph)
