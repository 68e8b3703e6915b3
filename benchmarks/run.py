"""Throughput, scaling and memory benchmarks of sweep's planet-yield model and engine.

    python benchmarks/run.py                  # a readable table
    python benchmarks/run.py --json           # one JSON object on stdout
    python benchmarks/run.py --quick --json   # tiny sizes: a smoke run (the test suite runs it)

Every ratio is measured side by side in this one process (or in its child processes), each timing
repeated and the best kept, so that a busy machine slows both sides of a ratio alike:

``draw_ns_per_planet``, ``floor_ratio``
    Time to draw the planets of a block (every property) per planet, and that time over the time
    numpy's default generator takes to make the random numbers the draw consumes: every candidate's
    uniforms, the Poisson count of every star in every row, and the excess draws (counted by
    replaying the row streams). The floor makes the Poisson numbers in one call and the uniforms
    into one reused 1 MiB buffer, the cheapest way those numbers can be had (one bulk array of
    every uniform is about a quarter slower: its pages fault in as it is written). The blocks are
    drawn as ``model.evaluate`` draws them, in passes of ``model.rows_per_pass`` rows.
``detect_ns_per_planet_channel``
    Detection cost (all concepts at all grid points, parameters resolved as the model does it) per
    planet, band and grid point; every repeat uses a new batch object so that no cache carries over.
``reference_speedup``
    Whole-model time per planet of :mod:`benchmarks.reference` (loops over stars and planets, scalar
    physics) over that of ``model.evaluate``, on a subset of rows. The two must agree statistically:
    the model's per-row totals (planets present, detections per grid point and band), averaged over
    replicate populations of the same rows, against the reference's, by paired t-tests
    (:func:`benchmarks.reference.agreement`).
``parallel_efficiency_2``
    Wall time of the sweep on 1 local worker over twice its wall time on 2 workers (run time from
    the first task submitted to the last block recorded; cluster start-up excluded).
``memory_ratio_8x``
    Peak resident memory of a whole run (the process and all its children: scheduler, nannies,
    workers) with 8 times the base rows over that of the smaller run, each in a child process that
    samples psutil every 20 ms.
``engine_overhead``
    Share of a run's wall time on 2 local workers (from the first task submitted to the last block
    recorded) in which the workers are not in ``model.evaluate``: writes, checksums, transfers,
    scheduling, task deserialisation, warm-up and the idle tail. The run is the first one of a
    cluster that ``run_sweep`` starts itself, as ``sweep run`` does; ``run_startup_s`` is the time
    around it (cluster start-up while the rows, model and store are built, and shut-down).
``demo_wall_s``, ``engine_overhead_with_startup``
    ``sweep run <spec> --workers 2`` as a user runs it, from the shell, timed end to end, and the
    share of that whole time not spent in ``model.evaluate`` per worker: interpreter start,
    imports and cluster start-up count here (skipped by --quick).
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import os
import platform
import re
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from benchmarks import reference as ref  # noqa: E402
from sweep import params, planets, streams  # noqa: E402
from sweep.design import build_rows  # noqa: E402
from sweep.model import parameter_values  # noqa: E402
from sweep.spec import load_spec, parse_spec  # noqa: E402

DEMO = ROOT / "workflows" / "demo.toml"


# ------------------------------------------------------------------------------------------ specs


def spec_with(path: Path, **run_keys):
    """The spec at ``path`` with keys of its ``[run]`` section replaced (``base_rows=64``...)."""
    text = Path(path).read_text(encoding="utf-8")
    for key, value in run_keys.items():
        line = f"{key} = {json.dumps(value)}"
        pattern = re.compile(rf"^{key}\s*=.*$", re.MULTILINE)
        text = pattern.sub(line, text, count=1) if pattern.search(text) else text.replace("[run]", f"[run]\n{line}", 1)
    return parse_spec(text, Path(path))


def best_of(function, repeats: int) -> float:
    """Shortest wall time of ``repeats`` calls [s]."""
    times = []
    for _ in range(repeats):
        started = time.perf_counter()
        function()
        times.append(time.perf_counter() - started)
    return min(times)


# ------------------------------------------------------------------------------------------ draw


def consumed_numbers(block, stars, occurrence) -> tuple[int, np.ndarray]:
    """Uniforms and Poisson means the draw of a block consumes, replaying its row streams."""
    layout = planets._Layout(stars, occurrence)
    rates = occurrence.cell_rates(block.factors, len(block)).reshape(len(block), -1)
    excess = np.maximum(rates - layout.envelope, 0.0)
    n_uniforms, means = 0, []
    for r in range(len(block)):
        key = (block.seed, block.base_index[r], block.population_source[r])
        counts = streams.row_generator(*key, streams.CANDIDATES).poisson(layout.star_envelope)
        n_uniforms += planets.N_UNIFORMS * int(counts.sum())
        means.append(layout.star_envelope)
        if (excess[r] > 0).any():
            lam = excess[r] * np.repeat(layout.class_count, layout.n_cells)
            per_cell = streams.row_generator(*key, streams.EXCESS).poisson(lam)
            n_uniforms += planets.N_UNIFORMS * int(per_cell.sum())
            means.append(lam)
    return n_uniforms, np.concatenate(means)


#: Uniforms the floor makes per call (1 MiB): a buffer that stays in cache.
FLOOR_BUFFER = 1 << 17


def bench_draw(model, blocks, repeats: int) -> dict:
    """Draw time per planet and its ratio to numpy's time for the same random numbers."""
    blocks = [part for block in blocks for part in block.split(model.rows_per_pass)]
    resolved = [params.resolve(model.priors, "priors", parameter_values(b, {})) for b in blocks]
    counted = [consumed_numbers(b, model.stars, model.occurrence) for b in blocks]
    n_planets = sum(len(planets.draw_planets(b, model.stars, model.occurrence, p)) for b, p in zip(blocks, resolved))
    n_uniforms = sum(c[0] for c in counted)
    means = np.concatenate([c[1] for c in counted])
    rng = np.random.default_rng(0)

    def draw():
        for b, p in zip(blocks, resolved):
            planets.draw_planets(b, model.stars, model.occurrence, p)

    buffer = np.empty(FLOOR_BUFFER)

    def floor():
        rng.poisson(means)
        for first in range(0, n_uniforms, FLOOR_BUFFER):
            rng.random(out=buffer[:min(FLOOR_BUFFER, n_uniforms - first)])

    draw_s, floor_s = np.inf, np.inf
    for _ in range(repeats):  # interleaved, so that both see the same machine
        draw_s = min(draw_s, best_of(draw, 1))
        floor_s = min(floor_s, best_of(floor, 1))
    return {
        "draw_ns_per_planet": draw_s / n_planets * 1e9,
        "floor_ns_per_planet": floor_s / n_planets * 1e9,
        "floor_ratio": draw_s / floor_s,
        "uniforms_per_planet": n_uniforms / n_planets,
        "poisson_per_planet": len(means) / n_planets,
        "planets_drawn": n_planets,
    }


# ---------------------------------------------------------------------------------------- detect


def bench_detect(model, block, repeats: int) -> dict:
    """Detection time per planet, band and grid point, as ``model.evaluate`` calls it."""
    batch = planets.draw_planets(block, model.stars, model.occurrence,
                                 params.resolve(model.priors, "priors", parameter_values(block, {})))
    points = list(model.grid_points())

    def detect():
        fresh = dataclasses.replace(batch)  # a new object: no concept cache carries over
        for point in points:
            for concept, section in zip(model.concepts, model.concept_sections):
                concept.detect(fresh, model.stars,
                               params.resolve(section, f"concepts.{concept.name}", parameter_values(block, point)))

    seconds = best_of(detect, repeats)
    n_channels = model.tally.n_channels
    return {
        "detect_ns_per_planet_channel": seconds / (len(batch) * len(points) * n_channels) * 1e9,
        "grid_points": len(points),
        "channels": n_channels,
    }


# ------------------------------------------------------------------------------------- reference


def _replicate(block, k: int):
    """The block's rows with other population seeds (base indices shifted far out of the design)."""
    return dataclasses.replace(block, base_index=block.base_index + (k + 1) * 10**9)


def bench_reference(model, rows, n_rows: int, replicates: int, repeats: int) -> dict:
    """Speed of the vectorised model against the plain loops, and their statistical agreement."""
    subset = rows.block(0, n_rows)
    started = time.perf_counter()
    reference = ref.reference_counts(model, subset)
    reference_s = time.perf_counter() - started
    reference_planets = int(reference["present"].sum())

    big = rows.block(0, min(rows.n_rows, max(n_rows, 64)))
    model_s = best_of(lambda: model.evaluate(big), repeats)
    model_planets = int(model.evaluate(big)["present"].sum())

    model_sum = sum(ref.totals(model.evaluate(_replicate(subset, k)), model.tally) for k in range(replicates))
    check = ref.agreement(ref.totals(reference, model.tally), model_sum, replicates)
    return {
        "reference_speedup": (reference_s / max(reference_planets, 1)) / (model_s / max(model_planets, 1)),
        "reference_us_per_planet": reference_s / max(reference_planets, 1) * 1e6,
        "model_us_per_planet": model_s / max(model_planets, 1) * 1e6,
        "reference_agreement": check,
    }


# --------------------------------------------------------------------------------------- engine


def _run(spec, client):
    """One fresh run into a temporary store; the run summary."""
    from sweep.engine import run_sweep

    with tempfile.TemporaryDirectory(prefix="sweep-bench-") as folder:
        return run_sweep(spec, output=Path(folder) / "cube.zarr", client=client, fresh=True, progress=False)


def bench_engine(spec, repeats: int, warm_up: bool = True) -> dict:
    """The engine's share of a run's wall time, and parallel efficiency on 1 and 2 workers.

    The first run is one as ``sweep run`` does it: ``run_sweep`` starts its own 2-worker cluster
    (while it builds the rows, the model and the store), the workers import the model's modules,
    and the model is transferred once. ``engine_overhead`` is the share of that run's wall time,
    from the first task submitted to the last block recorded, in which the workers are not in
    ``model.evaluate``: ``1 - evaluate_s / (2 wall_s)``. Writes and checksums, transfers,
    scheduling, task deserialisation, the first task's warm-up and the idle tail all count.
    ``run_startup_s`` is the rest of the call (cluster start-up, preparation, shut-down). Later
    runs on warm clusters give the walls of the parallel efficiency.
    """
    from sweep.engine import open_client, run_sweep

    walls = {}
    started = time.perf_counter()
    with tempfile.TemporaryDirectory(prefix="sweep-bench-") as folder:  # as `sweep run` does it
        cold = run_sweep(spec, output=Path(folder) / "cube.zarr", workers=2, fresh=True, progress=False)
    total_s = time.perf_counter() - started
    with open_client(workers=2) as client:
        walls[2] = min(_run(spec, client).wall_s for _ in range(repeats))
    with open_client(workers=1) as client:
        if warm_up:
            _run(spec, client)  # warm the worker (imports, first model transfer)
        walls[1] = min(_run(spec, client).wall_s for _ in range(repeats))
    return {
        "parallel_efficiency_2": walls[1] / (2.0 * walls[2]),
        "wall_1_worker_s": walls[1],
        "wall_2_workers_s": walls[2],
        "engine_overhead": 1.0 - cold.evaluate_s / (2.0 * cold.wall_s),
        "engine_write_share": cold.write_s / (2.0 * cold.wall_s),
        "run_startup_s": total_s - cold.wall_s,
        "run_wall_s": cold.wall_s,
        "run_evaluate_s": cold.evaluate_s,
        "run_write_s": cold.write_s,
        "task_evaluate_s_median": float(np.median(cold.task_evaluate_s)),
        "blocks": cold.blocks_computed,
    }


def _peak_rss_child(spec_path: str, base_rows: int, block_rows: int | None, workers: int) -> int:
    """(Child process) run the spec and return the peak summed RSS of this process tree [bytes]."""
    import psutil

    me = psutil.Process()
    peak, stop = [0], threading.Event()

    def sample():
        while not stop.is_set():
            total = 0
            for process in [me] + me.children(recursive=True):
                try:
                    total += process.memory_info().rss
                except psutil.Error:
                    pass
            peak[0] = max(peak[0], total)
            stop.wait(0.02)

    sampler = threading.Thread(target=sample, daemon=True)
    sampler.start()
    keys = {"base_rows": base_rows} | ({"block_rows": block_rows} if block_rows else {})
    from sweep.engine import open_client

    with open_client(workers=workers) as client:
        _run(spec_with(Path(spec_path), **keys), client)
    stop.set()
    sampler.join()
    return peak[0]


def bench_memory(spec_path: Path, base_rows: int, block_rows: int | None, workers: int = 2) -> dict:
    """Peak RSS of a run with ``8 base_rows`` over one with ``base_rows``, each in a child process."""
    peaks = {}
    for rows_ in (base_rows, 8 * base_rows):
        command = [sys.executable, str(Path(__file__).resolve()), "--child-memory", str(spec_path),
                   "--base-rows", str(rows_), "--workers", str(workers)]
        command += ["--block-rows", str(block_rows)] if block_rows else []
        done = subprocess.run(command, capture_output=True, text=True, check=True)
        peaks[rows_] = json.loads(done.stdout.strip().splitlines()[-1])["peak_rss_bytes"]
    return {
        "memory_ratio_8x": peaks[8 * base_rows] / peaks[base_rows],
        "peak_rss_small_mb": peaks[base_rows] / 2**20,
        "peak_rss_8x_mb": peaks[8 * base_rows] / 2**20,
        "memory_base_rows": [base_rows, 8 * base_rows],
        "memory_workers": workers,
    }


def bench_demo_cli(spec_path: Path) -> dict:
    """``sweep run SPEC --workers 2 --json`` into a new store, from a shell, timed end to end.

    ``engine_overhead_with_startup`` is the share of that whole wall time (interpreter start,
    imports, cluster start-up and shut-down included) not spent in ``model.evaluate`` per worker.
    """
    with tempfile.TemporaryDirectory(prefix="sweep-bench-") as folder:
        command = [sys.executable, "-m", "sweep", "run", str(spec_path), "--workers", "2", "--quiet", "--json",
                   "--output", str(Path(folder) / "demo.zarr")]
        started = time.perf_counter()
        done = subprocess.run(command, check=True, capture_output=True, cwd=folder, text=True)
        wall = time.perf_counter() - started
    summary = json.loads(done.stdout)
    return {"demo_wall_s": wall, "engine_overhead_with_startup": 1.0 - summary["evaluate_s"] / (2.0 * wall)}


# ------------------------------------------------------------------------------------------ main


def machine() -> dict:
    """What the figures came from."""
    cpu = platform.processor() or platform.machine()
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    return {"cpu": cpu, "cores": os.cpu_count(), "python": platform.python_version(), "numpy": np.__version__,
            "platform": platform.platform(), "load_average_1min": os.getloadavg()[0] if hasattr(os, "getloadavg") else None}


def run_all(spec_path: Path, quick: bool, block_rows: int | None = None) -> dict:
    """Every benchmark; ``quick`` shrinks them to a smoke run; ``block_rows`` overrides the spec's."""
    started = time.perf_counter()
    if quick:
        spec = spec_with(spec_path, base_rows=8, block_rows=8)
    else:
        spec = spec_with(spec_path, block_rows=block_rows) if block_rows else load_spec(spec_path)
    rows = build_rows(spec)
    model = spec.build_model()
    repeats = 1 if quick else 5
    rows_per_block = spec.run.block_rows
    n_draw_blocks = 1 if quick else min(4, spec.n_blocks)
    blocks = [rows.block(i, rows_per_block) for i in range(n_draw_blocks)]
    out = {"spec": str(spec_path), "quick": quick, "rows": spec.n_rows, "block_rows": rows_per_block,
           "stars": len(model.stars), "machine": machine()}
    sections = {
        "draw": lambda: bench_draw(model, blocks, 3 * repeats),
        "detect": lambda: bench_detect(model, blocks[0], repeats),
        "reference": lambda: bench_reference(model, rows, n_rows=2 if quick else 16, replicates=2 if quick else 8,
                                             repeats=repeats),
        "engine": lambda: bench_engine(spec_with(spec_path, base_rows=4, block_rows=8) if quick else spec,
                                       repeats=1 if quick else 2, warm_up=not quick),
        "memory": lambda: bench_memory(spec_path, base_rows=2 if quick else max(spec.run.base_rows // 8, 1),
                                       block_rows=8 if quick else block_rows, workers=1 if quick else 2),
        "demo": lambda: {"demo_wall_s": None} if quick or block_rows else bench_demo_cli(spec_path),
    }
    out["section_s"] = {}
    for name, section in sections.items():
        section_started = time.perf_counter()
        out |= section()
        out["section_s"][name] = round(time.perf_counter() - section_started, 2)
    out["benchmark_wall_s"] = time.perf_counter() - started
    return out


GOALS = {"floor_ratio": ("<=", 3.0), "reference_speedup": (">=", 100.0), "parallel_efficiency_2": (">=", 0.85),
         "memory_ratio_8x": ("<=", 1.25), "engine_overhead": ("<=", 0.10), "demo_wall_s": ("<=", 60.0)}


def table(result: dict) -> str:
    """The figures as aligned text, goals beside them."""
    lines = []
    for key, value in result.items():
        if isinstance(value, dict):
            value = json.dumps(value)
        elif isinstance(value, float):
            value = f"{value:.4g}"
        goal = GOALS.get(key)
        lines.append(f"{key:32s} {value}" + (f"   (goal {goal[0]} {goal[1]:g})" if goal else ""))
    return "\n".join(lines)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    parser.add_argument("--quick", action="store_true", help="tiny sizes (a smoke run, not figures)")
    parser.add_argument("--spec", type=Path, default=DEMO, help="sweep definition (default workflows/demo.toml)")
    parser.add_argument("--child-memory", metavar="SPEC", help=argparse.SUPPRESS)
    parser.add_argument("--base-rows", type=int, help=argparse.SUPPRESS)
    parser.add_argument("--block-rows", type=int, help="rows per block instead of the spec's")
    parser.add_argument("--workers", type=int, default=2, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child_memory:
        print(json.dumps({"peak_rss_bytes": _peak_rss_child(args.child_memory, args.base_rows, args.block_rows, args.workers)}))
        return 0
    result = run_all(args.spec.resolve(), args.quick, args.block_rows)
    print(json.dumps(result) if args.json else table(result))
    return 0


if __name__ == "__main__":
    sys.exit(main())
