"""``sweep verify STORE``: recompute block checksums; name damaged and missing blocks."""

from __future__ import annotations

import json


def _ranges(blocks) -> str:
    """``0-3, 7, 9-10`` for a sorted list of block numbers."""
    parts, start, previous = [], None, None
    for block in list(blocks) + [None]:
        if block is not None and previous is not None and block == previous + 1:
            previous = block
            continue
        if start is not None:
            parts.append(f"{start}" if start == previous else f"{start}-{previous}")
        start = previous = block
    return ", ".join(parts)


def add_parser(subparsers) -> None:
    """Declare ``sweep verify``."""
    parser = subparsers.add_parser(
        "verify",
        help="check every block's checksum; the next run recomputes damaged and missing blocks",
        description=(
            "Read every block recorded as done, recompute its checksum and compare it with the "
            "completion record. Damaged blocks are taken out of the record, so the next sweep run "
            "computes them again. Exit status 0 when the cube is complete and intact, 1 otherwise."
        ),
    )
    parser.add_argument("store", metavar="STORE", help="a store written by sweep run")
    parser.add_argument("--json", action="store_true", help="print the report as JSON")
    parser.set_defaults(handler=run)


def run(args) -> int:
    """Verify the store; print the report; return 0 (complete and intact) or 1."""
    from sweep.store import verify

    report = verify(args.store)
    intact = not report["damaged"] and not report["missing"]
    if args.json:
        print(json.dumps(report, indent=2))
        return 0 if intact else 1
    print(f"{report['path']}: {len(report['blocks_ok'])}/{report['blocks_total']} blocks intact")
    for entry in report["damaged"]:
        start, stop = entry["rows"]
        print(f"block {entry['block']} (rows {start}..{stop - 1}): damaged, {entry['problem']}")
    if report["missing"]:
        print(f"{len(report['missing'])} blocks not done: {_ranges(report['missing'])}")
    if not intact:
        print("run `sweep run` with the same definition and store to compute them")
    return 0 if intact else 1
