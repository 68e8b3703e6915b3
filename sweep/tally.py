"""Planets and detections -> counts per row, grid point, concept, band and category.

The ``[categories]`` section of a sweep definition chooses the category axes of the cube::

    [categories]
    radius_rearth = [0.5, 1.0, 1.75, 3.5, 6.0]    # radius bins (edges) -> axis radius_bin
    teq_K = [150.0, 250.0, 350.0, 800.0]          # T_eq bins (edges) -> axis teq_bin
    spectral_class = true                          # one bin per class F, G, K, M -> axis spectral_class
    overflow_bins = false                          # see below
    rv_threshold_ms = 0.1                          # -> variable rv_confirmable
    criteria = [
      { name = "rocky-hz", radius_rearth = [0.5, 1.5], habitable_zone = "conservative" },
      { name = "temperate", teq_K = [200.0, 320.0] },
    ]

Bins are half-open, ``[low, high)``. A planet outside every radius or T_eq bin is in no bin: it
is not counted in any per-category output (``present``, ``detected``, ``detected_any``,
``band_multiplicity``, ``rv_confirmable``), so sums over bins can be smaller than the number of
planets. With ``overflow_bins = true`` each binned axis gains an explicit first bin below its
lowest edge and a last bin at or above its highest edge, and every planet is counted. Criteria
do not depend on the bins: they count every planet that meets them.

Variables (dimensions after ``row``; DEVELOPERS.md, "The cube"):

=====================  ====================================================================
``present``            categories: planets drawn
``detected``           grid, ``channel``, categories: detected in that concept's band
``detected_any``       grid, ``concept``, categories: detected in at least one band
``band_multiplicity``  grid, ``concept``, categories, ``n_bands``: by number of bands (0..n)
``rv_confirmable``     grid, ``concept``, categories: detected and RV semi-amplitude above the
                       threshold (an RV survey could confirm them); only with ``rv_threshold_ms``
``criterion_present``  ``criterion``: planets meeting each named criterion
``criterion_detected`` grid, ``concept``, ``criterion``: ... and detected in at least one band
=====================  ====================================================================

Completeness is ``detected / present`` along matching category axes. Each output of a block is
one flat index and one :func:`numpy.bincount`; there are no loops over planets or categories.
"""

from __future__ import annotations

import math
from typing import Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

from sweep.blocks import OutputVariable
from sweep.params import require_distinct_names, unit_from_key
from sweep.physics import habitability
from sweep.structs import SPECTRAL_CLASSES

#: Kopparapu et al. (2014) limits bounding each habitable-zone choice of a criterion (inner, outer).
HABITABLE_ZONES = {
    "conservative": ("runaway-greenhouse", "maximum-greenhouse"),
    "optimistic": ("recent-venus", "early-mars"),
}

_RANGE_KEYS = ("radius_rearth", "teq_K", "insolation_searth")


class Criterion(BaseModel):
    """A named selection of planets; a planet meets it when it meets every condition given.

    Ranges are ``[low, high]`` pairs, read as ``low <= value < high`` (``high`` may be ``inf``).
    ``habitable_zone`` compares the planet's time-averaged insolation with the Kopparapu et al.
    (2014) effective fluxes of its star: ``"conservative"`` between the runaway-greenhouse and
    maximum-greenhouse limits, ``"optimistic"`` between the recent-Venus and early-Mars limits.

    References
    ----------
    .. [1] Kopparapu, R. K. et al. 2014, ApJL 787, L29 (doi:10.1088/2041-8205/787/2/L29).
    """

    model_config = ConfigDict(extra="forbid")

    name: str = Field(pattern=r"^[A-Za-z0-9][A-Za-z0-9_+-]*$", description="Label of the criterion.")
    radius_rearth: tuple[float, float] | None = Field(default=None, description="Radius range [R_earth].")
    teq_K: tuple[float, float] | None = Field(default=None, description="Equilibrium-temperature range [K].")
    insolation_searth: tuple[float, float] | None = Field(default=None, description="Insolation range [S_earth].")
    habitable_zone: Literal["conservative", "optimistic"] | None = Field(
        default=None, description="Inside this Kopparapu et al. (2014) habitable zone."
    )

    @model_validator(mode="after")
    def _conditions(self):
        ranges = {key: getattr(self, key) for key in _RANGE_KEYS if getattr(self, key) is not None}
        if not ranges and self.habitable_zone is None:
            raise ValueError(
                f"criterion {self.name!r} has no condition; give radius_rearth, teq_K, "
                "insolation_searth ([low, high]) or habitable_zone"
            )
        for key, (low, high) in ranges.items():
            if math.isnan(low) or math.isnan(high) or not low < high:
                raise ValueError(f"criterion {self.name!r}: {key} = [{low}, {high}] needs low < high")
        return self

    def describe(self) -> str:
        """One line: the conditions of this criterion."""
        parts = [f"{key} in [{lo:g}, {hi:g})" for key in _RANGE_KEYS
                 if (value := getattr(self, key)) is not None for lo, hi in [value]]
        if self.habitable_zone:
            parts.append(f"{self.habitable_zone} habitable zone (Kopparapu et al. 2014)")
        return f"{self.name}: " + " and ".join(parts)


def _edges(values, key):
    if values is None:
        return None
    if len(values) < 2:
        raise ValueError(f"{key} needs at least two bin edges")
    if not all(math.isfinite(v) for v in values):
        raise ValueError(f"{key} edges must be finite (use overflow_bins = true for open-ended bins)")
    if any(b <= a for a, b in zip(values, values[1:])):
        raise ValueError(f"{key} edges must increase strictly")
    return values


class CategoriesSection(BaseModel):
    """The ``[categories]`` section: which category axes and criteria the cube carries."""

    model_config = ConfigDict(extra="forbid")

    radius_rearth: list[float] | None = Field(default=None, description="Radius bin edges [R_earth].")
    teq_K: list[float] | None = Field(default=None, description="Equilibrium-temperature bin edges [K].")
    spectral_class: bool = Field(default=False, description="Add an axis over the host's spectral class.")
    overflow_bins: bool = Field(
        default=False, description="Add a bin below the first and one above the last edge of each binned axis."
    )
    criteria: list[Criterion] = Field(default_factory=list, description="Named planet criteria.")
    rv_threshold_ms: float | None = Field(
        default=None, gt=0, description="RV semi-amplitude above which a detection counts as RV-confirmable [m/s]."
    )

    @field_validator("radius_rearth", "teq_K", mode="after")
    @classmethod
    def _check_edges(cls, values, info):
        return _edges(values, info.field_name)

    @field_validator("criteria", mode="after")
    @classmethod
    def _distinct_names(cls, criteria):
        return require_distinct_names(criteria, "criterion")


def _bin_labels(edges, overflow: bool) -> list[str]:
    labels = [f"[{a:g}, {b:g})" for a, b in zip(edges, edges[1:])]
    if overflow:
        labels = [f"< {edges[0]:g}"] + labels + [f">= {edges[-1]:g}"]
    return labels


def _bincount(index: np.ndarray, shape: tuple) -> np.ndarray:
    size = math.prod(shape)
    return np.bincount(index, minlength=size).astype(np.uint32).reshape(shape)


class Tally:
    """Counts of drawn and detected planets for one model: built once, called per block.

    Parameters
    ----------
    categories : CategoriesSection or None
        The validated ``[categories]`` section (None: no category axes, no criteria).
    concept_band_counts : list of int
        Number of bands of each concept, in the order of the detections passed to :meth:`count`.
    grid_axes : list of (str, sequence)
        Grid axes in C order: dimension name (dotted path) and values.
    n_classes : int, optional
        Number of spectral classes (codes ``0 .. n_classes - 1`` of ``StarTable.spectral_class``).
    concept_names : list of str, optional
        Concept labels (default ``concept0``, ``concept1``...).
    band_names : list of list of str, optional
        Band labels per concept (default ``band0``...).
    """

    def __init__(self, categories, concept_band_counts, grid_axes=(), n_classes=len(SPECTRAL_CLASSES),
                 concept_names=None, band_names=None):
        self.categories = categories if categories is not None else CategoriesSection()
        self.band_counts = [int(n) for n in concept_band_counts]
        if not self.band_counts or min(self.band_counts) < 1:
            raise ValueError("every concept needs at least one band")
        self.grid_axes = [(str(name), np.asarray(values)) for name, values in grid_axes]
        self.grid_shape = tuple(len(values) for _, values in self.grid_axes)
        self.n_grid = math.prod(self.grid_shape)
        self.n_classes = int(n_classes)
        self.concept_names = list(concept_names or [f"concept{i}" for i in range(len(self.band_counts))])
        self.band_names = [list(names) for names in (band_names or [[f"band{j}" for j in range(n)]
                                                                     for n in self.band_counts])]
        if len(self.concept_names) != len(self.band_counts) or [len(b) for b in self.band_names] != self.band_counts:
            raise ValueError("concept_names and band_names must match concept_band_counts")
        self.n_channels = sum(self.band_counts)
        self.n_concepts = len(self.band_counts)
        self.channel_starts = np.cumsum([0] + self.band_counts[:-1])
        self.max_bands = max(self.band_counts)
        cats = self.categories
        self._axes = []  # (dim, size, labels, attrs, edges)
        for key, dim, unit in (("radius_rearth", "radius_bin", "R_earth"), ("teq_K", "teq_bin", "K")):
            edges = getattr(cats, key)
            if edges is not None:
                labels = _bin_labels(edges, cats.overflow_bins)
                attrs = {"units": unit, "edges": list(map(float, edges)), "closed": "left",
                         "overflow_bins": bool(cats.overflow_bins),
                         "description": f"bins of planet {key} (planets outside every bin are not counted)"
                         if not cats.overflow_bins else f"bins of planet {key}, with under- and overflow bins"}
                self._axes.append((dim, len(labels), labels, attrs, (key, np.asarray(edges, np.float64))))
        if cats.spectral_class:
            labels = list(SPECTRAL_CLASSES[: self.n_classes])
            if len(labels) < self.n_classes:
                labels += [f"class{i}" for i in range(len(labels), self.n_classes)]
            self._axes.append(("spectral_class", self.n_classes, labels,
                               {"units": "1", "description": "spectral class of the host star"}, None))
        self.category_dims = tuple(a[0] for a in self._axes)
        self.category_shape = tuple(a[1] for a in self._axes)
        self.n_categories = math.prod(self.category_shape)
        self.criteria = list(cats.criteria)

    # -- description of the cube ------------------------------------------------------------

    def outputs(self) -> list[OutputVariable]:
        """The variables :meth:`count` returns (uint32 counts, units "planets")."""
        grid = tuple(name for name, _ in self.grid_axes)
        cat = self.category_dims
        out = [
            OutputVariable("present", cat, "uint32", "planets", "planets drawn"),
            OutputVariable("detected", grid + ("channel",) + cat, "uint32", "planets",
                           "planets detected in the concept's band"),
            OutputVariable("detected_any", grid + ("concept",) + cat, "uint32", "planets",
                           "planets detected in at least one band of the concept"),
            OutputVariable("band_multiplicity", grid + ("concept",) + cat + ("n_bands",), "uint32", "planets",
                           "planets by the number of the concept's bands they are detected in"),
        ]
        if self.categories.rv_threshold_ms is not None:
            out.append(OutputVariable(
                "rv_confirmable", grid + ("concept",) + cat, "uint32", "planets",
                f"planets detected by the concept whose RV semi-amplitude exceeds "
                f"{self.categories.rv_threshold_ms:g} m/s"))
        if self.criteria:
            out.append(OutputVariable("criterion_present", ("criterion",), "uint32", "planets",
                                      "planets meeting each criterion"))
            out.append(OutputVariable("criterion_detected", grid + ("concept", "criterion"), "uint32", "planets",
                                      "planets meeting each criterion and detected in at least one band"))
        return out

    def coords(self) -> dict:
        """Coordinates of every non-row dimension: name -> (values, attrs)."""
        coords = {}
        for name, values in self.grid_axes:
            coords[name] = (values, {"units": unit_from_key(name.rsplit(".", 1)[-1]),
                                     "description": f"grid axis {name}"})
        concept_of, band_of = self.channel_labels()
        coords["channel"] = (np.array([f"{c}/{b}" for c, b in zip(concept_of, band_of)]),
                             {"units": "1", "description": "concept/band", "concept": concept_of, "band": band_of})
        coords["concept"] = (np.array(self.concept_names), {"units": "1", "description": "instrument concept"})
        for dim, _, labels, attrs, _ in self._axes:
            coords[dim] = (np.array(labels), dict(attrs))
        coords["n_bands"] = (np.arange(self.max_bands + 1),
                             {"units": "1", "description": "number of the concept's bands a planet is detected in"})
        if self.criteria:
            coords["criterion"] = (np.array([c.name for c in self.criteria]),
                                   {"units": "1", "definitions": [c.describe() for c in self.criteria]})
        return coords

    def channel_labels(self) -> tuple[list[str], list[str]]:
        """Concept and band of every channel (for coordinates ``channel_concept``, ``channel_band``)."""
        concept_of = [c for c, bands in zip(self.concept_names, self.band_names) for _ in bands]
        band_of = [b for bands in self.band_names for b in bands]
        return concept_of, band_of

    # -- counting ---------------------------------------------------------------------------

    def category_index(self, planets, stars) -> tuple[np.ndarray, np.ndarray]:
        """Flat category index of every planet and whether it falls in a bin of every axis.

        Returns
        -------
        index : ndarray of int64
            ``ravel_multi_index`` of the planet's bins over the category axes (0 when none).
        valid : ndarray of bool
            False for planets outside every bin of an axis (not counted per category).
        """
        n = len(planets)
        index = np.zeros(n, np.int64)
        valid = np.ones(n, bool)
        for dim, size, _, _, binning in self._axes:
            if binning is None:
                code = np.asarray(stars.spectral_class, np.int64)[planets.star]
            else:
                key, edges = binning
                code = np.searchsorted(edges, getattr(planets, key), side="right") - 1
                if self.categories.overflow_bins:
                    code += 1
            valid &= (code >= 0) & (code < size)
            index = index * size + code
        return np.where(valid, index, 0), valid

    def criterion_mask(self, planets, stars) -> np.ndarray:
        """Whether each planet meets each criterion, shape (n_criteria, n_planets)."""
        mask = np.ones((len(self.criteria), len(planets)), bool)
        for k, criterion in enumerate(self.criteria):
            for key in _RANGE_KEYS:
                bounds = getattr(criterion, key)
                if bounds is not None:
                    value = getattr(planets, key)
                    mask[k] &= (value >= bounds[0]) & (value < bounds[1])
            if criterion.habitable_zone is not None:
                inner, outer = HABITABLE_ZONES[criterion.habitable_zone]
                teff = np.asarray(stars.teff_K, np.float64)
                s_inner = np.asarray(habitability.effective_flux_limit(teff, inner))[planets.star]
                s_outer = np.asarray(habitability.effective_flux_limit(teff, outer))[planets.star]
                mask[k] &= (planets.insolation_searth >= s_outer) & (planets.insolation_searth <= s_inner)
        return mask

    def _stack(self, detections, n_planets) -> tuple[np.ndarray, np.ndarray]:
        """Masks as one array (grid point x channel, planet) and bands detected per (grid point x
        concept, planet)."""
        if len(detections) != self.n_grid:
            raise ValueError(f"expected detections for {self.n_grid} grid points, got {len(detections)}")
        stacked = np.empty((self.n_grid, self.n_channels, n_planets), bool)
        n_detected = np.empty((self.n_grid, self.n_concepts, n_planets), np.uint8)
        for g, per_concept in enumerate(detections):
            if len(per_concept) != self.n_concepts:
                raise ValueError(f"expected {self.n_concepts} concepts at grid point {g}, got {len(per_concept)}")
            for c, mask in enumerate(per_concept):
                start = self.channel_starts[c]
                stacked[g, start:start + self.band_counts[c]] = mask
                np.sum(mask, axis=0, dtype=np.uint8, out=n_detected[g, c])
        return (stacked.reshape(self.n_grid * self.n_channels, n_planets),
                n_detected.reshape(self.n_grid * self.n_concepts, n_planets))

    def count(self, planets, stars, n_rows: int, detections) -> dict[str, np.ndarray]:
        """Counts of one block.

        Parameters
        ----------
        planets : sweep.structs.PlanetBatch
            Planets of the block (``planets.row`` in ``0 .. n_rows - 1``).
        stars : sweep.structs.StarTable
            Their hosts.
        n_rows : int
            Rows in the block.
        detections : list (grid points, C order) of list (concepts) of ndarray of bool
            Each of shape (n_bands of the concept, n_planets).

        Returns
        -------
        dict of str to ndarray of uint32
            Every variable of :meth:`outputs`, shaped ``(n_rows, *sizes of its dims)``.
        """
        n = len(planets)
        row = np.asarray(planets.row, np.int64)
        cat, valid = self.category_index(planets, stars)
        n_cat, cat_shape, grid = self.n_categories, self.category_shape, self.grid_shape
        n_gc = self.n_grid * self.n_concepts  # (grid point, concept) pairs
        n_gch = self.n_grid * self.n_channels  # (grid point, channel) pairs
        per_row = row * n_cat + cat  # flat (row, category) of each planet
        out = {}

        present = _bincount(per_row[valid], (n_rows,) + cat_shape)
        out["present"] = present

        stacked, n_detected = self._stack(detections, n)
        if not valid.all():
            stacked &= valid
        gch, p = np.divmod(np.flatnonzero(stacked), max(n, 1))
        index = (row[p] * n_gch + gch) * n_cat + cat[p]
        out["detected"] = _bincount(index, (n_rows,) + grid + (self.n_channels,) + cat_shape)

        gc, p = np.divmod(np.flatnonzero(n_detected), max(n, 1))
        in_bin = valid[p]
        gc_b, p_b = gc[in_bin], p[in_bin]
        any_index = (row[p_b] * n_gc + gc_b) * n_cat + cat[p_b]
        out["detected_any"] = _bincount(any_index, (n_rows,) + grid + (self.n_concepts,) + cat_shape)

        n_levels = self.max_bands + 1
        multiplicity = _bincount(any_index * n_levels + n_detected[gc_b, p_b].astype(np.int64),
                                 (n_rows,) + grid + (self.n_concepts,) + cat_shape + (n_levels,))
        # planets detected in no band: present minus those detected in one or more
        pad = (slice(None),) + (None,) * (len(grid) + 1) + (Ellipsis,)
        multiplicity[..., 0] = present[pad].astype(np.int64) - multiplicity[..., 1:].sum(axis=-1, dtype=np.int64)
        out["band_multiplicity"] = multiplicity

        if self.categories.rv_threshold_ms is not None:
            confirmable = planets.rv_semi_amplitude_ms[p_b] > self.categories.rv_threshold_ms
            out["rv_confirmable"] = _bincount(any_index[confirmable],
                                              (n_rows,) + grid + (self.n_concepts,) + cat_shape)

        if self.criteria:
            n_crit = len(self.criteria)
            meets = self.criterion_mask(planets, stars)
            k, q = np.nonzero(meets)
            out["criterion_present"] = _bincount(row[q] * n_crit + k, (n_rows, n_crit))
            k, j = np.nonzero(meets[:, p])  # criteria met by each detected (grid point, concept, planet)
            index = (row[p[j]] * n_gc + gc[j]) * n_crit + k
            out["criterion_detected"] = _bincount(index, (n_rows,) + grid + (self.n_concepts, n_crit))
        return out
