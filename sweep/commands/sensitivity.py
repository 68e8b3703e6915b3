"""``sweep sensitivity STORE``: Sobol indices of the yields, as a table or JSON."""

from __future__ import annotations

import json

from sweep.commands._args import add_output_selection, add_result_store_argument, selected_variables


def add_parser(subparsers) -> None:
    parser = subparsers.add_parser(
        "sensitivity", help="Sobol indices of the yields in a Saltelli result store",
        description="Print first-order (S1) and total (ST) Sobol indices of the outputs of a "
                    "Saltelli result store with bootstrap confidence intervals, and how much the "
                    "yield's spread would shrink if each factor were known exactly.")
    add_result_store_argument(parser)
    add_output_selection(parser)
    parser.add_argument("--base-rows", type=int, default=None,
                        help="use the first N base rows of every block (a power of two)")
    parser.add_argument("--confidence", type=float, default=0.95,
                        help="confidence level of the bootstrap intervals (default 0.95)")
    parser.add_argument("--resamples", type=int, default=999,
                        help="bootstrap resamples (default 999; 0 skips the intervals)")
    parser.set_defaults(handler=run)


def run(args) -> int:
    from sweep import analysis  # the analysis and report modules load scipy.stats, xarray, matplotlib
    from sweep.analysis.intervals import intervals
    from sweep.analysis.knowledge import knowledge_value
    from sweep.analysis.sobol import sobol
    from sweep.report.tables import sensitivity_tables, sobol_records

    ds, rows_complete = analysis.load_cube(args.store)
    names = analysis.output_variables(ds)
    variables = selected_variables(args, names, names[:1])
    result = sobol(ds, rows_complete=rows_complete, variables=variables,
                   base_rows=args.base_rows, confidence_level=args.confidence,
                   n_resamples=args.resamples)
    spread = intervals(ds, rows_complete=rows_complete, variables=variables, levels=(0.95,))
    records = sobol_records(result, knowledge_value(result, spread, level=0.95))
    if args.json:
        print(json.dumps(records, indent=1))
        return 0
    print("\n\n".join(t.text() for t in sensitivity_tables(records)))
    lines = [f"\nfrom {result.attrs['base_rows']} base rows; "
             f"{args.confidence:.0%} bootstrap intervals ({args.resamples} resamples)",
             "SD shrink if known: expected fractional shrink of the standard deviation (and of "
             "the 95 % interval width) if that factor were known exactly, 1 - sqrt(1 - S1)"]
    if result.attrs.get("irreducible"):
        lines.append(f"{result.attrs['irreducible']}: the planet-population draw; its ST is the "
                     "share of variance no better knowledge could remove")
    print("\n".join(lines))
    return 0
