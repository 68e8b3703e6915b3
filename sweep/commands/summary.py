"""``sweep summary STORE``: medians and credible intervals of the yields, as a table or JSON."""

from __future__ import annotations

import json

from sweep.commands._args import add_output_selection, add_result_store_argument, selected_variables
from sweep.errors import UserInputError


def parse_levels(text: str) -> list[float]:
    """Credible levels from ``"68,95"`` (percent) or ``"0.68,0.95"`` (fractions)."""
    try:
        values = [float(part) for part in text.split(",") if part.strip()]
    except ValueError:
        raise UserInputError(f"--levels {text!r}: expected numbers separated by commas, "
                             "e.g. 68,95") from None
    levels = [v / 100 if v > 1 else v for v in values]
    if not levels or any(not 0 < v < 1 for v in levels):
        raise UserInputError(f"--levels {text!r}: each level must lie between 0 and 100 percent")
    return levels


def add_parser(subparsers) -> None:
    parser = subparsers.add_parser(
        "summary", help="medians and credible intervals of the yields in a result store",
        description="Print the median, mean and credible intervals of every output of a result "
                    "store (totals over categories; per concept, band and grid point).")
    add_result_store_argument(parser)
    add_output_selection(parser)
    parser.add_argument("--levels", default="68,95",
                        help="credible levels in percent, comma-separated (default 68,95)")
    parser.add_argument("--per-category", action="store_true",
                        help="also report every radius / temperature / spectral-class bin")
    parser.set_defaults(handler=run)


def run(args) -> int:
    from sweep import analysis  # the analysis and report modules load scipy.stats, xarray, matplotlib
    from sweep.analysis.intervals import intervals
    from sweep.report.tables import interval_records, summary_tables

    levels = parse_levels(args.levels)
    ds, rows_complete = analysis.load_cube(args.store)
    names = analysis.output_variables(ds)
    variables = selected_variables(args, names,
                                   names[:1] + [n for n in ("present",) if n in names and n != names[0]])
    result = intervals(ds, levels=levels, rows_complete=rows_complete, variables=variables)
    records = interval_records(result)
    if args.per_category:
        kept = [d for d in analysis.CATEGORY_DIMS if any(d in ds[v].dims for v in variables)]
        if kept:
            records += interval_records(intervals(ds, levels=levels,
                                                  rows_complete=rows_complete,
                                                  variables=variables, keep=kept))
    if args.json:
        print(json.dumps(records, indent=1))
        return 0
    print("\n\n".join(t.text() for t in summary_tables(records, levels)))
    print(f"\n{result.attrs['note']}; equal-tailed credible intervals; se(median): Monte Carlo "
          "standard error of the median (Maritz-Jarrett).")
    return 0
