"""The planet-yield model of one block of rows: draw, observe, tally.

A thin composer (STYLE.md 6): every step is a call into the module that owns it. Stars come from
:mod:`sweep.catalogs`, planets from :mod:`sweep.occurrence` and :mod:`sweep.planets`, detections
from :mod:`sweep.concepts`, counts from :mod:`sweep.tally`. The engine sees only the
:class:`~sweep.blocks.BlockModel` interface.
"""

from __future__ import annotations

import itertools

import numpy as np

from sweep import params
from sweep.blocks import OutputVariable, RowBlock
from sweep.catalogs import load_stars
from sweep.concepts import build_concept
from sweep.errors import UserInputError
from sweep.occurrence import build_occurrence
from sweep.planets import draw_planets
from sweep.tally import Tally

#: Sections whose parameters shape the population: one population per row, so no grid axes there.
POPULATION_SECTIONS = ("stars", "occurrence", "priors")

#: Planets (expected, at the factors' medians) drawn and observed in one pass over part of a block.
#: A pass then keeps its largest temporaries (the uniforms of the candidates that may be kept, 10
#: of 8 bytes each) near 10 MB, below glibc's largest mmap threshold (32 MiB): larger arrays are
#: fresh mappings whose pages fault in on every use, which made the draw of a 512-row demo block
#: 35 % slower per planet than in passes of 140 rows (benchmarks/run.py, draw figures).
PLANETS_PER_PASS = 65536


class PlanetYieldModel:
    """Planet counts for a block of rows, for every grid point, concept, band and category.

    Parameters
    ----------
    spec : sweep.spec.Spec
        The validated sweep definition (planet-yield model).
    """

    def __init__(self, spec):
        for site in spec.parameter_sites():
            if site.is_grid and site.path.split(".", 1)[0] in POPULATION_SECTIONS:
                raise UserInputError(
                    f"{spec.path}: {site.path}: grid axes are allowed for instrument and category "
                    "parameters only; make a population parameter fixed or uncertain"
                )
        self.stars = load_stars(spec.stars, spec.base_dir)
        self.occurrence = build_occurrence(spec.occurrence, spec.base_dir)
        self.priors = spec.priors
        self.concept_sections = list(spec.concepts)
        self.concepts = [build_concept(section) for section in self.concept_sections]
        self.grid_axes = spec.grid_axes()
        self.tally = Tally(
            spec.categories,
            [len(concept.band_names) for concept in self.concepts],
            [(axis.name, axis.values) for axis in self.grid_axes],
            concept_names=[concept.name for concept in self.concepts],
            band_names=[concept.band_names for concept in self.concepts],
        )
        self.rows_per_pass = max(1, int(PLANETS_PER_PASS // max(self.expected_planets_per_row(), 1.0)))

    def outputs(self) -> list[OutputVariable]:
        return self.tally.outputs()

    def coords(self) -> dict:
        return self.tally.coords()

    def grid_points(self):
        """Every grid point as a dict axis name -> value, in C order of the grid axes."""
        names = [axis.name for axis in self.grid_axes]
        for values in itertools.product(*(axis.values for axis in self.grid_axes)):
            yield dict(zip(names, values))

    def evaluate(self, block: RowBlock) -> dict[str, np.ndarray]:
        """Draw the block's planets, observe them at every grid point, and count them.

        The block is evaluated in passes of :attr:`rows_per_pass` rows (see
        :data:`PLANETS_PER_PASS`); every row has its own random streams, so the counts do not
        depend on the passes.
        """
        counts = [self._evaluate_rows(part) for part in block.split(self.rows_per_pass)]
        if len(counts) == 1:
            return counts[0]
        return {name: np.concatenate([part[name] for part in counts]) for name in counts[0]}

    def _evaluate_rows(self, block: RowBlock) -> dict[str, np.ndarray]:
        priors = params.resolve(self.priors, "priors", parameter_values(block, {}))
        planets = draw_planets(block, self.stars, self.occurrence, priors)
        detections = [
            [
                concept.detect(planets, self.stars,
                               params.resolve(section, f"concepts.{concept.name}", parameter_values(block, point)),
                               block=block)
                for concept, section in zip(self.concepts, self.concept_sections)
            ]
            for point in self.grid_points()
        ]
        return self.tally.count(planets, self.stars, len(block), detections)

    def expected_planets_per_row(self) -> float:
        """Expected number of planets drawn per row at the factors' medians (for ``sweep plan``)."""
        medians = {factor.name: np.array([factor.dist.median()]) for factor in self.occurrence.factors()}
        per_star = self.occurrence.expected_planets_per_star(medians)[0]  # (n_classes,)
        return float(per_star[self.stars.spectral_class].sum())

    def observing_time_h(self) -> dict[str, float]:
        """Integration time of one survey (one row) per concept at the factors' medians [h].

        For ``sweep plan``; only concepts with a time model (``detection = "snr"``) are listed.
        """
        times = {}
        for concept in self.concepts:
            total = getattr(concept, "total_time_h", None)
            hours = total(self.stars) if callable(total) else None
            if hours is not None:
                times[concept.name] = float(hours)
        return times


def parameter_values(block: RowBlock, grid_point: dict):
    """The value source for :func:`sweep.params.resolve`: factors from the block, grid values from the point."""

    def value_of(path, param):
        if isinstance(param, params.Uncertain):
            return block.factors[path]
        return float(grid_point[path])

    return value_of
