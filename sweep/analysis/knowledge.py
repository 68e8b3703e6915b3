"""What knowing a factor exactly would take off the yield's spread.

If factor i were known exactly, the variance of the yield left on average is
``E[Var(Y | X_i)] = Var(Y) - V_i = (1 - S1_i) Var(Y)`` (the law of total variance; Sobol 1993), so
the standard deviation shrinks by the factor ``sqrt(1 - S1_i)``. The credible-interval width is
taken to shrink by the same factor (exact for a location-scale family such as a normal yield).
The population draw cannot be known in advance, so it is left out: its total index is the share
no knowledge removes (:func:`sweep.analysis.sobol.irreducible_share`).
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from sweep.analysis.intervals import credible_interval
from sweep.analysis.sobol import POPULATION


def _remaining(s1: xr.DataArray) -> xr.DataArray:
    return np.sqrt(1.0 - s1.clip(0.0, 1.0))


def knowledge_value(sobol_result: xr.Dataset, intervals_result: xr.Dataset,
                    level: float = 0.95) -> xr.Dataset:
    """Expected shrink of each output's standard deviation and interval width per known factor.

    Parameters
    ----------
    sobol_result : xarray.Dataset
        Returned by :func:`sweep.analysis.sobol.sobol`.
    intervals_result : xarray.Dataset
        Returned by :func:`sweep.analysis.intervals.intervals` for the same outputs; ``level``
        must be one of its levels.
    level : float
        Credible level whose interval width is reported [1].

    Returns
    -------
    xarray.Dataset
        For every output ``v`` (dims ``factor``, ...): ``v_sd`` (now) and ``v_sd_known`` (if the
        factor were known) [units of v], ``v_width`` and ``v_width_known`` (interval width at
        ``level``) [units of v], ``v_shrink`` (fractional shrink ``1 - sqrt(1 - S1)``) [1] with
        ``v_shrink_low``/``v_shrink_high`` from the bounds of S1. The population draw is left out.

    References
    ----------
    Sobol, I. M. 1993, "Sensitivity estimates for nonlinear mathematical models", Mathematical
    Modelling and Computational Experiments 1, 407
    Saltelli, A. et al. 2008, Global Sensitivity Analysis: The Primer (Wiley),
    doi:10.1002/9780470725184, section 1.2.15 (factor prioritisation)
    """
    factors = [f for f in sobol_result["factor"].values.tolist() if f != POPULATION]
    result = {}
    for name in sobol_result.attrs["outputs"]:
        if name not in intervals_result.attrs["outputs"]:
            continue
        units = sobol_result[f"{name}_mean"].attrs.get("units", "1")
        pick = dict(index="S1", factor=factors)
        s1 = sobol_result[name].sel(pick, drop=False).drop_vars("index")
        remaining = _remaining(s1)
        sd = np.sqrt(sobol_result[f"{name}_variance"])
        low, high = credible_interval(intervals_result, name, level)
        width = high - low
        result[f"{name}_sd"] = sd.assign_attrs(units=units, description="standard deviation now")
        result[f"{name}_sd_known"] = (sd * remaining).assign_attrs(
            units=units, description="expected standard deviation if the factor were known")
        result[f"{name}_width"] = width.assign_attrs(
            units=units, description=f"width of the {level:.0%} credible interval now")
        result[f"{name}_width_known"] = (width * remaining).assign_attrs(
            units=units, description=f"expected width of the {level:.0%} interval if known")
        result[f"{name}_shrink"] = (1.0 - remaining).assign_attrs(
            units="1", description="fractional shrink of the standard deviation and width")
        for bound in ("low", "high"):
            s1_bound = sobol_result[f"{name}_{bound}"].sel(pick).drop_vars("index")
            result[f"{name}_shrink_{bound}"] = (1.0 - _remaining(s1_bound)).assign_attrs(
                units="1", description=f"shrink from the {bound} bootstrap bound of S1")
    out = xr.Dataset(result)
    out.attrs = dict(level=float(level), outputs=[n for n in sobol_result.attrs["outputs"]
                                                   if n in intervals_result.attrs["outputs"]],
                     left_out=POPULATION if POPULATION in sobol_result["factor"].values else "")
    return out
