"""``sweep plan SPEC``: validate a sweep and say what running it takes, before running it."""

from __future__ import annotations

import json
import math
import os
import time

from sweep.commands._args import add_spec_argument

#: Rows of the calibration block (fewer if the sweep's blocks are smaller).
CALIBRATION_ROWS = 8
#: Stop repeating the calibration block after this much time [s].
CALIBRATION_S = 0.5


def add_parser(subparsers) -> None:
    """Declare ``sweep plan``."""
    parser = subparsers.add_parser(
        "plan",
        help="validate a sweep; show its rows, blocks, store size and estimated CPU time",
        description=(
            "Validate a sweep definition and print its size: rows, grid points, blocks, the "
            "expected store size and a CPU time estimated by timing one small block here."
        ),
    )
    add_spec_argument(parser)
    parser.add_argument("--output", metavar="STORE", help="store path to report (default as sweep run)")
    parser.add_argument("--json", action="store_true", help="print the plan as JSON")
    parser.set_defaults(handler=run)


def calibrate(model, rows, block_rows: int) -> float:
    """CPU time of ``model.evaluate`` per row, timed on the first rows of the sweep [s].

    A first call (caches, lazy imports) counts only when it alone takes longer than
    :data:`CALIBRATION_S`; otherwise calls are repeated for about that long and the fastest counts.
    """
    n = max(1, min(CALIBRATION_ROWS, block_rows, rows.n_rows))
    block = rows.block(0, n)
    started = time.process_time()
    model.evaluate(block)
    best = time.process_time() - started
    if best > CALIBRATION_S:  # slow enough that set-up costs do not matter
        return best / n
    best, spent = math.inf, 0.0
    while spent < CALIBRATION_S:
        started = time.process_time()
        tick = time.perf_counter()
        model.evaluate(block)
        best = min(best, time.process_time() - started)
        spent += time.perf_counter() - tick
        if spent == 0.0:
            spent = 1e-9
    return best / n


def make_plan(spec, output=None) -> dict:
    """Everything ``sweep plan`` reports, as a JSON-ready dict."""
    from sweep.design import build_rows
    from sweep.store import expected_bytes

    rows = build_rows(spec)
    model = spec.build_model()
    axes = spec.grid_axes()
    grid_points = math.prod(len(axis.values) for axis in axes)
    per_row = calibrate(model, rows, spec.run.block_rows)
    cores = os.cpu_count() or 1
    plan = {
        "spec": str(spec.path),
        "name": spec.run.name,
        "mode": spec.run.mode,
        "spec_hash": spec.hash,
        "rows": int(spec.n_rows),
        "base_rows": spec.run.base_rows if spec.run.mode == "saltelli" else None,
        "sobol_inputs": list(spec.sobol_inputs()),
        "factors": [factor.name for factor in spec.factors()],
        "grid_axes": {axis.name: list(axis.values) for axis in axes},
        "grid_points": grid_points,
        "block_rows": int(spec.run.block_rows),
        "blocks": int(spec.n_blocks),
        "variables": {o.name: ["row", *o.dims] for o in model.outputs()},
        "store": str(spec.output_path(output)),
        "store_bytes": expected_bytes(model, rows.n_rows, len(spec.factors())),
        "cpu_s_per_row": per_row,
        "cpu_s": per_row * spec.n_rows,
        "cores_here": cores,
        "wall_s_here": per_row * spec.n_rows / cores,
    }
    expected = getattr(model, "expected_planets_per_row", None)
    if callable(expected):
        plan["expected_planets_per_row"] = float(expected())
    observing = getattr(model, "observing_time_h", None)
    if callable(observing) and (times := observing()):
        plan["observing_time_h"] = times
    return plan


def _size(n_bytes: float) -> str:
    for unit in ("B", "KiB", "MiB", "GiB", "TiB"):
        if n_bytes < 1024 or unit == "TiB":
            return f"{n_bytes:.0f} {unit}" if unit == "B" else f"{n_bytes:.1f} {unit}"
        n_bytes /= 1024


def _duration(seconds: float) -> str:
    if seconds < 120:
        return f"{seconds:.3g} s"
    if seconds < 7200:
        return f"{seconds / 60:.1f} min"
    return f"{seconds / 3600:.1f} h"


def run(args) -> int:
    """Print the plan of a sweep; return 0."""
    from sweep.spec import load_spec

    spec = load_spec(args.spec)
    plan = make_plan(spec, args.output)
    if args.json:
        print(json.dumps(plan, indent=2))
        return 0
    design = plan["mode"] + (f", N = {plan['base_rows']} x (2 + {len(plan['sobol_inputs'])} inputs)"
                             if plan["mode"] == "saltelli" else "")
    lines = [
        f"sweep       {plan['name']} ({plan['spec']}): valid",
        f"design      {design}",
        f"rows        {plan['rows']}",
        f"factors     {len(plan['factors'])}" + (f": {', '.join(plan['factors'])}" if plan["factors"] else ""),
        f"grid        {plan['grid_points']} points"
        + "".join(f"; {name} x{len(values)}" for name, values in plan["grid_axes"].items()),
        f"blocks      {plan['blocks']} of {plan['block_rows']} rows (one task each)",
    ]
    if "expected_planets_per_row" in plan:
        lines.append(f"planets     {plan['expected_planets_per_row']:.4g} expected per row")
    if "observing_time_h" in plan:
        lines.append("time        " + "; ".join(f"{name} {_duration(hours * 3600)}"
                                               for name, hours in plan["observing_time_h"].items())
                     + " of integration per survey (each row), factors at their medians")
    lines += [
        f"variables   " + "; ".join(f"{name}({', '.join(dims)})" for name, dims in plan["variables"].items()),
        f"store       {plan['store']}, up to {_size(plan['store_bytes'])} (uncompressed)",
        f"CPU time    {_duration(plan['cpu_s'])} ({plan['cpu_s_per_row'] * 1e3:.3g} ms per row, timed here); "
        f"about {_duration(plan['wall_s_here'])} on the {plan['cores_here']} cores of this machine",
    ]
    print("\n".join(lines))
    return 0
