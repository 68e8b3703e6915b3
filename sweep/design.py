"""Rows of a sweep: factor values and the population-seed key of every row.

Monte Carlo mode draws rows independently. Saltelli mode (Saltelli 2002; Saltelli et al. 2010)
builds blocks A, B and AB_j from one scrambled Sobol' sequence of dimension 2k
(:class:`scipy.stats.qmc.Sobol`), k being the number of factors: A takes the first k columns, B the
last k, and AB_j is A with the columns of analysis input j (every factor of a group) taken from B.
The population draw is an input of its own: its seed key comes from A except in B and AB:population.
Values are each factor's inverse CDF at its quantile. Rows are block-major:
``A[0..N-1], B[0..N-1], AB:<input_1>[0..N-1], ...``, so ``N (2 + number of inputs)`` rows in all;
the Sobol estimators of :mod:`sweep.analysis.sobol` read them.

Nothing here depends on how rows are later cut into blocks: a cube is the same for any block size.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.stats.qmc

from sweep import streams
from sweep.blocks import RowBlock

#: Block label of Monte Carlo rows.
MONTE_CARLO = "MC"
#: Smallest and largest quantile used (a scrambled Sobol' point or a uniform draw may be exactly 0).
_TINY = 2.0**-53


@dataclass(frozen=True)
class RowTable:
    """Every row of a sweep.

    Attributes
    ----------
    n_rows : int
        Number of rows.
    base_index : ndarray of int64, shape (n_rows,)
        Position of each row within its design block (the row number in Monte Carlo mode).
    population_source : ndarray of int8, shape (n_rows,)
        Design block the row's population seed comes from (0 = A or Monte Carlo, 1 = B).
    block_label : ndarray of str, shape (n_rows,)
        ``"MC"``, ``"A"``, ``"B"`` or ``"AB:<input>"``.
    factor_values : dict of str to ndarray of float64, shape (n_rows,)
        Value of every factor in each row [the factor's unit], in factor order.
    seed : int
        The sweep's seed.
    """

    n_rows: int
    base_index: np.ndarray
    population_source: np.ndarray
    block_label: np.ndarray
    factor_values: dict
    seed: int

    def n_blocks(self, block_rows: int) -> int:
        """Number of blocks of ``block_rows`` rows (the last may be shorter)."""
        return -(-self.n_rows // block_rows)

    def block(self, index: int, block_rows: int) -> RowBlock:
        """Rows ``index * block_rows`` up to the next block (or the end) as a :class:`RowBlock`."""
        start = index * block_rows
        if index < 0 or start >= self.n_rows:
            raise IndexError(f"block {index} is outside the {self.n_blocks(block_rows)} blocks")
        stop = min(start + block_rows, self.n_rows)
        return RowBlock(
            index=index,
            start=start,
            stop=stop,
            seed=self.seed,
            base_index=self.base_index[start:stop].copy(),
            population_source=self.population_source[start:stop].copy(),
            factors={name: values[start:stop].copy() for name, values in self.factor_values.items()},
        )


def design_generator(seed: int) -> np.random.Generator:
    """The generator of design quantiles, keyed by ``(seed, streams.DESIGN)`` only."""
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence(int(seed), spawn_key=(streams.DESIGN,))))


def _values(factors, quantiles: np.ndarray) -> dict:
    quantiles = np.clip(quantiles, _TINY, 1.0 - _TINY)
    return {f.name: np.asarray(f.dist.ppf(quantiles[:, j]), dtype=np.float64) for j, f in enumerate(factors)}


def monte_carlo_rows(factors, n_rows: int, seed: int) -> RowTable:
    """Independent rows: one uniform matrix ``(n_rows, k)`` from the design generator.

    Row i depends only on the seed and i (the first rows are the same for any ``n_rows``).

    Parameters
    ----------
    factors : list of sweep.params.Factor
        The uncertain inputs.
    n_rows : int
        Number of rows.
    seed : int
        The sweep's seed.
    """
    quantiles = design_generator(seed).random((n_rows, len(factors)))
    return RowTable(
        n_rows=n_rows,
        base_index=np.arange(n_rows, dtype=np.int64),
        population_source=np.zeros(n_rows, dtype=np.int8),
        block_label=np.full(n_rows, MONTE_CARLO),
        factor_values=_values(factors, quantiles),
        seed=int(seed),
    )


def saltelli_quantiles(n_factors: int, base_rows: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Quantile matrices A and B, each ``(N, k)``, from one scrambled Sobol' sequence of dimension 2k.

    Parameters
    ----------
    n_factors : int
        k, the number of factors.
    base_rows : int
        N, a power of two.
    seed : int
        The sweep's seed.

    References
    ----------
    .. [1] A. Saltelli, "Making best use of model evaluations to compute sensitivity indices",
       Computer Physics Communications 145, 280-297 (2002). doi:10.1016/S0010-4655(02)00280-1
    """
    if n_factors == 0:
        empty = np.empty((base_rows, 0))
        return empty, empty
    m = int(base_rows).bit_length() - 1
    if 1 << m != base_rows:
        raise ValueError(f"base_rows = {base_rows} is not a power of two")
    sequence = scipy.stats.qmc.Sobol(d=2 * n_factors, scramble=True, rng=design_generator(seed))
    points = sequence.random_base2(m)
    return points[:, :n_factors], points[:, n_factors:]


def saltelli_rows(factors, inputs, base_rows: int, seed: int) -> RowTable:
    """Blocks A, B, AB:<input> (block-major) for the Saltelli/Jansen estimators.

    Parameters
    ----------
    factors : list of sweep.params.Factor
        The uncertain inputs (columns of A and B).
    inputs : list of str
        Analysis inputs in AB-block order: factor names or group names, and ``"population"``
        for a model with a population draw.
    base_rows : int
        N, a power of two.
    seed : int
        The sweep's seed.

    References
    ----------
    .. [1] A. Saltelli, P. Annoni, I. Azzini, F. Campolongo, M. Ratto and S. Tarantola,
       "Variance based sensitivity analysis of model output. Design and estimator for the total
       sensitivity index", Computer Physics Communications 181, 259-270 (2010).
       doi:10.1016/j.cpc.2009.09.018
    """
    a, b = saltelli_quantiles(len(factors), base_rows, seed)
    quantile_blocks, sources, labels = [a, b], [0, 1], ["A", "B"]
    for name in inputs:
        columns = [j for j, f in enumerate(factors) if f.analysis_unit == name]
        ab = a.copy()
        ab[:, columns] = b[:, columns]
        quantile_blocks.append(ab)
        sources.append(1 if name == "population" else 0)
        labels.append(f"AB:{name}")
    n_blocks = len(quantile_blocks)
    n_rows = n_blocks * base_rows
    return RowTable(
        n_rows=n_rows,
        base_index=np.tile(np.arange(base_rows, dtype=np.int64), n_blocks),
        population_source=np.repeat(np.asarray(sources, dtype=np.int8), base_rows),
        block_label=np.repeat(np.asarray(labels), base_rows),
        factor_values=_values(factors, np.concatenate(quantile_blocks, axis=0)),
        seed=int(seed),
    )


def build_rows(spec) -> RowTable:
    """Every row of a validated sweep (:class:`sweep.spec.Spec`)."""
    factors = spec.factors()
    if spec.run.mode == "saltelli":
        return saltelli_rows(factors, spec.sobol_inputs(), spec.run.base_rows, spec.run.seed)
    return monte_carlo_rows(factors, spec.run.rows, spec.run.seed)
