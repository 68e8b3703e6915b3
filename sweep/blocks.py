"""The one small interface between the engine and a model.

The engine cuts the rows of a sweep into blocks (:class:`RowBlock`) and asks a model to evaluate
each block. A model is any object with two methods (:class:`BlockModel`):

- ``outputs()`` describes the variables it returns (:class:`OutputVariable`: name, dimensions
  after ``row``, their coordinates, dtype, units);
- ``evaluate(block)`` returns, for every output variable, an array whose first axis is the block's
  rows and whose other axes follow the variable's dimensions.

The planet-yield model (:mod:`sweep.model`) and the analytic test functions
(:mod:`sweep.testfunctions`) both implement it; the engine never knows which one it runs.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Protocol

import numpy as np


@dataclass(frozen=True)
class RowBlock:
    """A contiguous block of rows: what one task evaluates.

    Attributes
    ----------
    index : int
        Block number (rows ``start .. stop - 1`` of the cube).
    start, stop : int
        First row and one past the last row (global row indices).
    seed : int
        The sweep's seed.
    base_index : ndarray of int64, shape (n,)
        Base index of each row (the position within its design block A, B or AB_j).
    population_source : ndarray of int8, shape (n,)
        Which design block the row's population seed comes from (0 = A, 1 = B). The population
        random stream of a row is keyed by ``(seed, base_index, population_source)`` only.
    factors : dict of str to ndarray, shape (n,)
        Value of every uncertain factor for each row, by factor name (dotted path).
    """

    index: int
    start: int
    stop: int
    seed: int
    base_index: np.ndarray
    population_source: np.ndarray
    factors: dict = field(default_factory=dict)

    def __len__(self) -> int:
        return self.stop - self.start

    def split(self, max_rows: int) -> list[RowBlock]:
        """The block cut into consecutive parts of at most ``max_rows`` rows (same index and seed).

        Each row keeps its base index, population source and factor values, so a model that
        draws its random numbers per row gives the same counts for the parts as for the whole.
        """
        cuts = range(0, len(self), max(int(max_rows), 1))
        if len(cuts) == 1:
            return [self]
        return [
            RowBlock(self.index, self.start + first, self.start + min(first + max_rows, len(self)), self.seed,
                     self.base_index[first:first + max_rows], self.population_source[first:first + max_rows],
                     {name: values[first:first + max_rows] for name, values in self.factors.items()})
            for first in cuts
        ]


@dataclass(frozen=True)
class OutputVariable:
    """One variable of the cube, as a model declares it.

    Attributes
    ----------
    name : str
        Variable name in the cube.
    dims : tuple of str
        Dimensions after ``row`` (grid axes, channels, categories), in cube order.
    dtype : str
        numpy dtype (unsigned integers for counts).
    units : str
        Units (``"planets"`` for counts).
    description : str
        One line for ``attrs["description"]``.
    """

    name: str
    dims: tuple
    dtype: str
    units: str
    description: str


class BlockModel(Protocol):
    """What the engine needs from a model."""

    def outputs(self) -> list[OutputVariable]:
        """The variables :meth:`evaluate` returns."""

    def coords(self) -> dict:
        """Coordinates of every non-row dimension used by the outputs: name -> (values, attrs)."""

    def evaluate(self, block: RowBlock) -> dict[str, np.ndarray]:
        """Arrays of shape ``(len(block), *sizes of the variable's dims)`` for every output."""
