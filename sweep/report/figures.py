"""Figures of a study, each written as PNG and PDF (matplotlib's object API, no pyplot state).

Every function takes reductions (xarray), draws one figure and returns a :class:`FigureFile`.
Where an output has grid axes that a figure does not show, the figure is drawn at the reference
grid point: the middle value of every grid axis (:func:`reference_point`).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import xarray as xr
from matplotlib.figure import Figure

from sweep.analysis import independent_rows, reduce_output, row_mask
from sweep.analysis.intervals import credible_interval, median
from sweep.report.tables import format_number

#: Bands from the widest to the narrowest level are drawn lighter to darker.
_BAND_ALPHA = (0.18, 0.35, 0.5)


@dataclass(frozen=True)
class FigureFile:
    """A written figure: short name, title, caption and the paths of its PNG and PDF."""

    name: str
    title: str
    caption: str
    png: Path
    pdf: Path


def reference_point(da: xr.DataArray, axes) -> dict:
    """Index of the middle value of every grid axis of ``da`` (``{axis: index}``)."""
    return {axis: da.sizes[axis] // 2 for axis in axes if axis in da.dims}


def reference_label(da: xr.DataArray, axes, skip=()) -> str:
    """Text naming the reference grid point, e.g. ``"at telescope.aperture_m = 6"``."""
    point = {axis: i for axis, i in reference_point(da, axes).items() if axis not in skip}
    if not point:
        return ""
    return "at " + ", ".join(f"{axis} = {format_number(_plain(da[axis].values[i]))}"
                             if axis in da.coords else f"{axis}[{i}]" for axis, i in point.items())


def _plain(value):
    return value.item() if isinstance(value, np.generic) else value


def _at_reference(da: xr.DataArray, axes, skip=()) -> xr.DataArray:
    point = {axis: i for axis, i in reference_point(da, axes).items() if axis not in skip}
    return da.isel(point)


def _panels_and_bounds(ds: xr.Dataset, output: str, axes):
    """``output`` at the reference grid point split by concept (:func:`_by_concept`), and its
    ``_low`` and ``_high`` bounds there."""
    est, low, high = (_at_reference(ds[name], axes) for name in (output, f"{output}_low", f"{output}_high"))
    return _by_concept(est), low, high


def _with_reference(text: str, da: xr.DataArray, axes, end: str = ".") -> str:
    """A caption: ``text``, the reference grid point of ``da`` (if any) after a comma, then ``end``."""
    rest = reference_label(da, axes)
    return text + (f", {rest}" if rest else "") + end


def _by_concept(da: xr.DataArray):
    if "concept" in da.dims:
        return [(str(c), da.sel(concept=c)) for c in da["concept"].values]
    return [("", da)]


def _figure(nrows: int = 1, ncols: int = 1, width: float = 6.4, height: float = 4.0):
    fig = Figure(figsize=(width * ncols, height * nrows), layout="constrained")
    return fig, fig.subplots(nrows, ncols, squeeze=False)


def _save(fig: Figure, out_dir: Path, name: str, title: str, caption: str) -> FigureFile:
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    png, pdf = out_dir / f"{name}.png", out_dir / f"{name}.pdf"
    fig.savefig(png, dpi=110)
    fig.set_layout_engine("none")  # keep the layout computed for the PNG
    fig.savefig(pdf)
    return FigureFile(name, title, caption, png, pdf)


def _units(da: xr.DataArray) -> str:
    units = da.attrs.get("units", "")
    return f" [{units}]" if units else ""


def yield_against_axis(iv: xr.Dataset, output: str, axis: str, grid, out_dir) -> FigureFile:
    """Median and credible bands of ``output`` against one grid axis, one line per concept.

    Parameters
    ----------
    iv : xarray.Dataset
        Result of :func:`sweep.analysis.intervals.intervals` (totals).
    output : str
        Output to draw (counts [planets]).
    axis : str
        Grid axis on the horizontal axis.
    grid : sequence of str
        All grid axes of the cube (the others are held at the reference point).
    out_dir : path
        Folder for the PNG and PDF.
    """
    fig, axes = _figure()
    ax = axes[0, 0]
    levels = sorted(iv.attrs["levels"], reverse=True)
    quant = _at_reference(iv[output], grid, skip=(axis,))
    x = np.asarray(quant[axis].values, float) if axis in quant.coords else np.arange(quant.sizes[axis])
    colours = iter(f"C{i}" for i in range(10))
    for concept, part in _by_concept(quant):
        colour = next(colours)
        sub = iv.assign({output: part})
        for alpha, level in zip(_BAND_ALPHA, levels):
            low, high = credible_interval(sub, output, level)
            ax.fill_between(x, low.values, high.values, color=colour, alpha=alpha, lw=0,
                            label=f"{concept} {level:.0%}".strip())
        ax.plot(x, median(sub, output).values, "o-", color=colour,
                label=f"{concept} median".strip())
    unit = iv[axis].attrs.get("units", "") if axis in iv.coords else ""
    ax.set_xlabel(f"{axis}" + (f" [{unit}]" if unit else ""))
    ax.set_ylabel(f"{output}{_units(iv[output])}")
    ax.legend(fontsize="small")
    rest = reference_label(iv[output], grid, skip=(axis,))
    title = f"{output} against {axis}"
    ax.set_title(title + (f" ({rest})" if rest else ""), fontsize="medium")
    caption = (f"Median (line) and {', '.join(f'{l:.0%}' for l in sorted(levels))} credible "
               f"intervals (bands) of {output} for each grid value of {axis}"
               + (f", other grid axes {rest}" if rest else "") + ".")
    return _save(fig, out_dir, f"yield_vs_{axis.replace('.', '_')}", title, caption)


def radius_teq_grid(iv_cat: xr.Dataset, output: str, grid, out_dir) -> FigureFile:
    """Median of ``output`` per radius bin and equilibrium-temperature bin, numbers in the cells.

    Parameters
    ----------
    iv_cat : xarray.Dataset
        Result of :func:`sweep.analysis.intervals.intervals` with
        ``keep=("radius_bin", "teq_bin")``.
    output, grid, out_dir
        As for :func:`yield_against_axis`.
    """
    med = _at_reference(median(iv_cat, output), grid).transpose(..., "radius_bin", "teq_bin")
    panels = _by_concept(med)
    fig, axes = _figure(1, len(panels), width=4.8, height=4.2)
    for ax, (concept, part) in zip(axes[0], panels):
        values = np.asarray(part.values, float)
        finite = bool(np.isfinite(values).any())
        image = ax.imshow(values, origin="lower", cmap="viridis", aspect="auto",
                          vmin=min(0.0, float(np.nanmin(values))) if finite else None)
        top = np.nanmax(values) if finite else 0
        for (i, j), value in np.ndenumerate(values):
            ax.text(j, i, format_number(value), ha="center", va="center", fontsize="small",
                    color="black" if value > 0.6 * top else "white")
        ax.set_xticks(range(values.shape[1]), [str(v) for v in part["teq_bin"].values],
                      rotation=45, ha="right", fontsize="small")
        ax.set_yticks(range(values.shape[0]), [str(v) for v in part["radius_bin"].values],
                      fontsize="small")
        ax.set_xlabel("equilibrium-temperature bin")
        ax.set_ylabel("radius bin")
        ax.set_title(concept or output, fontsize="medium")
        fig.colorbar(image, ax=ax, label=f"median {output}{_units(iv_cat[output])}")
    caption = _with_reference(f"Median {output} per planet-radius bin and equilibrium-temperature bin",
                              iv_cat[output], grid)
    return _save(fig, out_dir, "radius_teq_grid", "Detections by radius and temperature", caption)


def band_multiplicity(iv: xr.Dataset, grid, out_dir, output: str = "band_multiplicity",
                      level: float = 0.68) -> FigureFile:
    """Median number of planets by the number of bands they are detected in, per concept, with
    the credible interval at ``level`` as error bars."""
    if "n_bands" in iv[output].dims and iv.sizes["n_bands"] > 1:
        iv = iv.isel(n_bands=slice(1, None))  # planets seen in no band would dwarf the rest
    quant = _at_reference(iv[output], grid)
    sub = iv.assign({output: quant})
    med = median(sub, output)
    low, high = credible_interval(sub, output, level)
    panels = _by_concept(med)
    fig, axes = _figure()
    ax = axes[0, 0]
    width = 0.8 / max(len(panels), 1)
    n_bands = med["n_bands"].values if "n_bands" in med.coords else np.arange(med.sizes["n_bands"])
    for k, (concept, part) in enumerate(panels):
        sel = {"concept": concept} if concept else {}
        lo, hi = low.sel(sel).values, high.sel(sel).values
        x = np.asarray(n_bands, float) + (k - (len(panels) - 1) / 2) * width
        ax.bar(x, part.values, width, label=concept or output,
               yerr=[np.maximum(part.values - lo, 0), np.maximum(hi - part.values, 0)], capsize=3)
    ax.set_xticks(np.asarray(n_bands, float), [str(v) for v in n_bands])
    ax.set_xlabel("number of bands detected in")
    ax.set_ylabel(f"planets detected{_units(iv[output])}")
    ax.legend(fontsize="small")
    caption = _with_reference(f"Median number of planets by the number of bands they are detected in "
                              f"(one or more), with {level:.0%} credible intervals", iv[output], grid)
    return _save(fig, out_dir, "band_multiplicity", "Detections by number of bands", caption)


def sobol_bars(sb: xr.Dataset, output: str, grid, out_dir) -> FigureFile:
    """First-order and total Sobol indices of ``output`` per factor, with bootstrap intervals."""
    panels, low, high = _panels_and_bounds(sb, output, grid)
    fig, axes = _figure(1, len(panels), width=max(4.0, 0.9 * sb.sizes["factor"] + 2), height=4.0)
    factors = [str(f) for f in sb["factor"].values]
    x = np.arange(len(factors))
    for ax, (concept, part) in zip(axes[0], panels):
        sel = {"concept": concept} if concept else {}
        for k, (index, colour) in enumerate((("S1", "C0"), ("ST", "C1"))):
            value = part.sel(index=index).values
            lo = low.sel(sel).sel(index=index).values
            hi = high.sel(sel).sel(index=index).values
            err = [np.nan_to_num(np.maximum(value - lo, 0)), np.nan_to_num(np.maximum(hi - value, 0))]
            ax.bar(x + (k - 0.5) * 0.38, np.nan_to_num(value), 0.38, yerr=err, capsize=3,
                   color=colour, label=index)
        ax.set_xticks(x, factors, rotation=30, ha="right", fontsize="small")
        ax.set_ylim(min(0.0, ax.get_ylim()[0]), max(1.0, ax.get_ylim()[1]))
        ax.axhline(0, color="0.5", lw=0.5)
        ax.set_ylabel("Sobol index")
        ax.set_title(concept or output, fontsize="medium")
        ax.legend(fontsize="small")
    caption = _with_reference(f"First-order (S1) and total (ST) Sobol indices of {output} with "
                              f"{sb.attrs['confidence_level']:.0%} bootstrap intervals, from "
                              f"{sb.attrs['base_rows']} base rows", sb[output], grid)
    return _save(fig, out_dir, "sobol_indices", "Sobol indices", caption)


def sobol_convergence(cv: xr.Dataset, output: str, grid, out_dir) -> FigureFile:
    """The indices of ``output`` against the number of base rows used, with bootstrap bands."""
    panels, low, high = _panels_and_bounds(cv, output, grid)
    fig, axes = _figure(len(panels), 2, width=4.8, height=3.4)
    n = cv["base_rows"].values
    for row, (concept, part) in zip(axes, panels):
        sel = {"concept": concept} if concept else {}
        for ax, index in zip(row, ("S1", "ST")):
            for k, factor in enumerate(cv["factor"].values):
                pick = dict(index=index, factor=factor)
                ax.plot(n, part.sel(pick).values, "o-", color=f"C{k % 10}", label=str(factor))
                ax.fill_between(n, low.sel(sel).sel(pick).values, high.sel(sel).sel(pick).values,
                                color=f"C{k % 10}", alpha=0.15, lw=0)
            ax.set_xscale("log", base=2)
            ax.set_xlabel("base rows")
            ax.set_ylabel(index)
            ax.set_title(f"{concept} {index}".strip(), fontsize="medium")
    axes[0, 1].legend(fontsize="x-small")
    caption = (f"Convergence: Sobol indices of {output} recomputed on the first "
               f"{', '.join(str(v) for v in n)} base rows, with bootstrap bands.")
    return _save(fig, out_dir, "sobol_convergence", "Convergence of the indices", caption)


def yield_distribution(ds: xr.Dataset, iv: xr.Dataset, output: str, grid, out_dir,
                       rows_complete=None) -> FigureFile:
    """Histogram of the total of ``output`` over the independent rows, with median and credible
    intervals marked."""
    use = np.flatnonzero(independent_rows(ds) & row_mask(ds, rows_complete))
    values = _at_reference(reduce_output(ds[output].isel(row=use), ()), grid).load()
    panels = _by_concept(values)
    fig, axes = _figure(1, len(panels), width=4.8, height=3.6)
    sub = iv.assign({output: _at_reference(iv[output], grid)})
    med = median(sub, output)
    styles = dict(zip(sorted(iv.attrs["levels"]), ("--", ":", "-.")))
    for ax, (concept, part) in zip(axes[0], panels):
        data = np.asarray(part.values, float).ravel()
        integer = np.issubdtype(ds[output].dtype, np.integer)
        span = data.max() - data.min() if data.size else 0
        bins = np.arange(data.min(), data.max() + 2) - 0.5 if integer and span < 200 else "auto"
        ax.hist(data, bins=bins, color="C0", alpha=0.7)
        sel = {"concept": concept} if concept else {}
        ax.axvline(float(med.sel(sel)), color="k", label="median")
        for level, style in styles.items():
            low, high = credible_interval(sub, output, level)
            for edge in (low, high):
                ax.axvline(float(edge.sel(sel)), color="k", ls=style, lw=1,
                           label=f"{level:.0%} interval" if edge is low else None)
        ax.set_xlabel(f"{output}{_units(ds[output])}")
        ax.set_ylabel("rows")
        ax.set_title(concept or output, fontsize="medium")
        ax.legend(fontsize="x-small")
    caption = _with_reference(f"Distribution of {output} over {use.size} independent rows", iv[output], grid,
                              "; median and credible intervals marked.")
    return _save(fig, out_dir, "yield_distribution", "Distribution of the yield", caption)
