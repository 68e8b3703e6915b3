"""The engine on real dask worker processes: identical cubes, killed workers, failing blocks."""

from __future__ import annotations

import threading
import time

import numpy as np
import pytest

import sweep
from sweep import store
from sweep.design import build_rows
from sweep.engine import WORKER_ENVIRONMENT, RunError, open_client, run_sweep
from sweep.spec import load_spec

from conftest import ExternalCluster
from slowmodel import FailingModel, KillOnceModel, SlowModel

pytestmark = pytest.mark.timeout(300)


def serial_cube(spec):
    """Every variable of the cube, evaluated block by block in this process (no dask, no store)."""
    rows, model = build_rows(spec), spec.build_model()
    blocks = [model.evaluate(rows.block(i, spec.run.block_rows)) for i in range(spec.n_blocks)]
    return {name: np.concatenate([block[name] for block in blocks]) for name in blocks[0]}


def assert_cube_equals(path, expected):
    ds = sweep.open_cube(path)
    assert sorted(ds.data_vars) == sorted(expected)
    for name, values in expected.items():
        np.testing.assert_array_equal(ds[name].values, values)  # bit for bit


@pytest.fixture(scope="module")
def client():
    """A local cluster of two worker processes, as ``sweep run`` starts by default."""
    with open_client(workers=2) as client:
        yield client


def test_local_workers_start_with_the_engines_malloc_settings(client):
    # distributed's nanny would set MALLOC_TRIM_THRESHOLD_=65536 (its distributed.yaml)
    import os

    seen = client.run(lambda: {key: os.environ.get(key) for key in WORKER_ENVIRONMENT})
    assert len(seen) == 2 and all(env == WORKER_ENVIRONMENT for env in seen.values())


def test_two_workers_and_two_block_sizes_give_the_same_cube(client, tmp_path, ishigami_spec):
    small = load_spec(ishigami_spec(block_rows=16))
    large = load_spec(ishigami_spec(block_rows=40))
    assert small.hash != large.hash and small.n_rows == large.n_rows == 160
    expected = serial_cube(small)
    first = run_sweep(small, output=tmp_path / "small.zarr", client=client, progress=False)
    second = run_sweep(large, output=tmp_path / "large.zarr", client=client, progress=False)
    assert (first.blocks_computed, first.blocks_skipped, first.rows_computed) == (10, 0, 160)
    assert (second.blocks_computed, second.blocks_total) == (4, 4)
    assert len(first.task_evaluate_s) == 10 and all(t >= 0 for t in first.task_evaluate_s + first.task_write_s)
    assert first.evaluate_s == pytest.approx(sum(first.task_evaluate_s))
    assert_cube_equals(tmp_path / "small.zarr", expected)
    assert_cube_equals(tmp_path / "large.zarr", expected)
    again = run_sweep(small, output=tmp_path / "small.zarr", client=client, progress=False)
    assert (again.blocks_computed, again.blocks_skipped) == (0, 10)


def test_worker_killed_mid_run_changes_nothing(client, tmp_path, ishigami_spec):
    spec = load_spec(ishigami_spec(base_rows=64, block_rows=16))
    marker = tmp_path / "killed"
    model = KillOnceModel(spec.build_model(), block_index=6, marker=marker, delay_s=0.05)
    summary = run_sweep(spec, output=tmp_path / "c.zarr", client=client, progress=False, model=model)
    assert marker.exists()  # a worker really died with SIGKILL in block 6
    assert summary.blocks_computed == spec.n_blocks == 20
    assert_cube_equals(tmp_path / "c.zarr", serial_cube(spec))
    assert store.verify(tmp_path / "c.zarr")["damaged"] == []


def test_block_that_keeps_failing_stops_the_run_naming_it(client, tmp_path, ishigami_spec):
    spec = load_spec(ishigami_spec())
    counter = tmp_path / "failures"
    model = FailingModel(spec.build_model(), bad_block=2, counter=counter)
    with pytest.raises(RunError) as caught:
        run_sweep(spec, output=tmp_path / "c.zarr", client=client, progress=False, model=model, max_retries=2)
    message = str(caught.value)
    assert "block 2 (rows 32..47) failed 3 times" in message
    assert "first error: ValueError: failure number 1 of block 2" in message
    assert "\n" not in message and caught.value.exit_status == 1
    assert counter.read_text() == "xxx"  # one try and two retries
    report = store.verify(tmp_path / "c.zarr")
    assert report["damaged"] == [] and 2 in report["missing"]


def test_failed_write_is_not_recorded_and_damages_nothing(client, tmp_path, ishigami_spec):
    spec = load_spec(ishigami_spec())
    path = tmp_path / "c.zarr"
    rows, model = build_rows(spec), spec.build_model()
    store.create_or_resume(path, spec, rows, model).close()
    blocker = path / "y" / "c" / "3"
    blocker.mkdir(parents=True)  # where block 3's chunk file goes: writing it fails
    (blocker / "in-the-way").write_text("x")
    with pytest.raises(RunError, match=r"block 3 \(rows 48..63\) failed 2 times; first error: \w*Error"):
        run_sweep(spec, output=path, client=client, progress=False, max_retries=1)
    report = store.verify(path)
    assert report["damaged"] == [] and 3 in report["missing"]
    (blocker / "in-the-way").unlink()
    blocker.rmdir()
    summary = run_sweep(spec, output=path, client=client, progress=False)
    assert summary.blocks_computed == len(report["missing"]) and summary.blocks_skipped == len(report["blocks_ok"])
    assert_cube_equals(path, serial_cube(spec))


def test_killed_scheduler_stops_the_run_and_a_new_run_resumes(client, tmp_path, ishigami_spec):
    spec = load_spec(ishigami_spec(base_rows=32, block_rows=8))
    path = tmp_path / "c.zarr"
    cluster = ExternalCluster(n_workers=1)
    try:
        def kill_when_started():
            deadline = time.monotonic() + 120
            while time.monotonic() < deadline:
                if path.exists() and (path / store.COMPLETION).exists() and store.status(path)["blocks_done"] >= 2:
                    cluster.scheduler.kill()
                    return
                time.sleep(0.05)

        killer = threading.Thread(target=kill_when_started, daemon=True)
        killer.start()
        model = SlowModel(spec.build_model(), delay_s=0.2)
        with pytest.raises(RunError, match="lost the connection to the dask scheduler .*run the same command to resume"):
            run_sweep(spec, output=path, progress=False, model=model, scheduler=cluster.address)
        killer.join()
    finally:
        cluster.close()
    info = store.status(path)
    assert 2 <= info["blocks_done"] < info["blocks_total"] and info["running"] is None
    summary = run_sweep(spec, output=path, client=client, progress=False)
    assert summary.blocks_computed == info["blocks_total"] - info["blocks_done"]
    assert_cube_equals(path, serial_cube(spec))
