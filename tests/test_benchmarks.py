"""Smoke run of benchmarks/run.py at tiny sizes, so that the benchmark cannot rot.

Benchmarks are not tests: nothing here asserts a time or a speed ratio. The run must finish, print
one JSON object with every figure of issue 8, and its reference loop must agree with the model.
"""

import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from benchmarks import reference  # noqa: E402

FIGURES = ["draw_ns_per_planet", "floor_ratio", "detect_ns_per_planet_channel", "reference_speedup",
           "parallel_efficiency_2", "memory_ratio_8x", "engine_overhead"]


@pytest.fixture(scope="module")
def quick_run():
    done = subprocess.run([sys.executable, str(ROOT / "benchmarks" / "run.py"), "--quick", "--json"],
                          capture_output=True, text=True, timeout=600, cwd=ROOT)
    assert done.returncode == 0, done.stderr[-2000:]
    lines = done.stdout.strip().splitlines()
    assert len(lines) == 1  # one JSON object, nothing else on stdout
    return json.loads(lines[0])


@pytest.mark.slow
def test_quick_run_prints_every_figure(quick_run):
    for key in FIGURES:
        assert isinstance(quick_run[key], float) and math.isfinite(quick_run[key]) and quick_run[key] > 0, key
    assert quick_run["quick"] is True and quick_run["demo_wall_s"] is None
    # the draw consumes 10 uniforms per candidate and keeps a fraction of them (produced by this code)
    assert quick_run["uniforms_per_planet"] > 10.0
    assert quick_run["planets_drawn"] > 0 and quick_run["blocks"] > 0


@pytest.mark.slow
def test_quick_run_reference_agrees_with_the_model(quick_run):
    check = quick_run["reference_agreement"]
    assert check["tested"] > 0 and check["reference_planets"] > 0
    assert check["agree"], check


def test_agreement_rejects_a_model_that_counts_twice_as_many():
    # Poisson totals (fixed seed): a reference with half the model's mean must fail the exact binomial test
    rng = np.random.default_rng(3)
    model_sum = rng.poisson(40.0 * 4, size=(10, 3))  # 4 replicates of mean 40 per row
    same = rng.poisson(40.0, size=(10, 3))
    half = rng.poisson(20.0, size=(10, 3))
    assert reference.agreement(same, model_sum, replicates=4)["agree"]
    assert not reference.agreement(half, model_sum, replicates=4)["agree"]
