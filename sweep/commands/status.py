"""``sweep status STORE``: how far a store is (works while a run writes it)."""

from __future__ import annotations

import json


def add_parser(subparsers) -> None:
    """Declare ``sweep status``."""
    parser = subparsers.add_parser(
        "status",
        help="blocks done, rows and times of a store",
        description="Show a store's sweep name, mode, blocks done out of the total, rows, and times.",
    )
    parser.add_argument("store", metavar="STORE", help="a store written by sweep run")
    parser.add_argument("--json", action="store_true", help="print as JSON")
    parser.set_defaults(handler=run)


def run(args) -> int:
    """Print the store's status; return 0."""
    from sweep.store import status

    info = status(args.store)
    if args.json:
        print(json.dumps(info, indent=2))
        return 0
    share = 100.0 * info["blocks_done"] / info["blocks_total"] if info["blocks_total"] else 100.0
    lines = [
        f"store        {info['path']}",
        f"sweep        {info['name']} ({info['mode']}, spec hash {info['spec_hash'][:12]})",
        f"blocks done  {info['blocks_done']} / {info['blocks_total']} ({share:.0f}%)",
        f"rows done    {info['rows_done']} / {info['rows']} ({info['block_rows']} per block)",
        f"created      {info['created']}",
        f"first run    {info['started'] or '-'}",
        f"last write   {info['last_write'] or '-'}",
    ]
    running = info["running"]
    if running:
        lines.append(f"running      pid {running['pid']} on {running['host']} since {running['started']}")
    last = info["last_run"]
    if last:
        outcome = last.get("outcome", "running" if running else "stopped before it ended (killed?)")
        computed = last.get("blocks_computed")
        detail = f", {computed} blocks computed" if computed is not None else ""
        lines.append(f"last run     {last.get('at')}: {outcome}{detail}")
    print("\n".join(lines))
    return 0
