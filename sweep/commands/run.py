"""``sweep run SPEC``: compute the cube of a sweep, or the blocks a store still misses."""

from __future__ import annotations

import contextlib
import json
from pathlib import Path

from sweep.cluster import add_cluster_arguments, batch_client
from sweep.cluster_settings import positive_int
from sweep.commands._args import add_spec_argument
from sweep.errors import UserInputError


def add_parser(subparsers) -> None:
    """Declare ``sweep run``."""
    parser = subparsers.add_parser(
        "run",
        help="compute a sweep into its zarr store (resumes an interrupted run)",
        description=(
            "Compute every row block of a sweep on dask and write the counts into the store. "
            "Started again on an existing store, it computes only the blocks not yet done."
        ),
    )
    add_spec_argument(parser)
    parser.add_argument("--output", metavar="STORE", help="store path (default: run.output, else results/<name>.zarr)")
    parser.add_argument("--workers", type=positive_int, metavar="N",
                        help="local worker processes (default: execution.workers, 0 there = one per core)")
    parser.add_argument("--scheduler", metavar="ADDRESS",
                        help="join a running dask scheduler (tcp://host:port) instead of starting a local cluster")
    parser.add_argument("--fresh", action="store_true",
                        help="start the store again from empty, even one written from another definition")
    parser.add_argument("--report", action="store_true",
                        help="when the run ends, write the report (HTML page, figures, tables) beside the store")
    parser.add_argument("--quiet", action="store_true", help="no progress line")
    parser.add_argument("--json", action="store_true", help="print the run summary as JSON")
    add_cluster_arguments(parser)
    parser.set_defaults(handler=run)


def run(args) -> int:
    """Run the sweep; print a summary; return the exit status."""
    from sweep.engine import StartingClient, run_sweep
    from sweep.spec import load_spec, read_execution

    if args.scheduler and args.workers:
        raise UserInputError("--workers sets the local cluster's size; with --scheduler the scheduler's workers run the tasks")
    if args.cluster and args.scheduler:
        raise UserInputError("--cluster starts its own scheduler; leave out --scheduler")
    if args.cluster and args.workers:
        raise UserInputError("--workers sizes the local cluster; with --cluster use --jobs")
    if args.cluster:
        spec = load_spec(args.spec)
        with batch_client(args) as client:
            summary = run_sweep(spec, output=args.output, client=client, fresh=args.fresh, progress=not args.quiet)
    else:
        execution = read_execution(args.spec)
        with contextlib.ExitStack() as stack:  # workers start while the whole spec is validated
            client = None if execution is None else stack.enter_context(
                StartingClient(execution, workers=args.workers, scheduler=args.scheduler))
            spec = load_spec(args.spec)
            summary = run_sweep(spec, output=args.output, client=client, fresh=args.fresh, progress=not args.quiet,
                                workers=args.workers, scheduler=args.scheduler)
    report = _write_report(summary.path) if args.report else None
    if args.json:
        print(json.dumps(summary.as_dict() | ({"report": str(report)} if report else {}), indent=2))
        return 0
    print(
        f"{summary.path}: computed {summary.blocks_computed} blocks ({summary.rows_computed} rows) "
        f"in {summary.wall_s:.1f} s, {summary.blocks_skipped} were already done; "
        f"{summary.blocks_skipped + summary.blocks_computed}/{summary.blocks_total} blocks done"
        + (f", {summary.retries} retried" if summary.retries else "")
    )
    if report:
        print(f"report: {report}")
    return 0


def report_folder(store_path) -> Path:
    """Where ``--report`` writes: beside the store, ``results/demo.zarr`` -> ``results/demo-report``."""
    store_path = Path(store_path)
    return store_path.with_name(store_path.name.removesuffix(".zarr") + "-report")


def _write_report(store_path) -> Path:
    from sweep.report import write_report

    return write_report(store_path, report_folder(store_path))
