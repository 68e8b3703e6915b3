"""``sweep report STORE --out DIR``: figures, tables and one HTML page of a result store."""

from __future__ import annotations

from sweep.commands._args import add_result_store_argument


def add_parser(subparsers) -> None:
    parser = subparsers.add_parser(
        "report", help="figures, tables and an HTML page of a result store",
        description="Write figures (PNG, PDF), tables (Markdown, LaTeX, CSV) and index.html "
                    "for a result store into one folder.")
    add_result_store_argument(parser)
    parser.add_argument("--out", required=True, help="folder for the report (created if needed)")
    parser.add_argument("--resamples", type=int, default=999,
                        help="bootstrap resamples for the Sobol intervals (default 999)")
    parser.set_defaults(handler=run)


def run(args) -> int:
    from sweep.report import write_report

    page = write_report(args.store, args.out, n_resamples=args.resamples)
    print(page)
    return 0
