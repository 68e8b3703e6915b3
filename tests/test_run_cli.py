"""``sweep plan``, ``run``, ``status`` and ``verify`` on the command line, with real processes."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

import sweep
from sweep import store
from sweep.cli import main
from sweep.design import build_rows
from sweep.spec import Spec, load_spec

from slowmodel import Wrapped

pytestmark = pytest.mark.timeout(300)

TESTS = Path(__file__).resolve().parent


def serial_y(spec_path):
    """``y`` of every row, evaluated block by block in this process (no dask, no store)."""
    spec = load_spec(spec_path)
    rows, model = build_rows(spec), spec.build_model()
    return np.concatenate([model.evaluate(rows.block(i, spec.run.block_rows))["y"] for i in range(spec.n_blocks)])


def run_json(capsys, *argv):
    status = main(list(argv))
    out = capsys.readouterr().out
    assert status == 0, out
    return json.loads(out)


def test_plan_reports_size_and_calibrated_time(capsys, ishigami_spec):
    spec_path = ishigami_spec()
    assert main(["plan", str(spec_path)]) == 0
    text = capsys.readouterr().out
    assert "rows        160" in text and "blocks      10 of 16 rows" in text and "CPU time" in text
    assert "planets" not in text  # the Ishigami function has no planets
    plan = run_json(capsys, "plan", str(spec_path), "--json")
    assert (plan["rows"], plan["blocks"], plan["grid_points"], plan["block_rows"]) == (160, 10, 1, 16)
    assert plan["store_bytes"] == 160 * 8 + 160 * 8 * (2 + 3)  # y, base_index, block label, 3 factors
    assert plan["cpu_s"] > 0 and plan["cpu_s"] == pytest.approx(plan["cpu_s_per_row"] * 160)
    assert plan["store"] == str(Path("results") / "ish.zarr")
    assert "expected_planets_per_row" not in plan


def test_plan_shows_expected_planets_when_the_model_has_them(capsys, ishigami_spec, monkeypatch):
    class WithPlanets(Wrapped):
        def evaluate(self, block):
            return self.inner.evaluate(block)

        def expected_planets_per_row(self):
            return 2.5

    build_model = Spec.build_model
    monkeypatch.setattr(Spec, "build_model", lambda self: WithPlanets(build_model(self)))
    plan = run_json(capsys, "plan", str(ishigami_spec()), "--json")
    assert plan["expected_planets_per_row"] == 2.5


def test_run_with_one_worker_then_status_and_verify(capsys, tmp_path, ishigami_spec):
    spec_path, out = ishigami_spec(), tmp_path / "one.zarr"
    summary = run_json(capsys, "run", str(spec_path), "--output", str(out), "--workers", "1", "--quiet", "--json")
    assert (summary["blocks_computed"], summary["blocks_skipped"], summary["blocks_total"]) == (10, 0, 10)
    np.testing.assert_array_equal(sweep.open_cube(out)["y"].values, serial_y(spec_path))
    info = run_json(capsys, "status", str(out), "--json")
    assert (info["blocks_done"], info["blocks_total"], info["name"], info["mode"]) == (10, 10, "ish", "saltelli")
    assert info["last_run"]["outcome"] == "complete" and info["last_run"]["blocks_computed"] == 10
    assert main(["status", str(out)]) == 0
    assert "blocks done  10 / 10" in capsys.readouterr().out
    assert main(["verify", str(out)]) == 0
    assert "10/10 blocks intact" in capsys.readouterr().out


def test_external_scheduler_and_a_truncated_chunk_repaired(capsys, tmp_path, ishigami_spec, external_cluster):
    spec_path, out = ishigami_spec(), tmp_path / "ext.zarr"
    common = ["--output", str(out), "--scheduler", external_cluster.address, "--quiet", "--json"]
    assert run_json(capsys, "run", str(spec_path), *common)["blocks_computed"] == 10
    expected = serial_y(spec_path)
    np.testing.assert_array_equal(sweep.open_cube(out)["y"].values, expected)
    chunk = out / "y" / "c" / "4"
    chunk.write_bytes(chunk.read_bytes()[:5])
    assert main(["verify", str(out)]) == 1
    text = capsys.readouterr().out
    assert "block 4 (rows 64..79): damaged" in text and "9/10 blocks intact" in text
    repaired = run_json(capsys, "run", str(spec_path), *common)
    assert (repaired["blocks_computed"], repaired["blocks_skipped"]) == (1, 9)
    assert main(["verify", str(out)]) == 0
    np.testing.assert_array_equal(sweep.open_cube(out)["y"].values, expected)


def test_killed_run_command_resumes_with_the_same_cube(capsys, tmp_path, ishigami_spec, external_cluster):
    spec_path, out = ishigami_spec(base_rows=64, block_rows=8), tmp_path / "killed.zarr"
    common = ["--output", str(out), "--scheduler", external_cluster.address]
    process = subprocess.Popen(
        [sys.executable, str(TESTS / "slowmodel.py"), "0.15", "run", str(spec_path), *common, "--quiet"],
        stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, start_new_session=True,
    )
    try:
        deadline = time.monotonic() + 120
        while not ((out / store.COMPLETION).exists() and store.status(out)["blocks_done"] >= 4):
            assert process.poll() is None, process.stderr.read().decode()
            assert time.monotonic() < deadline
            time.sleep(0.05)
        info = run_json(capsys, "status", str(out), "--json")  # while the run writes
        assert info["running"]["pid"] == process.pid and info["blocks_total"] == 40
        assert main(["run", str(spec_path), *common]) == 2
        assert "is being written by another sweep run (pid" in capsys.readouterr().err
        os.killpg(process.pid, signal.SIGKILL)
        process.wait()
    finally:
        if process.poll() is None:
            os.killpg(process.pid, signal.SIGKILL)
            process.wait()
        process.stderr.close()
    before = store.status(out)
    assert 4 <= before["blocks_done"] < 40 and before["running"] is None
    summary = run_json(capsys, "run", str(spec_path), *common, "--quiet", "--json")
    assert summary["blocks_skipped"] == before["blocks_done"]
    assert summary["blocks_computed"] == 40 - before["blocks_done"]
    np.testing.assert_array_equal(sweep.open_cube(out)["y"].values, serial_y(spec_path))
    assert run_json(capsys, "status", str(out), "--json")["last_run"]["blocks_computed"] == summary["blocks_computed"]


@pytest.mark.parametrize("argv, message", [
    (["status", "{tmp}/absent.zarr"], "absent.zarr: no such store"),
    (["verify", "{tmp}"], "is not a sweep store"),
    (["run", "{spec}", "--workers", "2", "--scheduler", "tcp://127.0.0.1:1"], "--workers sets the local cluster"),
    (["run", "{spec}", "--output", "{tmp}"], "is a folder that is not a sweep store"),
])
def test_command_errors_are_one_line(capsys, tmp_path, ishigami_spec, argv, message):
    spec_path = ishigami_spec()
    (tmp_path / "notes.txt").write_text("not a store")
    argv = [arg.format(tmp=tmp_path, spec=spec_path) for arg in argv]
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1 and err.startswith(f"sweep {argv[0]}: error: ")
