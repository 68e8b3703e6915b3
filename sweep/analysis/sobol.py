"""Sobol indices of every output of a Saltelli cube, with bootstrap confidence intervals.

The cube's rows are block-major (``A[0..N-1], B[0..N-1], AB:<input_1>[0..N-1], ...``); this module
gathers the evaluations ``f_A``, ``f_B`` and ``f_AB`` of every output and passes them, all outputs at
once, to :func:`scipy.stats.sobol_indices`, which applies the estimators of Saltelli et al. (2010).
The ``population`` input (the planet-population draw) is a factor like the others: its total index
is the share of the yield's variance that no better knowledge of the other factors could remove.
"""

from __future__ import annotations

import warnings

import numpy as np
import scipy.stats
import xarray as xr

from sweep.analysis import (
    block_labels,
    json_attr,
    output_variables,
    reduce_output,
    row_mask,
)
from sweep.analysis.intervals import PROVENANCE_ATTRS
from sweep.errors import UserInputError

#: Name of the population-draw input in ``sobol_inputs``.
POPULATION = "population"

#: Fractions of the base rows at which :func:`convergence` recomputes the indices.
CONVERGENCE_FRACTIONS = (1 / 8, 1 / 4, 1 / 2, 1)

#: Array elements evaluated per bootstrap batch (bounds the memory of one batch, ~160 MB).
_BOOTSTRAP_ELEMENTS = 2e7


def sobol_inputs(ds: xr.Dataset) -> list[str]:
    """The analysis inputs of a Saltelli cube, in AB-block order.

    Raises
    ------
    UserInputError
        If the cube is not a Saltelli cube.
    """
    inputs = json_attr(ds, "sobol_inputs", None)
    labels = set(block_labels(ds))
    if not inputs or "A" not in labels:
        raise UserInputError(
            f"Sobol indices need a cube made in mode \"saltelli\"; this cube's mode is "
            f"{ds.attrs.get('mode', 'unknown')!r} (set [run] mode = \"saltelli\" and run again)")
    return [str(name) for name in inputs]


def _block_rows(ds: xr.Dataset, inputs: list[str]) -> dict[str, np.ndarray]:
    """Row positions of every design block, ordered by base index."""
    labels = block_labels(ds)
    base = np.asarray(ds["base_index"].values) if "base_index" in ds.coords else None
    rows = {}
    for label in ["A", "B"] + [f"AB:{name}" for name in inputs]:
        where = np.flatnonzero(labels == label)
        if where.size == 0:
            raise UserInputError(f"the cube has no rows of design block {label!r}; it is not a "
                                 "complete Saltelli design")
        if base is not None:
            where = where[np.argsort(base[where], kind="stable")]
        rows[label] = where
    return rows


def base_rows_of(ds: xr.Dataset) -> int:
    """Number of base rows N of a Saltelli cube (rows per design block)."""
    if "base_rows" in ds.attrs:
        return int(ds.attrs["base_rows"])
    return int(np.sum(block_labels(ds) == "A"))


def largest_complete_base_rows(ds: xr.Dataset, rows_complete=None) -> int:
    """The largest power of two n such that base rows 0..n-1 of every block are complete (0 if
    none)."""
    inputs = sobol_inputs(ds)
    mask = row_mask(ds, rows_complete)
    blocks = _block_rows(ds, inputs)
    prefix = min(int(np.argmin(np.append(mask[where], False))) for where in blocks.values())
    return 0 if prefix < 2 else 1 << int(np.log2(prefix))


def _check_complete(ds, rows_complete, n, blocks):
    mask = row_mask(ds, rows_complete)
    missing = {label: int(np.sum(~mask[where[:n]])) for label, where in blocks.items()}
    if any(missing.values()):
        count = sum(missing.values())
        first = next(label for label, k in missing.items() if k)
        best = largest_complete_base_rows(ds, rows_complete)
        hint = (f"; or use base_rows={best}, the largest power of two complete in every block"
                if best >= 2 else "")
        raise UserInputError(
            f"Sobol indices need every block of the first {n} base rows complete in A, B and every "
            f"AB block; {count} rows are missing (first in block {first!r}); finish the run "
            f"(`sweep run` resumes){hint}")


def _flatten_outputs(ds: xr.Dataset, names, keep):
    """All outputs as one (n_rows, s) float matrix, and how to split it back."""
    columns, layout = [], []
    for name in names:
        da = reduce_output(ds[name], keep)
        da = da.drop_vars([c for c in da.coords if "row" in da[c].dims and c != "row"])
        da = da.transpose("row", ...)
        values = np.asarray(da.values, float).reshape(da.sizes["row"], -1)
        template = da.isel(row=0, drop=True)
        columns.append(values)
        layout.append((name, template, values.shape[1]))
    return np.concatenate(columns, axis=1), layout


def _bootstrap_bounds(f_A, f_B, f_AB, n, confidence_level, n_resamples, seed, method):
    """Bootstrap bounds of both indices, shape (2, k, d) each: resamples of the base rows, every
    resample evaluated by :func:`scipy.stats.sobol_indices` (all resamples of a batch at once)."""
    d, k = f_AB.shape[0], f_A.shape[0]

    def statistic(idx, axis=-1):
        idx = np.atleast_2d(idx)  # (batch, n) resampled base rows
        batch = idx.shape[0]
        res = scipy.stats.sobol_indices(
            func=dict(f_A=f_A[:, idx].reshape(k * batch, n), f_B=f_B[:, idx].reshape(k * batch, n),
                      f_AB=f_AB[:, :, idx].reshape(d, k * batch, n)), n=n)
        first = np.reshape(res.first_order, (k, batch, d))
        total = np.reshape(res.total_order, (k, batch, d))
        return np.moveaxis(np.stack([first, total]), 2, -1)  # (2, k, d, batch)

    batch = max(1, int(_BOOTSTRAP_ELEMENTS // ((d + 2) * k * n)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # resamples of a rarely non-zero output may be constant
        boot = scipy.stats.bootstrap(
            (np.arange(n),), statistic, n_resamples=n_resamples, batch=batch, vectorized=True,
            confidence_level=confidence_level, method=method, rng=np.random.default_rng(seed))
    return boot.confidence_interval.low, boot.confidence_interval.high


def _sobol_arrays(f_A, f_B, f_AB, n, confidence_level, n_resamples, seed, method):
    """Indices and bootstrap bounds, each of shape (2, s, d) (first, total)."""
    d, s = f_AB.shape[0], f_A.shape[0]
    variance = np.var(np.concatenate([f_A, f_B], axis=1), axis=1)
    varying = variance > 0
    est = np.full((2, s, d), np.nan)
    low = np.full((2, s, d), np.nan)
    high = np.full((2, s, d), np.nan)
    if not np.any(varying):
        return est, low, high, variance
    f_A, f_B, f_AB = f_A[varying], f_B[varying], f_AB[:, varying]
    res = scipy.stats.sobol_indices(func=dict(f_A=f_A, f_B=f_B, f_AB=f_AB), n=n)
    k = int(varying.sum())
    est[0, varying] = np.reshape(res.first_order, (k, d))
    est[1, varying] = np.reshape(res.total_order, (k, d))
    if n_resamples:
        low[:, varying], high[:, varying] = _bootstrap_bounds(
            f_A, f_B, f_AB, n, confidence_level, n_resamples, seed, method)
    return est, low, high, variance


def sobol(ds: xr.Dataset, rows_complete=None, variables=None, keep=(), base_rows=None,
          confidence_level: float = 0.95, n_resamples: int = 999, seed: int = 0,
          bootstrap_method: str = "percentile") -> xr.Dataset:
    """First-order and total Sobol indices of every output, with bootstrap intervals.

    Parameters
    ----------
    ds : xarray.Dataset
        A Saltelli cube (DEVELOPERS.md "The cube").
    rows_complete : None, boolean array (n_rows,) or sequence of int, optional
        Rows whose data are on disk; ``None`` means all.
    variables : sequence of str, optional
        Outputs; every numeric variable along ``row`` by default.
    keep : sequence of str
        Category axes to keep (``()``: totals over all categories).
    base_rows : int, optional
        Use base rows ``0 .. base_rows - 1`` of every block (a power of two); all N by default.
    confidence_level : float
        Level of the bootstrap confidence intervals [1].
    n_resamples : int
        Bootstrap resamples of the base rows (:func:`scipy.stats.bootstrap`, each resample
        evaluated with :func:`scipy.stats.sobol_indices`); 0 skips the intervals.
    seed : int
        Seed of the bootstrap resampling (intervals are reproducible).
    bootstrap_method : {"percentile", "basic"}
        Interval method of :func:`scipy.stats.bootstrap`. (BCa is not offered: its jackknife
        needs indices on n - 1 rows, which the Sobol' design, a power of two, does not allow,
        and costs n further evaluations of every index.)

    Returns
    -------
    xarray.Dataset
        For every output ``v``: ``v`` (``index`` = ``S1``, ``ST``; ``factor``; ...) the indices [1],
        ``v_low`` and ``v_high`` their bootstrap bounds, ``v_variance`` and ``v_mean`` over the A and
        B rows used [units^2, units]. Indices of an output that does not vary are NaN. Attributes:
        ``base_rows``, ``confidence_level``, ``n_resamples``, ``outputs``, ``irreducible``
        (``"population"`` when the cube has a population draw) and the cube's provenance.

    Raises
    ------
    UserInputError
        If the cube is not a Saltelli cube, or a row of the base rows used is missing.

    References
    ----------
    Saltelli, A., Annoni, P., Azzini, I., Campolongo, F., Ratto, M. and Tarantola, S. 2010,
    "Variance based sensitivity analysis of model output. Design and estimator for the total
    sensitivity index", Computer Physics Communications 181, 259,
    doi:10.1016/j.cpc.2009.09.018
    Sobol, I. M. 2001, "Global sensitivity indices for nonlinear mathematical models and their
    Monte Carlo estimates", Mathematics and Computers in Simulation 55, 271,
    doi:10.1016/S0378-4754(00)00270-6
    """
    inputs = sobol_inputs(ds)
    full = base_rows_of(ds)
    n = full if base_rows is None else int(base_rows)
    if n < 2 or n & (n - 1) or n > full:
        raise UserInputError(f"base_rows = {n} must be a power of two between 2 and the cube's "
                             f"{full} base rows")
    blocks = _block_rows(ds, inputs)
    _check_complete(ds, rows_complete, n, blocks)
    names = output_variables(ds, variables)
    order = np.concatenate([blocks[label][:n] for label in blocks])
    matrix, layout = _flatten_outputs(ds.isel(row=order), names, keep)
    pages = matrix.reshape(2 + len(inputs), n, -1).transpose(0, 2, 1)  # (block, s, n)
    f_A, f_B, f_AB = pages[0], pages[1], pages[2:]
    est, low, high, variance = _sobol_arrays(f_A, f_B, f_AB, n, confidence_level,
                                             n_resamples, seed, bootstrap_method)
    mean = np.concatenate([f_A, f_B], axis=1).mean(axis=1)
    result, start = {}, 0
    for name, template, size in layout:
        part = slice(start, start + size)
        start += size
        shape = (2, len(inputs)) + template.shape
        dims = ("index", "factor") + template.dims
        coords = {k: c for k, c in template.coords.items()}
        units = ds[name].attrs.get("units", "1")

        def wrap(values, description, dims=dims, shape=shape, coords=coords):
            return xr.DataArray(np.moveaxis(values, 1, -1).reshape(shape), dims=dims,
                                coords=coords, attrs={"units": "1", "output": name,
                                                      "description": description})

        result[name] = wrap(est[:, part], "Sobol index")
        result[f"{name}_low"] = wrap(low[:, part], "lower bootstrap bound")
        result[f"{name}_high"] = wrap(high[:, part], "upper bootstrap bound")
        result[f"{name}_variance"] = xr.DataArray(
            variance[part].reshape(template.shape), dims=template.dims, coords=coords,
            attrs={"units": f"({units})^2", "output": name,
                   "description": "variance over the A and B rows used"})
        result[f"{name}_mean"] = xr.DataArray(
            mean[part].reshape(template.shape), dims=template.dims, coords=coords,
            attrs={"units": units, "output": name, "description": "mean over the A and B rows used"})
    out = xr.Dataset(result).assign_coords(index=["S1", "ST"], factor=inputs)
    out["index"].attrs = {"description": "S1: first-order index; ST: total index"}
    out["factor"].attrs = {"description": "factor, group of factors, or the population draw"}
    out.attrs = {key: ds.attrs[key] for key in PROVENANCE_ATTRS if key in ds.attrs}
    out.attrs.update(base_rows=n, base_rows_total=full, confidence_level=float(confidence_level),
                     n_resamples=int(n_resamples), bootstrap_method=bootstrap_method,
                     outputs=names, keep=list(keep),
                     irreducible=POPULATION if POPULATION in inputs else "")
    return out


def irreducible_share(result: xr.Dataset, output: str) -> xr.Dataset | None:
    """Total index of the population draw: the share of variance no better knowledge of the
    factors could remove (estimate, ``low``, ``high``), or None when the cube has no population
    draw.

    Parameters
    ----------
    result : xarray.Dataset
        Returned by :func:`sobol`.
    output : str
        Output name.
    """
    if result.attrs.get("irreducible") != POPULATION:
        return None
    pick = dict(index="ST", factor=POPULATION)
    return xr.Dataset({"share": result[output].sel(pick, drop=True),
                       "low": result[f"{output}_low"].sel(pick, drop=True),
                       "high": result[f"{output}_high"].sel(pick, drop=True)})


def convergence(ds: xr.Dataset, rows_complete=None, variables=None, keep=(),
                fractions=CONVERGENCE_FRACTIONS, confidence_level: float = 0.95,
                n_resamples: int = 999, seed: int = 0,
                bootstrap_method: str = "percentile") -> xr.Dataset:
    """The indices recomputed on the first N/8, N/4, N/2 and N base rows.

    Parameters
    ----------
    ds, rows_complete, variables, keep, confidence_level, n_resamples, seed, bootstrap_method
        As for :func:`sobol`.
    fractions : sequence of float
        Fractions of the N base rows (each giving a power of two of at least 2 rows).

    Returns
    -------
    xarray.Dataset
        The variables of :func:`sobol` with a leading ``base_rows`` dimension.
    """
    full = base_rows_of(ds)
    sizes = sorted({int(full * fraction) for fraction in fractions if int(full * fraction) >= 2})
    parts = [sobol(ds, rows_complete, variables, keep, base_rows=n,
                   confidence_level=confidence_level, n_resamples=n_resamples, seed=seed,
                   bootstrap_method=bootstrap_method)
             for n in sizes]
    out = xr.concat(parts, dim=xr.DataArray(sizes, dims="base_rows", name="base_rows"),
                    combine_attrs="override")
    out["base_rows"].attrs = {"units": "1", "description": "base rows used per design block"}
    out.attrs["base_rows"] = sizes
    return out
