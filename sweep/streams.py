"""Random streams keyed by what a row is, never by where or when it runs.

A row's population is drawn from generators keyed by ``(sweep seed, base index, population
source, stream)``: the same row gets the same planets whatever the block size, the worker or the
number of restarts (DESIGN.md, "Rows, seeds and common random numbers").
"""

from __future__ import annotations

import numpy as np

#: Stream numbers: one per independent purpose, so adding a purpose never shifts another's numbers.
CANDIDATES = 0  #: planets drawn from the envelope rate, with their per-planet uniforms
EXCESS = 1  #: planets beyond the envelope (rare), drawn from a separately keyed stream
STAR_PROPERTIES = 2  #: per-star draws (exozodi level and the like)
DESIGN = 3  #: Monte Carlo design quantiles


def row_generator(seed: int, base_index: int, population_source: int, stream: int) -> np.random.Generator:
    """A generator for one row and purpose: PCG64 seeded by a keyed ``SeedSequence``.

    Parameters
    ----------
    seed : int
        The sweep's seed.
    base_index : int
        The row's base index (position within its design block).
    population_source : int
        0 when the population seed comes from design block A (or Monte Carlo), 1 for block B.
    stream : int
        Purpose of the stream (:data:`CANDIDATES`, :data:`EXCESS`, ...).
    """
    sequence = np.random.SeedSequence(int(seed), spawn_key=(int(base_index), int(population_source), int(stream)))
    return np.random.Generator(np.random.PCG64(sequence))
