"""An example plug-in concept: a single-aperture thermal imager (an invented instrument kind).

Copy this file, change the physics in ``detect``, and name the class in a sweep definition::

    [[concepts]]
    name = "warm-eye"
    kind = "plugin_concept.py:ThermalImager"      # path relative to the sweep definition, then ':Class'
    aperture_diameter_m = { grid = [4.0, 8.0] }
    inner_working_angle_lod = 2.0
    contrast_floor = { dist = "loguniform", a = 1e-8, b = 1e-6 }
    bands = [ { name = "N10", center_um = 10.0, width_um = 2.0, flux_limit_uJy = 1.0 } ]

``kind`` may also be an importable module, ``"my_package.my_module:ThermalImager"``.

.. warning::
   ``sweep`` imports this file and runs it, with your permissions, on this machine and on every
   dask worker. Only name plug-ins you wrote or trust. Workers must find the file at the same
   absolute path (a shared file system) or the module on their ``PYTHONPATH``.

What a plug-in provides (see :mod:`sweep.concepts`):

- ``Schema``: a pydantic model of its section. Subclass :class:`sweep.concepts.ConceptSchema`
  (it has ``name``, ``kind`` and ``bands`` and forbids unknown keys). Type every number as
  :data:`sweep.params.PositiveParam` (or ``Param``, ``FractionParam``...) so that users can fix,
  grid or vary it; put the unit in the key name (``_m``, ``_um``, ``_lod``, ``_uJy``).
- ``detect(planets, stars, params, block=None)``: a boolean array of shape
  ``(n_bands, n_planets)``. ``params`` is the section after resolution: every number is a float
  or an array with one value per row of the block; :func:`sweep.concepts.per_planet` turns either
  into a per-planet value. ``block`` is the row block (its rows key any per-star random draw;
  ignore it if there is none). Vectorise: no Python loops over planets or stars.
- Subclassing :class:`sweep.concepts.Concept` gives ``name``, ``band_names`` and
  ``band_wavelengths_um``.

The physics of this example: a planet is detected in a band when it lies outside
``inner_working_angle_lod * lambda / D``, its thermal flux density (blackbody at ``T_eq``) reaches
the band's flux limit, and its thermal flux ratio to the star (blackbody at ``T_eff``) reaches
the contrast floor.
"""

from __future__ import annotations

import numpy as np
from pydantic import Field

from sweep.concepts import BandSchema, Concept, ConceptSchema, per_planet
from sweep.params import PositiveParam
from sweep.physics import radiation
from sweep.physics._constants import AU_M, PC_M, R_EARTH_M, R_SUN_M


class ThermalImagerBand(BandSchema):
    """A band with its point-source sensitivity."""

    flux_limit_uJy: PositiveParam = Field(description="Faintest point source detected [uJy].")


class ThermalImagerSchema(ConceptSchema):
    """Section of the example thermal imager."""

    # The kind a user writes is the plug-in's own reference ("file.py:Class"), so any string.
    kind: str
    aperture_diameter_m: PositiveParam = Field(description="Aperture diameter [m].")
    inner_working_angle_lod: PositiveParam = Field(description="Inner working angle [lambda/D].")
    contrast_floor: PositiveParam = Field(description="Faintest thermal planet/star flux ratio [1].")
    bands: list[ThermalImagerBand] = Field(min_length=1, description="Observing bands.")


class ThermalImager(Concept):
    """Thermal-emission detections of a single-aperture imager (example plug-in)."""

    Schema = ThermalImagerSchema

    def detect(self, planets, stars, params, block=None) -> np.ndarray:
        row, star = planets.row, planets.star
        distance_m = np.asarray(stars.distance_pc, np.float64)[star] * PC_M
        theta = planets.separation_au * AU_M / distance_m  # [rad]
        lod_per_um = per_planet(params.inner_working_angle_lod, row) * 1e-6 / per_planet(
            params.aperture_diameter_m, row)
        out = np.empty((len(params.bands), len(planets)), dtype=bool)
        for i, band in enumerate(params.bands):
            center, width = per_planet(band.center_um, row), per_planet(band.width_um, row)
            planet = radiation.blackbody_flux_density_uJy(center, width, planets.teq_K,
                                                          planets.radius_rearth * R_EARTH_M, distance_m)
            host = radiation.blackbody_flux_density_uJy(center, width, np.asarray(stars.teff_K)[star],
                                                        np.asarray(stars.radius_rsun)[star] * R_SUN_M, distance_m)
            out[i] = ((theta >= lod_per_um * center)
                      & (planet >= per_planet(band.flux_limit_uJy, row))
                      & (planet >= per_planet(params.contrast_floor, row) * host))
        return out
