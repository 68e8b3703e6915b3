"""Means, medians and credible intervals of every output of a cube.

Each row of a cube is one equally likely realisation of the study (factor values and a planet
population), so the distribution of an output over the rows is the distribution of the yield.
Credible intervals are equal-tailed: the interval at level ``l`` runs from the quantile
``(1 - l) / 2`` to ``(1 + l) / 2``. Rows of a Saltelli cube are A and B rows only (independent
draws); AB rows are not independent of A.
"""

from __future__ import annotations

import numpy as np
import scipy.stats
import xarray as xr

from sweep.analysis import (
    COMPLETENESS_OF,
    independent_rows,
    output_variables,
    reduce_output,
    row_mask,
    rows_note,
)
from sweep.errors import UserInputError

#: Default credible levels.
DEFAULT_LEVELS = (0.68, 0.95)

#: Cube attributes copied onto every result (provenance).
PROVENANCE_ATTRS = ("spec_hash", "sweep_version", "created", "mode", "seed", "grid_axes",
                    "sobol_inputs", "factors")


def quantile_probabilities(levels=DEFAULT_LEVELS) -> np.ndarray:
    """Sorted probabilities of the median and of both ends of every credible interval.

    Parameters
    ----------
    levels : sequence of float
        Credible levels, each in (0, 1) (0.68 for 68 %) [1].
    """
    levels = [float(level) for level in levels]
    for level in levels:
        if not 0.0 < level < 1.0:
            raise UserInputError(f"credible level {level:g} is not between 0 and 1 (exclusive)")
    probs = {0.5}
    for level in levels:
        low, high = interval_probabilities(level)
        probs.update((low, high))
    return np.array(sorted(probs))


def interval_probabilities(level: float) -> tuple[float, float]:
    """Lower and upper quantile probabilities of the equal-tailed interval at ``level`` [1]."""
    return round((1.0 - level) / 2.0, 12), round((1.0 + level) / 2.0, 12)


def median_standard_error(values: np.ndarray) -> np.ndarray:
    """Maritz-Jarrett Monte Carlo standard error of the sample median, along axis 0.

    Vectorised over the trailing axes; the same estimator as ``scipy.stats.mstats.mjci`` at
    probability 0.5, which loops over one sample at a time.

    Parameters
    ----------
    values : ndarray, shape (n, ...)
        Samples along axis 0 [same units as the output].

    Returns
    -------
    ndarray, shape (...)
        Standard error of the median [same units].

    References
    ----------
    Maritz, J. S. and Jarrett, R. G. 1978, "A note on estimating the variance of the sample
    median", Journal of the American Statistical Association 73, 194,
    doi:10.1080/01621459.1978.10480027
    """
    values = np.sort(np.asarray(values, float), axis=0)
    n = values.shape[0]
    m = int(0.5 * n + 0.5)
    if n < 3 or m < 2:
        return np.full(values.shape[1:], np.nan)
    grid = np.arange(n + 1) / n
    weights = np.diff(scipy.stats.beta.cdf(grid, m - 1, n - m))
    flat = values.reshape(n, -1)
    first = weights @ flat
    second = weights @ (flat - first) ** 2
    return np.sqrt(np.maximum(second, 0.0)).reshape(values.shape[1:])


def _drop_row_coords(da: xr.DataArray) -> xr.DataArray:
    return da.drop_vars([name for name in da.coords if "row" in da[name].dims and name != "row"])


def intervals(ds: xr.Dataset, levels=DEFAULT_LEVELS, rows_complete=None, variables=None,
              keep=(), method: str = "inverted_cdf") -> xr.Dataset:
    """Mean, median, credible intervals, standard error of the median and completeness.

    Parameters
    ----------
    ds : xarray.Dataset
        A cube (DEVELOPERS.md "The cube").
    levels : sequence of float
        Credible levels in (0, 1); 0.68 and 0.95 by default.
    rows_complete : None, boolean array (n_rows,) or sequence of int, optional
        Rows whose data are on disk (:func:`sweep.analysis.row_mask`); ``None`` means all.
    variables : sequence of str, optional
        Outputs to reduce; every numeric variable along ``row`` by default.
    keep : sequence of str
        Category axes to keep (``()``: totals over all categories).
    method : str
        Quantile definition passed to :meth:`xarray.DataArray.quantile`. The default,
        ``"inverted_cdf"`` (Hyndman & Fan 1996, definition 1), is the smallest value whose
        empirical cumulative frequency reaches the probability: the definition that
        ``scipy.stats`` uses for ``ppf`` of discrete distributions, so counts stay integers.

    Returns
    -------
    xarray.Dataset
        For every output ``v``: ``v`` (``quantile``, ...) the quantiles [units of ``v``],
        ``v_mean``, ``v_median_se`` (Maritz-Jarrett) and, for detection counts,
        ``v_completeness`` (sum of detections over the rows used / sum of planets present,
        [1]). Attributes: ``levels``, ``rows_used``, ``rows_total``, ``note``, ``outputs``,
        ``keep`` and the cube's provenance.

    Raises
    ------
    UserInputError
        If no independent row is complete, or a level is outside (0, 1).

    References
    ----------
    Hyndman, R. J. and Fan, Y. 1996, "Sample quantiles in statistical packages",
    The American Statistician 50, 361, doi:10.1080/00031305.1996.10473566
    """
    probs = quantile_probabilities(levels)
    independent = independent_rows(ds)
    use = independent & row_mask(ds, rows_complete)
    used, total = int(use.sum()), int(independent.sum())
    if used == 0:
        raise UserInputError("no complete independent rows in the cube yet; run `sweep run` "
                             "to compute at least one block of A/B (or Monte Carlo) rows")
    sel = ds.isel(row=np.flatnonzero(use))
    names = output_variables(ds, variables)
    result = {}
    for name in names:
        da = _drop_row_coords(reduce_output(sel[name], keep)).astype(float).load()
        units = da.attrs.get("units", "1")
        base = {"units": units, "output": name}
        quant = da.quantile(probs, dim="row", method=method)
        quant.attrs = dict(da.attrs, **base, statistic="quantiles")
        result[name] = quant
        mean = da.mean("row")
        mean.attrs = dict(base, statistic="mean", description=f"mean of {name} over the rows used")
        result[f"{name}_mean"] = mean
        moved = da.transpose("row", ...)
        se = xr.DataArray(median_standard_error(moved.values), dims=moved.dims[1:],
                          coords={k: c for k, c in moved.coords.items() if "row" not in c.dims})
        se.attrs = dict(base, statistic="median_se",
                        description="Monte Carlo standard error of the median (Maritz-Jarrett)")
        result[f"{name}_median_se"] = se
        denominator = COMPLETENESS_OF.get(name)
        if denominator in ds.data_vars:
            den = _drop_row_coords(reduce_output(sel[denominator], keep)).astype(float).sum("row")
            ratio = (da.sum("row") / den).where(den > 0)
            ratio.attrs = {"units": "1", "output": name, "statistic": "completeness",
                           "description": f"sum of {name} / sum of {denominator} over the rows used"}
            result[f"{name}_completeness"] = ratio
    out = xr.Dataset(result)
    out["quantile"].attrs = {"units": "1", "description": "cumulative probability"}
    out.attrs = {key: ds.attrs[key] for key in PROVENANCE_ATTRS if key in ds.attrs}
    out.attrs.update(levels=[float(level) for level in levels], method=method, rows_used=used,
                     rows_total=total, note=rows_note(used, total), outputs=names,
                     keep=list(keep))
    return out


def credible_interval(result: xr.Dataset, output: str, level: float):
    """Lower and upper ends of the credible interval of ``output`` at ``level``.

    Parameters
    ----------
    result : xarray.Dataset
        Returned by :func:`intervals`.
    output : str
        Output name.
    level : float
        One of ``result.attrs["levels"]``.

    Returns
    -------
    low, high : xarray.DataArray
        Interval ends [units of the output].
    """
    low, high = interval_probabilities(level)
    quant = result[output]
    return (quant.sel(quantile=low, method="nearest", tolerance=1e-9).drop_vars("quantile"),
            quant.sel(quantile=high, method="nearest", tolerance=1e-9).drop_vars("quantile"))


def median(result: xr.Dataset, output: str) -> xr.DataArray:
    """The median of ``output`` from a result of :func:`intervals` [units of the output]."""
    return result[output].sel(quantile=0.5, method="nearest", tolerance=1e-9).drop_vars("quantile")
