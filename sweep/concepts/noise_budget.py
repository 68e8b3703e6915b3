"""Detection by signal-to-noise ratio: the part of the photon-noise model both concept kinds share.

A concept section with ``detection = "snr"`` carries a ``noise`` table (:class:`NoiseSchema`,
extended by each kind with its stellar-leakage keys). A planet is detected in a band when it lies
inside the concept's field (working angles, as in threshold detection) and

    SNR = S t / sqrt((S + k B) t + (f C t)^2) >= snr_threshold

(:func:`sweep.physics.noise.snr`; rates from :mod:`sweep.physics.noise` and
:mod:`sweep.physics.sky`, equations in ``docs/noise_model.md``).

What lives here:

- the schemas of the ``noise`` table, its ``exozodi`` prior and its optional ``instrument``
  background;
- per-star exozodi levels: one uniform per star and row, the first ``n_stars`` numbers of the
  row's :data:`sweep.streams.STAR_PROPERTIES` stream, turned into a level by the inverse CDF of
  the lognormal prior (:func:`sweep.physics.noise.exozodi_level`). The stream is keyed by the row's
  population seed, so the levels belong to the population draw: every concept and grid point of a
  row sees the same dust, and a row gets the same levels whatever the block it is evaluated in;
- the integration time per star: ``time_allocation = "per-star"`` (``integration_time_h`` for
  every star) or ``"budget"`` (``total_time_h`` shared among the stars by
  :func:`sweep.physics.noise.allocate_time_budget`; see :meth:`SnrDetection.time_allocation_s`);
- :class:`SnrDetection`, the mix-in that turns a kind's rates into SNRs and masks.
"""

from __future__ import annotations

import math
from typing import Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, model_validator

from sweep import params as _params
from sweep import streams
from sweep.concepts import ConceptSchema, LastResult, cache_key, is_scalar, nominal, per_planet
from sweep.params import FractionParam, NonNegativeParam, PositiveParam, bounds
from sweep.physics import noise as nz
from sweep.physics import orbits, radiation, sky
from sweep.physics.photometry import extended_source_rate, greybody_uJy_sr
from sweep.structs import PlanetBatch

HOUR_S = 3600.0
#: Smallest projected separation at which the exozodi is evaluated [au]: its brightness diverges
#: at r = 0, and planets that close (1 micro-arcsec at 1 pc) lie inside any inner limit anyway.
MIN_SEPARATION_AU = 1e-6

#: Reference planet of the time-budget rule: an Earth twin on a circular orbit at the
#: Earth-equivalent insolation distance sqrt(L / L_sun) au, radius 1 R_earth, Bond albedo 0.3
#: (Earth's, from memory), geometric albedo 2 A_B / 3 (Lambert sphere), T_eq for full
#: redistribution.
REFERENCE_RADIUS_REARTH = 1.0
REFERENCE_BOND_ALBEDO = 0.3
#: Orientations over which the rule's completeness is averaged: midpoints of a grid in cos(i)
#: (isotropic orbits) and in orbital phase (uniform in time).
REFERENCE_N_INCLINATION = 12
REFERENCE_N_PHASE = 24


class ExozodiSchema(BaseModel):
    """Exozodiacal dust: a lognormal population prior of levels, and a sweep-level factor."""

    model_config = ConfigDict(extra="forbid")

    median_zodi: PositiveParam = Field(
        default=nz.EXOZODI_MEDIAN_ZODI,
        description="Median level of the population prior [zodi] (1 zodi: a Solar-System-like disk).",
    )
    sigma_ln: NonNegativeParam = Field(
        default=nz.EXOZODI_SIGMA_LN,
        description="Standard deviation of ln(level) across stars [1]; 0 puts every star at the median.",
    )
    scale: NonNegativeParam = Field(
        default=1.0, description="Factor on every star's level [1]; 0: no exozodiacal light."
    )


class InstrumentSchema(BaseModel):
    """Detector noise and thermal emission of warm optics, as an equivalent background rate."""

    model_config = ConfigDict(extra="forbid")

    dark_current_per_s: NonNegativeParam = Field(
        default=0.0, description="Dark current (and clock-induced charge) per pixel, in electrons [s^-1]."
    )
    read_noise_e: NonNegativeParam = Field(default=0.0, description="Read noise per pixel and frame [e-].")
    n_pixels: PositiveParam = Field(default=1.0, description="Pixels in the photometric aperture [1].")
    frame_time_s: PositiveParam = Field(default=1000.0, description="Time between detector reads [s].")
    optics_temperature_K: PositiveParam | None = Field(
        default=None, description="Temperature of warm optics in the beam [K]; not set: no thermal background."
    )
    optics_emissivity: FractionParam = Field(
        default=0.0, description="Emissivity of the warm optics, seen through the throughput [1]."
    )

    @model_validator(mode="after")
    def _emissivity_needs_temperature(self):
        if self.optics_temperature_K is None and bounds(self.optics_emissivity)[1] > 0.0:
            raise ValueError("optics_emissivity needs optics_temperature_K")
        return self


class NoiseSchema(BaseModel):
    """The ``noise`` table of a concept with ``detection = "snr"``: time, threshold, noise terms."""

    model_config = ConfigDict(extra="forbid")

    time_allocation: Literal["per-star", "budget"] = Field(
        default="per-star",
        description=(
            "'per-star': every star gets integration_time_h; 'budget': total_time_h is shared among "
            "the stars in order of expected detections per hour of the nominal model."
        ),
    )
    integration_time_h: PositiveParam | None = Field(
        default=None, description="Integration time per star, time_allocation = 'per-star' [h]."
    )
    total_time_h: PositiveParam | None = Field(
        default=None, description="Time shared among the stars, time_allocation = 'budget' [h]."
    )
    snr_threshold: PositiveParam = Field(default=5.0, description="Signal-to-noise ratio of a detection [1].")
    background_subtraction_k: PositiveParam = Field(
        default=2.0,
        description=("Background-subtraction factor k [1]: 1 for a known background, 2 for one measured "
                     "in an equal time."),
    )
    systematic_fraction: FractionParam = Field(
        default=0.0,
        description="Share of the stellar leakage whose fluctuations do not average down with time [1].",
    )
    exozodi: ExozodiSchema = Field(default_factory=ExozodiSchema, description="Exozodi level of each star.")
    instrument: InstrumentSchema | None = Field(
        default=None, description="Detector and thermal instrument background; not set: none."
    )

    @model_validator(mode="after")
    def _time_keys_match_the_allocation(self):
        wanted, unused = (("integration_time_h", "total_time_h") if self.time_allocation == "per-star"
                          else ("total_time_h", "integration_time_h"))
        if getattr(self, wanted) is None:
            raise ValueError(f"time_allocation = {self.time_allocation!r} needs {wanted}")
        if getattr(self, unused) is not None:
            raise ValueError(f"{unused} is not used with time_allocation = {self.time_allocation!r}; "
                             f"give {wanted}")
        return self


class DetectionSchema(ConceptSchema):
    """Fields of a concept kind with both detection models (band flux limits, or SNR)."""

    detection: Literal["threshold", "snr"] = Field(
        default="threshold",
        description="Detection model: 'threshold' (band flux limits) or 'snr' (the noise table).",
    )


def check_detection_keys(section, band_limit_keys: tuple[str, ...], threshold_only: tuple[str, ...] = ()):
    """Model-level check of a concept schema: the keys each detection model needs and ignores.

    Raises ValueError (pydantic turns it into a one-line message naming the concept).
    """
    if section.detection == "snr":
        if section.noise is None:
            raise ValueError("detection = 'snr' needs the noise table ([concepts.noise])")
        for band in section.bands:
            given = [key for key in band_limit_keys if getattr(band, key) is not None]
            if given:
                raise ValueError(f"band {band.name!r}: {given[0]} is not used with detection = 'snr' "
                                 "(the noise table sets the sensitivity); remove it")
        for key in threshold_only:
            if getattr(section, key) is not None:
                raise ValueError(f"{key} is only used with detection = 'threshold'; remove it")
    else:
        if section.noise is not None:
            raise ValueError("the noise table is only used with detection = 'snr'")
        for band in section.bands:
            if all(getattr(band, key) is None for key in band_limit_keys):
                raise ValueError(f"band {band.name!r}: give {' or '.join(band_limit_keys)} "
                                 "(detection = 'threshold'), or use detection = 'snr'")


def star_uniforms(block, n_stars: int) -> np.ndarray:
    """One uniform per row and star from each row's ``STAR_PROPERTIES`` stream.

    Parameters
    ----------
    block : sweep.blocks.RowBlock
        The rows (their seed, base index and population source key the streams).
    n_stars : int
        Stars in the star list [1].

    Returns
    -------
    ndarray, shape (n_rows, n_stars)
        Uniforms in [0, 1) [1]; row r, star s is the s-th number of row r's stream.
    """
    out = np.empty((len(block), n_stars))
    generators = streams.row_generators(block.seed, block.base_index, block.population_source, streams.STAR_PROPERTIES)
    for row, rng in zip(out, generators):
        rng.random(out=row)
    return out


def exozodi_levels(exozodi, planets, uniforms) -> np.ndarray:
    """Exozodi level of each planet's star in its row [zodi] (the median star where no block is given).

    Parameters
    ----------
    exozodi : ExozodiSchema
        Resolved ``noise.exozodi`` (floats or per-row arrays).
    planets : sweep.structs.PlanetBatch
        The planets.
    uniforms : ndarray of shape (n_rows, n_stars), or None
        From :func:`star_uniforms`; None gives every star the prior's median (u = 0.5).
    """
    row = planets.row
    u = 0.5 if uniforms is None else uniforms[row, planets.star]
    return np.broadcast_to(nz.exozodi_level(u, per_planet(exozodi.median_zodi, row),
                                            per_planet(exozodi.sigma_ln, row),
                                            per_planet(exozodi.scale, row)), row.shape)


def instrument_rate(instrument, row, center_um, width_um, omega_sr, area_m2, throughput):
    """Detector plus warm-optics background (0 without an ``instrument`` table).

    Detector: :func:`sweep.physics.noise.detector_rate`. Optics: a grey body at
    ``optics_temperature_K`` with ``optics_emissivity`` filling the resolution element, through the
    collecting area and throughput (:func:`sweep.physics.photometry.extended_source_rate`).

    Parameters
    ----------
    instrument : InstrumentSchema or None
        Resolved ``noise.instrument`` (floats or per-row arrays).
    row : ndarray of int
        Row of each planet (``planets.row``).
    center_um, width_um : float or ndarray
        Band centre and full width [um].
    omega_sr : float or ndarray
        Solid angle of the resolution element [sr].
    area_m2 : float or ndarray
        Collecting area [m^2].
    throughput : float or ndarray
        End-to-end throughput [1].

    Returns
    -------
    float or ndarray
        Equivalent background rate [counts s^-1].
    """
    if instrument is None:
        return 0.0
    rate = nz.detector_rate(per_planet(instrument.dark_current_per_s, row), per_planet(instrument.read_noise_e, row),
                            per_planet(instrument.n_pixels, row), per_planet(instrument.frame_time_s, row))
    if instrument.optics_temperature_K is not None:
        optics = greybody_uJy_sr(center_um, width_um, per_planet(instrument.optics_temperature_K, row),
                                 per_planet(instrument.optics_emissivity, row))
        rate = rate + extended_source_rate(optics, omega_sr, center_um, width_um, area_m2, throughput)
    return rate


def reference_planets(stars) -> tuple[PlanetBatch, np.ndarray]:
    """Reference planets of the time-budget rule: per star, one at quadrature and a grid of orientations.

    Returns
    -------
    planets : PlanetBatch
        ``n_stars * (1 + REFERENCE_N_INCLINATION * REFERENCE_N_PHASE)`` planets, all in row 0.
    quadrature : ndarray of bool
        True for the one planet per star seen at maximum elongation (separation a, phase 90 deg).
    """
    n_s = len(stars)
    k = REFERENCE_N_INCLINATION * REFERENCE_N_PHASE
    cos_i = (np.arange(REFERENCE_N_INCLINATION) + 0.5) / REFERENCE_N_INCLINATION
    phase = 2.0 * math.pi * (np.arange(REFERENCE_N_PHASE) + 0.5) / REFERENCE_N_PHASE
    inc = np.concatenate([[0.0], np.repeat(np.arccos(cos_i), REFERENCE_N_PHASE)])  # face-on first
    mean = np.concatenate([[0.0], np.tile(phase, REFERENCE_N_INCLINATION)])
    lum = np.asarray(stars.luminosity_lsun, np.float64)
    star = np.repeat(np.arange(n_s), k + 1)
    a = np.sqrt(lum)[star]
    inc, mean = np.tile(inc, n_s), np.tile(mean, n_s)
    zeros = np.zeros(len(star))
    sep, dist, alpha = orbits.sky_geometry(a, zeros, inc, zeros, mean)
    teq = radiation.equilibrium_temperature_K(np.asarray(stars.teff_K, np.float64)[star],
                                              np.asarray(stars.radius_rsun, np.float64)[star], a,
                                              REFERENCE_BOND_ALBEDO)
    full = lambda v: np.full(len(star), float(v))  # noqa: E731
    planets = PlanetBatch(
        row=np.zeros(len(star), np.int64), star=star, radius_rearth=full(REFERENCE_RADIUS_REARTH),
        period_d=full(np.nan), semi_major_axis_au=a, eccentricity=zeros, inclination_rad=inc,
        arg_periapsis_rad=zeros, mean_anomaly_rad=mean, bond_albedo=full(REFERENCE_BOND_ALBEDO),
        geometric_albedo=full(radiation.geometric_albedo_lambert(REFERENCE_BOND_ALBEDO)),
        teq_K=np.asarray(teq, np.float64) * np.ones(len(star)), insolation_searth=full(1.0),
        mass_mearth=full(1.0), rv_semi_amplitude_ms=full(np.nan), separation_au=np.asarray(sep, np.float64),
        orbital_distance_au=np.asarray(dist, np.float64), phase_angle_rad=np.asarray(alpha, np.float64))
    quadrature = np.zeros(len(star), bool)
    quadrature[:: k + 1] = True
    return planets, quadrature


class _KeyedCache(dict):
    """A dict of results computed from the nominal model; a pickled concept travels without it."""

    def __reduce__(self):
        return (_KeyedCache, ())


class SnrDetection:
    """Mix-in of the concepts that detect by SNR.

    The concept provides ``inside(planets, stars, params)`` (its field: working angles, contrast
    floor; bool, (n_bands, n_planets)), ``noise_rates(planets, stars, params, block=None)`` (one
    :class:`~sweep.physics.noise.NoiseRates` per band) and ``detect_threshold(planets, stars,
    params)`` (the band-flux-limit masks); this class adds :meth:`detect`, exozodi levels,
    integration times, SNRs, masks and the time a sweep implies.
    """

    def detect(self, planets, stars, params, block=None) -> np.ndarray:
        """Detection masks of the section's ``detection`` model, bool, (n_bands, n_planets).

        ``"snr"``: :meth:`detect_snr`; ``"threshold"``: the kind's ``detect_threshold(planets,
        stars, params)`` (band flux limits). Arguments as for :meth:`sweep.concepts.Concept.detect`.
        """
        if params.detection == "snr":
            return self.detect_snr(planets, stars, params, block)
        return self.detect_threshold(planets, stars, params)

    def _init_snr(self, n_bands: int):
        self._uniform_cache = LastResult()
        self._allocation_cache = _KeyedCache()
        self._zodi_cache = [LastResult() for _ in range(n_bands)]
        self._exozodi_cache = [LastResult() for _ in range(n_bands)]
        self._grid_paths = None

    # -- sky backgrounds ----------------------------------------------------------------------------

    def local_zodi_uJy_sr(self, index, band, planets, stars) -> np.ndarray:
        """Local zodiacal light towards each planet's star in a band [uJy sr^-1] (:mod:`sweep.physics.sky`)."""
        latitude = np.asarray(stars.ecliptic_latitude_deg, np.float64)
        if is_scalar(band.center_um, band.width_um):
            per_star = self._zodi_cache[index].get(
                stars, cache_key(band.center_um, band.width_um),
                lambda: np.atleast_1d(sky.local_zodi_uJy_sr(band.center_um, band.width_um, latitude)))
            return per_star[planets.star]
        row = planets.row
        return sky.local_zodi_uJy_sr(per_planet(band.center_um, row), per_planet(band.width_um, row),
                                     latitude[planets.star])

    def exozodi_unit_uJy_sr(self, index, band, planets, stars) -> np.ndarray:
        """Exozodiacal light of a 1-zodi disk at each planet's separation in a band [uJy sr^-1]."""
        def compute():
            row = planets.row
            return np.atleast_1d(sky.exozodi_uJy_sr(
                per_planet(band.center_um, row), per_planet(band.width_um, row), 1.0,
                np.maximum(planets.separation_au, MIN_SEPARATION_AU),
                np.asarray(stars.luminosity_lsun, np.float64)[planets.star],
                np.asarray(stars.teff_K, np.float64)[planets.star]))

        key = (id(stars),) + cache_key(band.center_um, band.width_um)
        return self._exozodi_cache[index].get(planets, key, compute)

    @property
    def _prefix(self) -> str:
        return f"concepts.{self.section.name}"

    # -- per-star exozodi levels ---------------------------------------------------------------

    def exozodi_zodi(self, planets, stars, params, block=None) -> np.ndarray:
        """Exozodi level at each planet's star [zodi]: a per-row, per-star draw (median without a block)."""
        uniforms = None
        if block is not None:
            uniforms = self._uniform_cache.get(block, (id(stars), len(stars)),
                                               lambda: star_uniforms(block, len(stars)))
        return exozodi_levels(params.noise.exozodi, planets, uniforms)

    # -- integration time --------------------------------------------------------------------------

    def integration_time_s(self, planets, stars, params) -> np.ndarray | float:
        """Integration time spent on each planet's star [s]."""
        noise = params.noise
        if noise.time_allocation == "per-star":
            return per_planet(noise.integration_time_h, planets.row) * HOUR_S
        allocated = self.time_allocation_s(stars, params)
        if allocated.ndim == 1:
            return allocated[planets.star]
        return allocated[planets.row, planets.star]

    def time_allocation_s(self, stars, params) -> np.ndarray:
        """Time each star gets under ``time_allocation = "budget"`` [s].

        The rule (``docs/noise_model.md``, section 9), from the nominal model: every uncertain
        parameter at its prior's median, grid parameters at the current grid point, every star's
        exozodi at the population median. For each star, t_need is the shortest time over the bands
        in which the reference planet (:func:`reference_planets`) at maximum elongation reaches the
        threshold; E is the share of its orientations inside the field of that band (its
        geometric completeness; the occurrence rate, common to all stars, drops out). Stars
        are ranked by E / t_need and take their t_need while the budget lasts
        (:func:`sweep.physics.noise.allocate_time_budget`). The ranking is computed once per grid
        point and cached; ``total_time_h`` may be a per-row factor.

        Returns
        -------
        ndarray, shape (n_stars,) or (n_rows, n_stars)
            Allocated time [s]: t_need or 0 (per row when ``total_time_h`` is a per-row factor).
        """
        need, expected = self._ranking(stars, params)
        budget = np.asarray(params.noise.total_time_h, np.float64) * HOUR_S
        if budget.ndim == 0:
            return nz.allocate_time_budget(need, expected, budget)
        shape = (len(budget), len(need))
        return nz.allocate_time_budget(np.broadcast_to(need, shape), expected, budget)

    def _grid_point(self, resolved=None) -> tuple:
        """The current grid point: (path, value) of every grid parameter in ``resolved`` (sorted)."""
        if resolved is None:
            return ()
        if self._grid_paths is None:
            self._grid_paths = frozenset(site.path for site in _params.collect(self.section, self._prefix)
                                         if site.is_grid)
        return tuple(sorted((site.path, float(site.param)) for site in _params.collect(resolved, self._prefix)
                            if site.path in self._grid_paths))

    def nominal_section(self, resolved=None):
        """The section at its nominal values: uncertain parameters at their prior's median, grid
        parameters at the grid point of ``resolved`` (at their median grid value without it)."""
        at = dict(self._grid_point(resolved))

        def value_of(path, param):
            return at[path] if path in at else nominal(param)

        return _params.resolve(self.section, self._prefix, value_of)

    def _ranking(self, stars, resolved=None):
        key = (id(stars), self._grid_point(resolved))
        entry = self._allocation_cache.get(key)
        if entry is None or entry[0] is not stars:
            entry = (stars, *self.reference_need(stars, self.nominal_section(resolved)))
            self._allocation_cache[key] = entry
        return entry[1], entry[2]

    def reference_need(self, stars, nominal_params) -> tuple[np.ndarray, np.ndarray]:
        """t_need [s] and completeness E [1] of every star's reference planet in the nominal model.

        t_need: the shortest time, over the bands, in which the reference planet at maximum
        elongation reaches the threshold (``inf`` where it is outside the field or the SNR
        ceiling is below the threshold). E: the share of its orientations inside the field of the
        band that sets t_need (geometric completeness; 0 where t_need is infinite).
        """
        planets, quadrature = reference_planets(stars)
        noise = nominal_params.noise
        inside = self.inside(planets, stars, nominal_params)
        rates = self.noise_rates(planets, stars, nominal_params)
        times = np.stack([np.where(ok[quadrature], nz.time_to_snr(
            noise.snr_threshold, r.signal[quadrature], r.background[quadrature], r.leak[quadrature],
            noise.background_subtraction_k, noise.systematic_fraction), np.inf)
            for ok, r in zip(inside, rates)])
        best = np.argmin(times, axis=0)
        need = times[best, np.arange(len(stars))]
        completeness = inside[:, ~quadrature].reshape(len(inside), len(stars), -1).mean(axis=2)
        expected = np.where(np.isfinite(need), completeness[best, np.arange(len(stars))], 0.0)
        return need, expected

    def total_time_h(self, stars) -> float | None:
        """Observing time of one survey (one row) at the nominal values [h]; None for threshold detection.

        ``per-star``: the number of stars times the nominal ``integration_time_h``. ``budget``: the
        sum of the times the rule allocates (at most the nominal ``total_time_h``).
        """
        section = self.section
        if section.detection != "snr":
            return None
        noise = section.noise
        if noise.time_allocation == "per-star":
            return len(stars) * nominal(noise.integration_time_h)
        need, expected = self._ranking(stars)
        return float(nz.allocate_time_budget(need, expected, nominal(noise.total_time_h) * HOUR_S).sum()) / HOUR_S

    # -- SNR and masks ------------------------------------------------------------------------------

    def snr(self, planets, stars, params, block=None) -> np.ndarray:
        """Signal-to-noise ratio of every planet in every band, shape (n_bands, n_planets) [1]."""
        noise, row = params.noise, planets.row
        t = self.integration_time_s(planets, stars, params)
        k = per_planet(noise.background_subtraction_k, row)
        f = per_planet(noise.systematic_fraction, row)
        rates = self.noise_rates(planets, stars, params, block)
        out = np.empty((len(rates), len(planets)))
        for i, r in enumerate(rates):
            out[i] = nz.snr(r.signal, r.background, r.leak, t, k, f)
        return out

    def detect_snr(self, planets, stars, params, block=None) -> np.ndarray:
        """Inside the field and SNR at least ``snr_threshold``: bool, (n_bands, n_planets)."""
        mask = self.inside(planets, stars, params)
        mask &= self.snr(planets, stars, params, block) >= per_planet(params.noise.snr_threshold, planets.row)
        return mask
