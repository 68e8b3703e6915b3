"""The report of a study: figures (PNG and PDF), tables (Markdown, LaTeX, CSV) and one HTML page.

:func:`write_report` opens a store and writes everything into one folder; :func:`build_report`
does the same from a cube already in memory.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import xarray as xr

from sweep import analysis
from sweep.analysis import grid_axes, headline_variable
from sweep.analysis.intervals import DEFAULT_LEVELS, intervals
from sweep.analysis.knowledge import knowledge_value
from sweep.analysis.sobol import convergence, irreducible_share, sobol
from sweep.errors import UserInputError
from sweep.report import figures as figs
from sweep.report.page import write_page
from sweep.report.tables import (
    Table,
    interval_records,
    sensitivity_tables,
    sobol_records,
    summary_tables,
)


def write_report(store_path, out_dir, n_resamples: int = 999) -> Path:
    """Write the report of a result store; return the path of its ``index.html``.

    Parameters
    ----------
    store_path : path
        Result store written by ``sweep run``.
    out_dir : path
        Folder for the report (created if needed; files of an earlier report are replaced).
    n_resamples : int
        Bootstrap resamples for the Sobol intervals.
    """
    ds, rows_complete = analysis.load_cube(store_path)
    return build_report(ds, out_dir, rows_complete=rows_complete, name=Path(store_path).name,
                        n_resamples=n_resamples)


def _slug(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", text)


def _write_table(table: Table, out_dir: Path, stem: str) -> dict:
    files = {}
    for kind, ext, render in (("Markdown", "md", table.markdown), ("LaTeX", "tex", table.latex),
                              ("CSV", "csv", table.csv)):
        path = out_dir / f"{_slug(stem)}.{ext}"
        path.write_text(render(), encoding="utf-8")
        files[kind] = path
    return files


def build_report(ds: xr.Dataset, out_dir, rows_complete=None, name: str = "cube",
                 levels=DEFAULT_LEVELS, n_resamples: int = 999) -> Path:
    """Write figures, tables and ``index.html`` for a cube; return the page's path.

    Parameters
    ----------
    ds : xarray.Dataset
        The cube.
    out_dir : path
        Report folder.
    rows_complete : None, boolean array (n_rows,) or sequence of int, optional
        Rows whose data are on disk.
    name : str
        Name shown in the title (the store's folder name).
    levels : sequence of float
        Credible levels [1].
    n_resamples : int
        Bootstrap resamples for the Sobol intervals.
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    grid = grid_axes(ds)
    head = headline_variable(ds)
    notes, figures, tables = [], [], []

    iv = intervals(ds, levels=levels, rows_complete=rows_complete)
    notes.append(f"Intervals: {iv.attrs['note']}.")
    for axis in grid:
        if axis in iv[head].dims:
            figures.append(figs.yield_against_axis(iv, head, axis, grid, out_dir))
    if {"radius_bin", "teq_bin"} <= set(ds[head].dims):
        iv_cat = intervals(ds, levels=levels, rows_complete=rows_complete, variables=[head],
                           keep=("radius_bin", "teq_bin"))
        figures.append(figs.radius_teq_grid(iv_cat, head, grid, out_dir))
    if "band_multiplicity" in iv:
        figures.append(figs.band_multiplicity(iv, grid, out_dir))

    records = interval_records(iv)
    for table in summary_tables(records, iv.attrs["levels"]):
        output = table.title.split(" ")[0]
        tables.append((table, _write_table(table, out_dir, f"summary_{output}")))

    sb = None
    if str(ds.attrs.get("mode", "")).lower() == "saltelli":
        try:
            sb = sobol(ds, rows_complete=rows_complete, variables=[head], n_resamples=n_resamples)
            cv = convergence(ds, rows_complete=rows_complete, variables=[head],
                             n_resamples=n_resamples)
        except UserInputError as exc:
            notes.append(f"Sobol indices not shown: {exc}")
    else:
        notes.append("Sobol indices need a cube made in mode \"saltelli\"; this is a "
                     f"{ds.attrs.get('mode', 'monte-carlo')} cube.")
    if sb is not None:
        kv = knowledge_value(sb, iv, level=0.95) if 0.95 in iv.attrs["levels"] else None
        figures.append(figs.sobol_bars(sb, head, grid, out_dir))
        figures.append(figs.sobol_convergence(cv, head, grid, out_dir))
        for table in sensitivity_tables(sobol_records(sb, kv)):
            tables.append((table, _write_table(table, out_dir, f"sensitivity_{head}")))
        share = irreducible_share(sb, head)
        if share is not None:
            point = figs._at_reference(share["share"], grid)
            values = np.atleast_1d(point.values)
            notes.append("Share of the variance of " + head + " that no better knowledge could "
                         "remove (total index of the population draw"
                         + (", " + figs.reference_label(share["share"], grid) if grid else "")
                         + "): " + ", ".join(f"{v:.2f}" for v in values) + ".")
        notes.append(f"Sobol indices from {sb.attrs['base_rows']} base rows; "
                     f"{sb.attrs['confidence_level']:.0%} bootstrap intervals "
                     f"({sb.attrs['n_resamples']} resamples).")
    figures.append(figs.yield_distribution(ds, iv, head, grid, out_dir, rows_complete))

    provenance = {"store": name, "mode": ds.attrs.get("mode", ""),
                  "rows used": f"{iv.attrs['rows_used']} of {iv.attrs['rows_total']}",
                  "spec hash": ds.attrs.get("spec_hash", ""),
                  "sweep version": ds.attrs.get("sweep_version", ""),
                  "created": ds.attrs.get("created", ""), "seed": ds.attrs.get("seed", ""),
                  "sobol inputs": ", ".join(analysis.json_attr(ds, "sobol_inputs", []) or [])}
    return write_page(out_dir, f"sweep report: {name}", provenance, notes, figures, tables,
                      spec_text=str(ds.attrs.get("spec_text", "")))


__all__ = ["build_report", "write_report"]
