"""Reductions of a result cube: xarray in, xarray out.

- :mod:`sweep.analysis.intervals`: means, medians, credible intervals, the Monte Carlo standard
  error of the median and completeness of every output.
- :mod:`sweep.analysis.sobol`: first-order and total Sobol indices with bootstrap confidence
  intervals, and their convergence with the number of base rows.
- :mod:`sweep.analysis.knowledge`: what knowing a factor exactly would take off the yield's spread.

An *output* is a variable of the cube with a ``row`` dimension, either summed over every category
axis (``keep=()``, the "total") or kept per category (``keep`` names the category axes to keep).
Grid axes, ``channel`` (with its ``concept`` and ``band`` coordinates), ``concept``, ``n_bands`` and
``criterion`` are never summed. This module holds what the reductions share: choosing the rows
(A and B rows of a Saltelli cube, complete rows only) and forming the outputs.
"""

from __future__ import annotations

import json

import numpy as np
import xarray as xr

from sweep.errors import UserInputError

#: Category axes, summed away for a "total" output. ``n_bands`` and ``criterion`` are not
#: partitions of the planets, so they are never summed.
CATEGORY_DIMS = ("radius_bin", "teq_bin", "spectral_class")

#: Detection-like variable -> the variable it is a fraction of (completeness = ratio of sums).
COMPLETENESS_OF = {
    "detected": "present",
    "detected_any": "present",
    "rv_confirmable": "present",
    "criterion_detected": "criterion_present",
}

#: Variable shown first in tables and figures, in order of preference.
HEADLINE_VARIABLES = ("detected_any", "y")


def json_attr(ds: xr.Dataset, name: str, default=None):
    """Return a JSON-encoded attribute of the cube, decoded (lists pass through).

    Parameters
    ----------
    ds : xarray.Dataset
        The cube.
    name : str
        Attribute name (``sobol_inputs``, ``factors``, ``grid_axes``).
    default : object, optional
        Returned when the attribute is absent.
    """
    value = ds.attrs.get(name, default)
    if isinstance(value, (bytes, str)):
        return json.loads(value)
    return value


def grid_axes(ds: xr.Dataset) -> list[str]:
    """Names of the grid axes (dimensions of the cube), in cube order."""
    entries = json_attr(ds, "grid_axes", None) or []
    names = [entry if isinstance(entry, str) else entry["name"] for entry in entries]
    return [name for name in names if name in ds.dims]


def output_variables(ds: xr.Dataset, variables=None) -> list[str]:
    """Names of the outputs to reduce: ``variables`` if given, else every numeric data variable
    along ``row`` (the headline variable first).

    Raises
    ------
    UserInputError
        If a requested variable is not in the cube.
    """
    if variables is not None:
        variables = list(variables)
        for name in variables:
            if name not in ds.data_vars:
                raise UserInputError(
                    f"output {name!r} is not in the cube; it has: {', '.join(map(str, ds.data_vars))}")
        return variables
    names = [str(name) for name, var in ds.data_vars.items()
             if "row" in var.dims and np.issubdtype(var.dtype, np.number)]
    head = [name for name in HEADLINE_VARIABLES if name in names][:1]
    return head + [name for name in names if name not in head]


def headline_variable(ds: xr.Dataset) -> str:
    """The variable shown first: ``detected_any`` for the planet model, ``y`` for test functions."""
    return output_variables(ds)[0]


def reduce_output(da: xr.DataArray, keep=()) -> xr.DataArray:
    """Sum a variable over its category axes except those in ``keep``; attrs are kept.

    Parameters
    ----------
    da : xarray.DataArray
        A variable of the cube (counts [planets] or a float output).
    keep : sequence of str
        Category axes to keep (``()`` gives the total over all categories).
    """
    summed = [dim for dim in CATEGORY_DIMS if dim in da.dims and dim not in keep]
    if not summed:
        return da
    out = da.sum(summed, keep_attrs=True)
    out.attrs = dict(da.attrs)
    return out


def row_mask(ds: xr.Dataset, rows_complete=None) -> np.ndarray:
    """Boolean mask over ``row`` of the rows whose data are on disk.

    Parameters
    ----------
    ds : xarray.Dataset
        The cube.
    rows_complete : None, boolean array (n_rows,) or sequence of int
        ``None`` means every row is complete; a boolean mask is used as is; integers are the
        indices of the complete rows.
    """
    n = ds.sizes["row"]
    if rows_complete is None:
        return np.ones(n, bool)
    arr = np.asarray(rows_complete)
    if arr.dtype == bool:
        if arr.shape != (n,):
            raise ValueError(f"rows_complete mask has shape {arr.shape}, the cube has {n} rows")
        return arr
    mask = np.zeros(n, bool)
    mask[arr.astype(np.int64)] = True
    return mask


def block_labels(ds: xr.Dataset) -> np.ndarray:
    """The ``block`` label of every row (``"MC"`` when the cube has no ``block`` coordinate)."""
    if "block" in ds.coords:
        return np.asarray(ds["block"].values).astype(str)
    return np.full(ds.sizes["row"], "MC")


def independent_rows(ds: xr.Dataset) -> np.ndarray:
    """Boolean mask of the rows that are independent draws: A and B rows of a Saltelli cube
    (AB rows share all but one factor with A), every row of a Monte Carlo cube."""
    labels = block_labels(ds)
    if str(ds.attrs.get("mode", "")).lower() == "saltelli" or np.any(labels == "A"):
        return (labels == "A") | (labels == "B")
    return np.ones(ds.sizes["row"], bool)


def rows_note(used: int, total: int) -> str:
    """One line saying how many rows an analysis used."""
    if used == total:
        return f"all {total} independent rows present"
    return (f"{used} of {total} independent rows present ({total - used} missing); "
            "results use the rows present")


def load_cube(path):
    """Open a store for analysis: the lazy cube and the mask of complete rows.

    Parameters
    ----------
    path : str or pathlib.Path
        The result store (a zarr folder written by ``sweep run``).

    Returns
    -------
    ds : xarray.Dataset
        The cube (:func:`sweep.store.open_cube`).
    rows_complete : ndarray of bool, shape (n_rows,)
        True for rows of blocks listed in the store's completion record.
    """
    from sweep import store

    ds = store.open_cube(path)
    done = store.open_store(path).done_blocks()
    block_rows = int(ds.attrs["block_rows"])
    mask = np.zeros(ds.sizes["row"], bool)
    for index in done:
        mask[int(index) * block_rows:(int(index) + 1) * block_rows] = True
    return ds, mask


__all__ = [
    "CATEGORY_DIMS",
    "COMPLETENESS_OF",
    "block_labels",
    "grid_axes",
    "headline_variable",
    "independent_rows",
    "json_attr",
    "load_cube",
    "output_variables",
    "reduce_output",
    "row_mask",
]
