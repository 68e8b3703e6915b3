"""The zarr cube store: layout, block writes, completion record, lock, resume and verify."""

from __future__ import annotations

import json
import os
import socket
import subprocess
import sys
import time

import numpy as np
import psutil
import pytest

import sweep
from sweep import runlock, store
from sweep.blocks import OutputVariable
from sweep.design import build_rows
from sweep.errors import UserInputError
from sweep.spec import load_spec

from conftest import ISHIGAMI_MODEL

pytestmark = pytest.mark.timeout(120)

MONTE_CARLO = """\
[run]
name = "mc"
mode = "monte-carlo"
rows = 100
seed = 5
block_rows = 32

""" + ISHIGAMI_MODEL


class CountsModel:
    """Unsigned counts along a category axis: row ``i`` counts ``base_index + k`` in bin ``k``."""

    def outputs(self):
        return [OutputVariable("n", ("bin",), "uint32", "planets", "test counts")]

    def coords(self):
        return {"bin": (np.array(["small", "large", "huge"]), {"units": "1", "description": "size bin"})}

    def evaluate(self, block):
        return {"n": (block.base_index[:, None] + np.arange(3)).astype(np.uint64)}


def setup(path, spec_path, model=None):
    spec = load_spec(spec_path)
    rows = build_rows(spec)
    model = model or spec.build_model()
    return spec, rows, model, store.create_or_resume(path, spec, rows, model)


def write_all(cube, rows, model, blocks=None):
    for index in range(cube.n_blocks) if blocks is None else blocks:
        block = rows.block(index, cube.block_rows)
        cube.record_done(index, cube.write_block(block, model.evaluate(block)))


def test_allocated_cube_has_layout_coordinates_and_provenance(tmp_path, ishigami_spec):
    spec, rows, model, cube = setup(tmp_path / "c.zarr", ishigami_spec())
    cube.close()
    ds = sweep.open_cube(tmp_path / "c.zarr")
    assert ds.sizes["row"] == spec.n_rows == 160
    assert ds["y"].dims == ("row",) and ds["y"].dtype == np.float64
    assert ds["y"].chunks == ((16,) * 10,)  # one zarr chunk per block
    assert ds["y"].attrs["units"] == "1" and "Ishigami" in ds["y"].attrs["description"]
    assert np.isnan(ds["y"].values).all()  # nothing written yet: the float fill value
    labels = ds["block"].values.astype(str)
    assert list(labels[[0, 32, 64, 96, 128]]) == ["A", "B", "AB:inputs.x1", "AB:inputs.x2", "AB:inputs.x3"]
    np.testing.assert_array_equal(ds["base_index"].values, rows.base_index)
    for name in ("inputs.x1", "inputs.x2", "inputs.x3"):
        np.testing.assert_array_equal(ds[name].values, rows.factor_values[name])
        assert ds[name].attrs["units"] == "1"
    attrs = ds.attrs
    assert attrs["spec_hash"] == spec.hash and attrs["spec_text"] == spec.text
    assert attrs["sweep_version"] == sweep.__version__
    assert (attrs["mode"], attrs["seed"], attrs["base_rows"], attrs["block_rows"]) == ("saltelli", 20261202, 32, 16)
    assert [f["name"] for f in json.loads(attrs["factors"])] == ["inputs.x1", "inputs.x2", "inputs.x3"]
    assert json.loads(attrs["sobol_inputs"]) == ["inputs.x1", "inputs.x2", "inputs.x3"]
    assert json.loads(attrs["grid_axes"]) == []
    assert attrs["created"]


def test_counts_are_unsigned_with_category_coordinates(tmp_path, ishigami_spec):
    model = CountsModel()
    spec, rows, model, cube = setup(tmp_path / "c.zarr", ishigami_spec(), model)
    write_all(cube, rows, model, blocks=[0, 9])
    cube.close()
    ds = sweep.open_cube(tmp_path / "c.zarr")
    assert ds["n"].dims == ("row", "bin") and ds["n"].dtype == np.uint32
    assert list(ds["bin"].values.astype(str)) == ["small", "large", "huge"]
    assert ds["bin"].attrs["description"] == "size bin"
    values = ds["n"].values
    np.testing.assert_array_equal(values[:16], model.evaluate(rows.block(0, 16))["n"])
    assert (values[16:144] == 0).all()  # blocks not written read as the fill value 0


def test_blocks_written_read_back_with_their_checksums(tmp_path, ishigami_spec):
    spec, rows, model, cube = setup(tmp_path / "c.zarr", ishigami_spec())
    write_all(cube, rows, model)
    done = cube.done_blocks()
    cube.close()
    assert sorted(done) == list(range(10))
    ds = sweep.open_cube(tmp_path / "c.zarr")
    expected = np.concatenate([model.evaluate(rows.block(i, 16))["y"] for i in range(10)])
    np.testing.assert_array_equal(ds["y"].values, expected)  # produced by this code, bit for bit
    for index in range(10):
        assert done[index] == store.block_checksum([expected[index * 16:(index + 1) * 16]])


def test_checksum_depends_on_every_value_and_the_order():
    a, b = np.arange(6.0), np.arange(4, dtype=np.uint32)
    assert store.block_checksum([a, b]) == store.block_checksum([a.copy(), b.copy()])
    changed = a.copy()
    changed[3] = np.nextafter(changed[3], 10.0)
    assert store.block_checksum([changed, b]) != store.block_checksum([a, b])
    assert store.block_checksum([b, a]) != store.block_checksum([a, b])


def test_monte_carlo_last_block_is_shorter(tmp_path):
    spec_path = tmp_path / "mc.toml"
    spec_path.write_text(MONTE_CARLO)
    spec, rows, model, cube = setup(tmp_path / "mc.zarr", spec_path)
    assert cube.n_blocks == 4 and cube.block_range(3) == (96, 100)
    write_all(cube, rows, model)
    cube.close()
    ds = sweep.open_cube(tmp_path / "mc.zarr")
    assert ds.attrs["rows"] == 100 and "base_rows" not in ds.attrs
    assert not np.isnan(ds["y"].values).any()
    assert store.verify(tmp_path / "mc.zarr")["damaged"] == []


def test_write_block_refuses_wrong_shapes_and_boundaries(tmp_path, ishigami_spec):
    spec, rows, model, cube = setup(tmp_path / "c.zarr", ishigami_spec())
    block = rows.block(1, 16)
    with pytest.raises(ValueError, match="shape"):
        cube.write_block(block, {"y": np.zeros(15)})
    with pytest.raises(ValueError, match="no y"):
        cube.write_block(block, {"z": np.zeros(16)})
    with pytest.raises(ValueError, match="rows"):
        cube.write_block(rows.block(1, 8), {"y": np.zeros(8)})
    cube.close()


def test_resume_keeps_blocks_and_refuses_another_spec(tmp_path, ishigami_spec):
    path = tmp_path / "c.zarr"
    spec, rows, model, cube = setup(path, ishigami_spec())
    write_all(cube, rows, model, blocks=[0, 1, 2])
    cube.close()
    with store.create_or_resume(path, spec, rows, model) as again:
        assert sorted(again.done_blocks()) == [0, 1, 2]
    other = load_spec(ishigami_spec(name="ish", block_rows=32))  # another block size: another hash
    other_rows = build_rows(other)
    with pytest.raises(UserInputError, match="another sweep definition.*--fresh") as caught:
        store.create_or_resume(path, other, other_rows, model)
    assert "\n" not in str(caught.value)
    assert sorted(store.status(path)["blocks_done"] for _ in [0]) == [3]  # untouched
    with store.create_or_resume(path, other, other_rows, model, fresh=True) as fresh:
        assert fresh.done_blocks() == {} and fresh.n_blocks == 5
    ds = sweep.open_cube(path)
    assert ds.attrs["spec_hash"] == other.hash and np.isnan(ds["y"].values).all()


def test_refuses_paths_that_are_not_stores(tmp_path, ishigami_spec):
    spec = load_spec(ishigami_spec())
    rows, model = build_rows(spec), spec.build_model()
    folder = tmp_path / "papers"
    folder.mkdir()
    (folder / "draft.txt").write_text("keep me")
    for path in (folder, folder / "draft.txt"):
        for fresh in (False, True):
            with pytest.raises(UserInputError, match="choose another output path"):
                store.create_or_resume(path, spec, rows, model, fresh=fresh)
    assert (folder / "draft.txt").read_text() == "keep me"
    for command in (store.open_cube, store.status, store.verify):
        with pytest.raises(UserInputError, match="not a sweep store"):
            command(folder)
        with pytest.raises(UserInputError, match="no such store"):
            command(tmp_path / "absent.zarr")


def _lock_record(pid, heartbeat=None):
    return json.dumps({
        "pid": pid, "host": socket.gethostname(), "process_start": psutil.Process(pid).create_time(),
        "started": "2026-01-01T00:00:00+00:00", "heartbeat": heartbeat or time.time(),
    })


def test_lock_refuses_a_live_writer_and_takes_over_a_dead_or_silent_one(tmp_path, ishigami_spec):
    path = tmp_path / "c.zarr"
    spec, rows, model, cube = setup(path, ishigami_spec())
    assert store.status(path)["running"]["pid"] == os.getpid()
    cube.close()
    assert not (path / runlock.LOCK).exists() and store.status(path)["running"] is None
    sleeper = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        (path / runlock.LOCK).write_text(_lock_record(sleeper.pid))
        with pytest.raises(UserInputError, match=f"being written by another sweep run \\(pid {sleeper.pid}"):
            store.create_or_resume(path, spec, rows, model)
        with pytest.raises(UserInputError, match="being written"):
            store.verify(path)
        assert store.status(path)["running"]["pid"] == sleeper.pid
        # a live process whose heartbeat stopped long ago (a hung run, or another host's)
        (path / runlock.LOCK).write_text(_lock_record(sleeper.pid, heartbeat=time.time() - 2 * runlock.STALE_AFTER_S))
        store.create_or_resume(path, spec, rows, model).close()
        (path / runlock.LOCK).write_text(_lock_record(sleeper.pid))
    finally:
        sleeper.kill()
        sleeper.wait()
    # the writer was killed: its lock is left behind, with a pid that no longer runs
    assert store.status(path)["running"] is None
    with store.create_or_resume(path, spec, rows, model) as cube:
        assert json.loads((path / runlock.LOCK).read_text())["pid"] == os.getpid()


def test_verify_names_a_truncated_block_and_the_next_write_repairs_it(tmp_path, ishigami_spec):
    path = tmp_path / "c.zarr"
    spec, rows, model, cube = setup(path, ishigami_spec())
    write_all(cube, rows, model, blocks=range(8))
    cube.close()
    chunk = path / "y" / "c" / "5"
    chunk.write_bytes(chunk.read_bytes()[:7])
    report = store.verify(path)
    assert [d["block"] for d in report["damaged"]] == [5]
    assert report["damaged"][0]["rows"] == [80, 96] and "unreadable" in report["damaged"][0]["problem"]
    assert report["missing"] == [8, 9] and report["blocks_ok"] == [0, 1, 2, 3, 4, 6, 7]
    with store.create_or_resume(path, spec, rows, model) as cube:
        assert sorted(cube.done_blocks()) == [0, 1, 2, 3, 4, 6, 7]  # the record forgot block 5
        write_all(cube, rows, model, blocks=[5, 8, 9])
    assert store.verify(path)["damaged"] == [] and store.verify(path)["missing"] == []


def test_verify_finds_changed_values(tmp_path, ishigami_spec):
    path = tmp_path / "c.zarr"
    spec, rows, model, cube = setup(path, ishigami_spec())
    write_all(cube, rows, model, blocks=[0, 1])
    block = rows.block(1, 16)
    cube.write_block(block, {"y": model.evaluate(block)["y"] + 1.0})  # overwritten after it was recorded
    cube.close()
    report = store.verify(path)
    assert report["damaged"] == [{"block": 1, "rows": [16, 32], "problem": "checksum differs from the completion record"}]


def test_torn_record_line_and_status(tmp_path, ishigami_spec):
    path = tmp_path / "c.zarr"
    spec, rows, model, cube = setup(path, ishigami_spec())
    write_all(cube, rows, model, blocks=[0, 3])
    cube.log_run(event="start", run="r1")
    with open(path / store.COMPLETION, "a") as stream:
        stream.write('{"block": 4, "chec')  # a client killed in the middle of appending
    assert sorted(cube.done_blocks()) == [0, 3]
    cube.close()
    info = store.status(path)
    assert (info["blocks_done"], info["blocks_total"], info["rows"], info["rows_done"]) == (2, 10, 160, 32)
    assert (info["name"], info["mode"], info["spec_hash"]) == ("ish", "saltelli", spec.hash)
    assert info["last_write"] and info["started"] and info["running"] is None



def test_interrupted_allocation_is_allocated_again(tmp_path, ishigami_spec):
    path = tmp_path / "c.zarr"
    spec, rows, model, cube = setup(path, ishigami_spec())
    cube.close()
    (path / store.COMPLETION).unlink()  # what a run killed while allocating leaves
    with pytest.raises(UserInputError, match="not a sweep store"):
        store.status(path)
    with store.create_or_resume(path, spec, rows, model) as cube:
        write_all(cube, rows, model, blocks=[0])
    assert store.status(path)["blocks_done"] == 1
