"""Records and tables from the reductions: terminal text, Markdown, LaTeX (booktabs), CSV, HTML.

:func:`interval_records` and :func:`sobol_records` flatten a reduction into one dictionary per
output point (its labels: concept, band, grid values, category); :class:`Table` renders rows of
such values in every format the report and the terminal need.
"""

from __future__ import annotations

import csv
import html
import io
import math
from dataclasses import dataclass, field

import numpy as np
import xarray as xr

from sweep.analysis import CATEGORY_DIMS
from sweep.analysis.intervals import credible_interval

#: Keys of a record that are values, not labels.
VALUE_KEYS = {"output", "units", "category", "mean", "median", "median_se", "intervals",
              "completeness", "rows_used", "rows_total", "factor", "S1", "S1_lo", "S1_hi", "ST",
              "ST_lo", "ST_hi", "sd_shrink", "sd_shrink_lo", "sd_shrink_hi", "width_known",
              "irreducible"}


def level_key(level: float) -> str:
    """Key of a credible level in records: 0.68 -> ``"68"``."""
    return f"{100 * float(level):.10g}"


def _plain(value):
    """A JSON-ready Python scalar (NaN -> None)."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def iter_points(da: xr.DataArray, skip=()):
    """Yield ``(indexer, labels, category)`` for every point of ``da`` over its dims not in ``skip``.

    ``labels`` maps each coordinate along those dims (grid axes, ``concept``, ``band``,
    ``n_bands``, ``criterion``) to its value; ``category`` maps the category axes kept to their
    labels, or is ``"total"``.
    """
    dims = [dim for dim in da.dims if dim not in skip]
    shape = [da.sizes[dim] for dim in dims]
    coords = [(name, coord) for name, coord in da.coords.items()
              if coord.dims and set(coord.dims) <= set(dims)]
    named = {dim for name, coord in coords for dim in coord.dims}
    for index in np.ndindex(*shape):
        indexer = dict(zip(dims, index))
        labels, category = {}, {}
        for dim in dims:
            if dim not in named:
                labels[dim] = indexer[dim]
        for name, coord in coords:
            at = tuple(indexer[d] for d in coord.dims)
            value = _plain(coord.values[at])
            (category if name in CATEGORY_DIMS else labels)[name] = value
            if name == "channel":  # the planet model's channel carries its concept and band
                for key in ("concept", "band"):
                    names = coord.attrs.get(key)
                    if isinstance(names, (list, tuple)) and len(names) == coord.size:
                        labels[key] = names[at[0]]
        yield indexer, labels, (category or "total")


def interval_records(result: xr.Dataset) -> list[dict]:
    """One record per output point of a result of :func:`sweep.analysis.intervals.intervals`.

    Each record has ``output``, its labels, ``category``, ``units``, ``mean``, ``median``,
    ``median_se``, ``intervals`` (level key -> [low, high]), ``completeness`` (detection counts
    only), ``rows_used`` and ``rows_total``.
    """
    records = []
    levels = result.attrs["levels"]
    for name in result.attrs["outputs"]:
        quant = result[name]
        bounds = {level_key(level): credible_interval(result, name, level) for level in levels}
        centre = quant.sel(quantile=0.5, method="nearest")
        complete = result.get(f"{name}_completeness")
        for indexer, labels, category in iter_points(quant, skip=("quantile",)):
            record = {"output": name, **labels, "category": category,
                      "units": quant.attrs.get("units", "1"),
                      "mean": _plain(result[f"{name}_mean"].values[_at(result[f"{name}_mean"], indexer)]),
                      "median": _plain(centre.values[_at(centre, indexer)]),
                      "median_se": _plain(result[f"{name}_median_se"].values[
                          _at(result[f"{name}_median_se"], indexer)]),
                      "intervals": {key: [_plain(low.values[_at(low, indexer)]),
                                          _plain(high.values[_at(high, indexer)])]
                                    for key, (low, high) in bounds.items()}}
            if complete is not None:
                record["completeness"] = _plain(complete.values[_at(complete, indexer)])
            record["rows_used"] = int(result.attrs["rows_used"])
            record["rows_total"] = int(result.attrs["rows_total"])
            records.append(record)
    return records


def _at(da: xr.DataArray, indexer: dict) -> tuple:
    return tuple(indexer[dim] for dim in da.dims)


def sobol_records(result: xr.Dataset, knowledge: xr.Dataset | None = None) -> list[dict]:
    """One record per output point and factor of a result of :func:`sweep.analysis.sobol.sobol`.

    Each record has ``output``, its labels, ``category``, ``factor``, ``S1``, ``S1_lo``, ``S1_hi``,
    ``ST``, ``ST_lo``, ``ST_hi``; with ``knowledge`` (:func:`sweep.analysis.knowledge
    .knowledge_value`) also ``sd_shrink`` (fractional shrink of the standard deviation if the
    factor were known) and its bounds; the population draw has ``irreducible: true``.
    """
    records = []
    irreducible = result.attrs.get("irreducible", "")
    for name in result.attrs["outputs"]:
        est, low, high = (result[key].transpose(..., "factor")
                          for key in (name, f"{name}_low", f"{name}_high"))
        for indexer, labels, category in iter_points(est, skip=("index",)):
            factor = str(est["factor"].values[indexer["factor"]])
            labels.pop("factor", None)
            record = {"output": name, **labels, "category": category, "factor": factor}
            for i, key in enumerate(("S1", "ST")):
                at = _at(est, dict(indexer, index=i))
                record[key] = _plain(est.values[at])
                record[f"{key}_lo"] = _plain(low.values[at])
                record[f"{key}_hi"] = _plain(high.values[at])
            if knowledge is not None and f"{name}_shrink" in knowledge and factor != irreducible:
                for key, var in (("sd_shrink", ""), ("sd_shrink_lo", "_low"),
                                 ("sd_shrink_hi", "_high")):
                    da = knowledge[f"{name}_shrink{var}"].sel(factor=factor)
                    record[key] = _plain(da.values[_at(da, indexer)])
            if factor == irreducible:
                record["irreducible"] = True
            records.append(record)
    return records


def format_number(value, digits: int = 3) -> str:
    """A compact text form of a number: integers as integers, otherwise ``digits`` significant
    figures; None/NaN as ``n/a``."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "n/a"
    if isinstance(value, str):
        return value
    value = float(value)
    if value == round(value) and abs(value) < 1e15:
        return str(int(round(value)))
    if abs(value) >= 10 ** digits:
        return f"{value:.0f}"
    return f"{value:.{digits}g}"


@dataclass
class Table:
    """Rows of values with a title and notes, rendered to several formats.

    A cell is a string, a number, or a pair ``(low, high)`` (an interval): text formats show
    ``low\u2013high``, CSV gives two columns ``<column> low`` and ``<column> high``.
    """

    title: str
    columns: list
    rows: list = field(default_factory=list)
    notes: list = field(default_factory=list)

    def _cells(self):
        for row in self.rows:
            yield [(f"{format_number(c[0])}\u2013{format_number(c[1])}" if isinstance(c, tuple)
                    else format_number(c)) for c in row]

    def text(self) -> str:
        """A fixed-width table for the terminal."""
        cells = list(self._cells())
        widths = [max([len(str(col))] + [len(row[i]) for row in cells])
                  for i, col in enumerate(self.columns)]
        line = "  ".join(str(col).ljust(w) for col, w in zip(self.columns, widths))
        out = [self.title, line.rstrip(), "  ".join("-" * w for w in widths)]
        out += ["  ".join(c.rjust(w) if _numeric(c) else c.ljust(w)
                          for c, w in zip(row, widths)).rstrip() for row in cells]
        out += [f"  {note}" for note in self.notes]
        return "\n".join(out)

    def markdown(self) -> str:
        """A GitHub-flavoured Markdown table with its title as a heading."""
        out = [f"### {self.title}", "", "| " + " | ".join(map(str, self.columns)) + " |",
               "|" + "|".join("---" for _ in self.columns) + "|"]
        out += ["| " + " | ".join(c.replace("|", "\\|") for c in row) + " |"
                for row in self._cells()]
        out += [""] + [f"*{note}*" for note in self.notes]
        return "\n".join(out).rstrip() + "\n"

    def latex(self) -> str:
        """A booktabs ``tabular`` (needs ``\\usepackage{booktabs}``), title and notes as comments."""
        align = "".join("l" if i < self._label_columns() else "r" for i in range(len(self.columns)))
        out = [f"% {self.title}"] + [f"% {note}" for note in self.notes]
        out += [f"\\begin{{tabular}}{{{align}}}", "\\toprule",
                " & ".join(_latex(str(c)) for c in self.columns) + " \\\\", "\\midrule"]
        out += [" & ".join(_latex(c) for c in row) + " \\\\" for row in self._cells()]
        out += ["\\bottomrule", "\\end{tabular}"]
        return "\n".join(out) + "\n"

    def csv(self) -> str:
        """Comma-separated values at full precision; intervals become two columns."""
        header = []
        for i, col in enumerate(self.columns):
            if any(isinstance(row[i], tuple) for row in self.rows):
                header += [f"{col} low", f"{col} high"]
            else:
                header.append(str(col))
        buffer = io.StringIO()
        writer = csv.writer(buffer, lineterminator="\n")
        writer.writerow(header)
        for row in self.rows:
            flat = []
            for i, cell in enumerate(row):
                if any(isinstance(r[i], tuple) for r in self.rows):
                    flat += list(cell) if isinstance(cell, tuple) else [cell, cell]
                else:
                    flat.append(cell)
            writer.writerow(["" if c is None else c for c in flat])
        return buffer.getvalue()

    def html(self) -> str:
        """An HTML ``<table>`` with a caption and notes."""
        head = "".join(f"<th>{html.escape(str(c))}</th>" for c in self.columns)
        body = "".join("<tr>" + "".join(f"<td>{html.escape(c)}</td>" for c in row) + "</tr>"
                       for row in self._cells())
        notes = "".join(f"<p class=\"note\">{html.escape(n)}</p>" for n in self.notes)
        return (f"<table><caption>{html.escape(self.title)}</caption><thead><tr>{head}</tr></thead>"
                f"<tbody>{body}</tbody></table>{notes}")

    def _label_columns(self) -> int:
        for i in range(len(self.columns)):
            if any(not isinstance(row[i], str) for row in self.rows):
                return i
        return len(self.columns)


def _numeric(cell: str) -> bool:
    return bool(cell) and (cell[0].isdigit() or cell[0] in "-\u2013+.")


_LATEX_ESCAPES = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
                  "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}",
                  "^": r"\textasciicircum{}", "\u2013": "--"}


def _latex(text: str) -> str:
    return "".join(_LATEX_ESCAPES.get(ch, ch) for ch in text)


def _label_columns(records: list[dict]) -> list[str]:
    columns = []
    for record in records:
        for key in record:
            if key not in VALUE_KEYS and key not in columns:
                columns.append(key)
    if any(record.get("category") != "total" for record in records):
        columns.append("category")
    return columns


def _label_cells(record: dict, columns: list[str]) -> list[str]:
    cells = []
    for key in columns:
        value = record.get(key, "")
        if isinstance(value, dict):
            value = ", ".join(str(v) for v in value.values())
        cells.append(value if isinstance(value, str) else format_number(value))
    return cells


def _groups(records):
    """(output, is total) pairs in the order of the records."""
    return list(dict.fromkeys((r["output"], r["category"] == "total") for r in records))


def summary_tables(records: list[dict], levels, note: str = "") -> list[Table]:
    """Tables of medians and credible intervals, one per output, in the order of the records."""
    tables = []
    for name, total in _groups(records):
        part = [r for r in records if r["output"] == name and (r["category"] == "total") == total]
        labels = _label_columns(part)
        keys = [level_key(level) for level in levels]
        columns = labels + ["median"] + [f"{k} %" for k in keys] + ["mean", "se(median)"]
        has_completeness = any("completeness" in r for r in part)
        if has_completeness:
            columns.append("completeness")
        rows = []
        for r in part:
            row = _label_cells(r, labels) + [r["median"]]
            row += [tuple(r["intervals"][k]) for k in keys] + [r["mean"], r["median_se"]]
            if has_completeness:
                row.append(r.get("completeness"))
            rows.append(row)
        kind = "total" if total else "per category"
        title = f"{name} [{part[0]['units']}], {kind}"
        tables.append(Table(title, columns, rows, [note] if note else []))
    return tables


def sensitivity_tables(records: list[dict], note: str = "") -> list[Table]:
    """Tables of Sobol indices (with bootstrap intervals and the shrink of the standard deviation
    if a factor were known), one per output."""
    tables = []
    for name, total in _groups(records):
        part = [r for r in records if r["output"] == name and (r["category"] == "total") == total]
        labels = _label_columns(part)
        columns = labels + ["factor", "S1", "S1 interval", "ST", "ST interval"]
        known = any("sd_shrink" in r for r in part)
        if known:
            columns.append("SD shrink if known")
        rows = []
        for r in part:
            factor = r["factor"] + (" (irreducible)" if r.get("irreducible") else "")
            row = _label_cells(r, labels) + [factor, _index(r["S1"]), (_index(r["S1_lo"]),
                                                                      _index(r["S1_hi"])),
                                            _index(r["ST"]), (_index(r["ST_lo"]), _index(r["ST_hi"]))]
            if known:
                row.append(_index(r.get("sd_shrink")))
            rows.append(row)
        title = f"Sobol indices of {name}" + ("" if total else ", per category")
        tables.append(Table(title, columns, rows, [note] if note else []))
    return tables


def _index(value):
    return None if value is None else float(value)


__all__ = ["Table", "format_number", "interval_records", "iter_points", "level_key",
           "sensitivity_tables", "sobol_records", "summary_tables"]
