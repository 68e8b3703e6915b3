"""The result cube on disk: allocate, write a block, completion record, checksums, lock, resume.

A store is one zarr (format 3) group, laid out as DEVELOPERS.md "The cube" says and allocated in
full before any task runs: every variable of the model (chunks of ``block_rows`` along ``row``,
whole along the other dimensions), the row coordinates (``block``, ``base_index`` and one per
factor) and the provenance in the attributes. Tasks write their block into exactly its own chunk
(:meth:`CubeStore.write_block`) and return a checksum of what they wrote; only the client appends
that checksum to the completion record, after the task has finished. Beside the zarr arrays the
store folder holds three small files of its own:

``completion.jsonl``
    one JSON line per finished block: ``{"block", "checksum", "at"}``. Its presence marks a fully
    allocated store; a block is done when (and only when) it has a line here.
``runs.jsonl``
    one JSON line per start and end of ``sweep run`` (times, blocks computed and skipped).
``run.lock``
    the writer's pid, host and heartbeat (:class:`sweep.runlock.RunLock`): a live writer refuses a
    second one; a dead or silent one's lock is taken over.

This is the only module that imports zarr.
"""

from __future__ import annotations

import asyncio
import contextlib
import datetime as _dt
import functools
import hashlib
import json
import shutil
import warnings
from pathlib import Path

import numpy as np

from sweep.errors import UserInputError
from sweep.runlock import LOCK, RunLock, write_atomic

COMPLETION = "completion.jsonl"
RUNS = "runs.jsonl"

#: zarr arrays open for writing in this process, by (store path, spec hash).
_WRITABLE_ARRAYS: dict[tuple[str, str], dict] = {}


def now_iso() -> str:
    """The current UTC time, ISO 8601 with seconds."""
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


def block_checksum(arrays) -> str:
    """BLAKE2b (128 bit) over the bytes of each array, in the order given (little-endian, C order)."""
    digest = hashlib.blake2b(digest_size=16)
    for array in arrays:
        array = np.asarray(array)
        digest.update(np.ascontiguousarray(array, dtype=array.dtype.newbyteorder("<")).tobytes())
    return digest.hexdigest()


@contextlib.contextmanager
def _quiet_zarr():
    """Silence zarr's notes about our own bookkeeping files and its consolidated-metadata caveat."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=".*not recognized as a component of a Zarr hierarchy.*")
        warnings.filterwarnings("ignore", message=".*[Cc]onsolidated metadata.*")
        warnings.filterwarnings("ignore", message=".*does not have a Zarr V3 specification.*")
        yield


def _read_jsonl(path: Path) -> list[dict]:
    """The JSON lines of a file; a torn last line (a writer killed mid-append) is skipped."""
    try:
        text = path.read_text()
    except FileNotFoundError:
        return []
    entries = []
    for line in text.splitlines():
        try:
            entry = json.loads(line)
        except json.JSONDecodeError:
            continue
        if isinstance(entry, dict):
            entries.append(entry)
    return entries


def _append_jsonl(path: Path, entry: dict) -> None:
    with open(path, "a", encoding="utf-8") as stream:
        stream.write(json.dumps(entry, sort_keys=True) + "\n")
        stream.flush()


# --------------------------------------------------------------------------------------- cube


class CubeStore:
    """An allocated store: what tasks need to write blocks, and the client's completion record.

    Small and picklable (the lock stays with the client). Created by :func:`create_or_resume`.

    Attributes
    ----------
    path : str
        The store folder.
    n_rows, block_rows, n_blocks : int
        Rows of the cube, rows per block (= chunk along ``row``) and number of blocks.
    variables : list of (name, dtype, shape after row)
        The model's outputs, in the order the checksum covers them.
    spec_hash : str
        Hash of the sweep definition that made the store.
    """

    def __init__(self, path, n_rows, block_rows, variables, spec_hash, lock=None):
        self.path = str(path)
        self.n_rows = int(n_rows)
        self.block_rows = int(block_rows)
        self.n_blocks = -(-self.n_rows // self.block_rows)
        self.variables = [(str(name), str(dtype), tuple(int(n) for n in shape)) for name, dtype, shape in variables]
        self.spec_hash = spec_hash
        self._lock = lock

    def __getstate__(self):
        state = dict(self.__dict__)
        state["_lock"] = None
        return state

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def close(self) -> None:
        """Release the writer's lock (client side)."""
        if self._lock is not None:
            self._lock.release()
            self._lock = None

    def block_range(self, index: int) -> tuple[int, int]:
        """First row and one past the last row of a block."""
        start = index * self.block_rows
        return start, min(start + self.block_rows, self.n_rows)

    # -- worker side

    def write_block(self, block, arrays: dict) -> str:
        """Write one block's arrays into its own chunk of every variable; return their checksum.

        Parameters
        ----------
        block : sweep.blocks.RowBlock
            The block (its ``start``/``stop`` must be this store's block boundaries).
        arrays : dict of str to ndarray
            Every output variable, shape ``(len(block), *dims)``.
        """
        start, stop = self.block_range(block.index)
        if (block.start, block.stop) != (start, stop):
            raise ValueError(f"block {block.index} spans rows {block.start}..{block.stop}, the store's {start}..{stop}")
        missing = [name for name, _, _ in self.variables if name not in arrays]
        if missing:
            raise ValueError(f"the model returned no {', '.join(missing)} for block {block.index}")
        values = []
        for name, dtype, shape in self.variables:
            array = np.asarray(arrays[name])
            if array.shape != (stop - start, *shape):
                raise ValueError(
                    f"the model returned {name} of shape {array.shape} for block {block.index}; "
                    f"the cube expects {(stop - start, *shape)}"
                )
            values.append(np.ascontiguousarray(array, dtype=dtype))
        checksum = _checksum_thread().submit(block_checksum, values)  # overlaps the chunk writes
        _write_chunks(self._writable_arrays(), start, stop, values)
        return checksum.result()

    def _writable_arrays(self) -> dict:
        """The zarr arrays of the variables, opened once per process (tasks unpickle their own
        CubeStore, so the cache is the module's). The spec hash in the key fixes the variables,
        shapes and chunks, so a store allocated again from the same spec is written correctly."""
        key = (self.path, self.spec_hash)
        arrays = _WRITABLE_ARRAYS.get(key)
        if arrays is None:
            group = self._group("r+")
            arrays = _WRITABLE_ARRAYS[key] = {name: group[name] for name, _, _ in self.variables}  # checksum order
        return arrays

    def _group(self, mode: str):
        import zarr

        with _quiet_zarr():
            return zarr.open_group(self.path, mode=mode, use_consolidated=True)

    def read_checksum(self, index: int) -> str:
        """Checksum of a block as it is on disk now (raises if a chunk cannot be read)."""
        start, stop = self.block_range(index)
        group = self._group("r")
        return block_checksum([np.asarray(group[name][start:stop], dtype=dtype) for name, dtype, _ in self.variables])

    # -- client side

    def record_done(self, block_index: int, checksum: str) -> None:
        """Append a finished block to the completion record (client only, after its task ended)."""
        _append_jsonl(Path(self.path) / COMPLETION, {"block": int(block_index), "checksum": checksum, "at": now_iso()})

    def done_blocks(self) -> dict[int, str]:
        """Finished blocks and their checksums, from the completion record."""
        return _done_blocks(Path(self.path), self.n_blocks)

    def log_run(self, **entry) -> None:
        """Append one event (``event="start"`` or ``"end"`` and figures) to ``runs.jsonl``."""
        _append_jsonl(Path(self.path) / RUNS, {"at": now_iso(), **entry})


def _done_blocks(path: Path, n_blocks: int) -> dict[int, str]:
    done = {}
    for entry in _read_jsonl(path / COMPLETION):
        block, checksum = entry.get("block"), entry.get("checksum")
        if isinstance(block, int) and 0 <= block < n_blocks and isinstance(checksum, str):
            done[block] = checksum
    return done


@functools.lru_cache(maxsize=1)
def _checksum_thread():
    """One thread per process for block checksums: hashlib releases the GIL on large buffers, so a
    checksum runs while zarr encodes and writes the same block (a third off a block's write time
    on a busy 2-core machine)."""
    from concurrent.futures import ThreadPoolExecutor

    return ThreadPoolExecutor(max_workers=1, thread_name_prefix="sweep-checksum")


def _write_chunks(targets: dict, start: int, stop: int, values: list) -> None:
    """Write ``values`` into rows ``start:stop`` of the arrays of ``targets`` (same order), all at
    once on zarr's event loop: encoding and file writes overlap (a third faster than one after
    the other for the demo's seven variables)."""
    from zarr.core.sync import sync

    async def write_all():
        await asyncio.gather(*(array.async_array.setitem(slice(start, stop), value)
                               for array, value in zip(targets.values(), values)))

    sync(write_all())


# --------------------------------------------------------------------------------- allocation


def _root_attrs(path: Path) -> dict | None:
    """Attributes of a sweep store's root group, or None if ``path`` holds no sweep store."""
    try:
        meta = json.loads((path / "zarr.json").read_text())
    except (FileNotFoundError, NotADirectoryError, json.JSONDecodeError, OSError):
        return None
    if not isinstance(meta, dict):
        return None
    attrs = meta.get("attributes")
    if meta.get("node_type") != "group" or not isinstance(attrs, dict) or "spec_hash" not in attrs:
        return None
    return attrs


def _classify(path: Path) -> str:
    """``"absent"``, ``"empty"``, ``"store"``, ``"partial"`` (our allocation, interrupted) or ``"foreign"``."""
    if not path.exists():
        return "absent"
    if not path.is_dir():
        return "foreign"
    names = {entry.name for entry in path.iterdir()}
    if not names - {LOCK}:
        return "empty"
    if _root_attrs(path) is not None:
        return "store" if COMPLETION in names else "partial"
    return "foreign"


def _clear(path: Path) -> None:
    """Delete everything in a store folder except the lock (which we hold)."""
    for entry in path.iterdir():
        if entry.name == LOCK:
            continue
        if entry.is_dir() and not entry.is_symlink():
            shutil.rmtree(entry)
        else:
            entry.unlink()


def _variables(model) -> list[tuple[str, str, tuple]]:
    coords = model.coords()
    variables = []
    for output in model.outputs():
        shape = tuple(len(coords[dim][0]) for dim in output.dims)
        variables.append((output.name, str(np.dtype(output.dtype)), shape))
    return variables


def expected_bytes(model, n_rows: int, n_factors: int) -> int:
    """Uncompressed size of a cube [bytes]: the variables and the row coordinates."""
    total = 0
    for _, dtype, shape in _variables(model):
        total += int(n_rows) * int(np.prod(shape, dtype=np.int64)) * np.dtype(dtype).itemsize
    return total + int(n_rows) * 8 * (2 + int(n_factors))


def _json(value) -> str:
    return json.dumps(value, sort_keys=False)


def _dataset_attrs(spec, rows, model) -> dict:
    import sweep

    run = spec.run
    attrs = {
        "title": f"sweep cube {run.name}",
        "name": run.name,
        "spec_text": spec.text,
        "spec_hash": spec.hash,
        "spec_path": str(Path(spec.path).resolve()),
        "sweep_version": sweep.__version__,
        "created": now_iso(),
        "mode": run.mode,
        "seed": int(run.seed),
        "block_rows": int(run.block_rows),
        "n_rows": int(rows.n_rows),
        "factors": _json([{"name": f.name, "group": f.group, "unit": f.unit} for f in spec.factors()]),
        "sobol_inputs": _json(list(spec.sobol_inputs())),
        "grid_axes": _json([axis.name for axis in spec.grid_axes()]),
        "variables": _json([output.name for output in model.outputs()]),
    }
    if run.mode == "saltelli":
        attrs["base_rows"] = int(run.base_rows)
    else:
        attrs["rows"] = int(run.rows)
    return attrs


def _allocate(path: Path, spec, rows, model) -> None:
    """Write the metadata, row coordinates and empty variables of a new cube (no variable chunks).

    The layout is the one xarray reads as a dataset (``dimension_names`` on every array, the row
    coordinates named in each variable's ``coordinates`` attribute), written with zarr alone: the
    client of ``sweep run`` then never imports xarray, pandas or dask.array before its first task.
    """
    import zarr

    block_rows = int(spec.run.block_rows)
    n_rows = int(rows.n_rows)
    row_coords = {
        "block": (np.asarray(rows.block_label).astype(str),
                  {"description": "design block of the row: MC, A, B or AB:<input>"}),
        "base_index": (np.asarray(rows.base_index, dtype=np.int64),
                       {"description": "position of the row within its design block", "units": "1"}),
    }
    for factor in spec.factors():
        row_coords[factor.name] = (
            np.asarray(rows.factor_values[factor.name], dtype=np.float64),
            {"units": factor.unit, "description": f"value of the uncertain factor {factor.name}"},
        )
    model_coords = model.coords()
    with _quiet_zarr():
        group = zarr.open_group(path, mode="a", zarr_format=3, attributes=_dataset_attrs(spec, rows, model))
        for dim, (values, attrs) in model_coords.items():
            _write_coordinate(group, dim, (dim,), np.asarray(values), dict(attrs or {}))
        for name, (values, attrs) in row_coords.items():
            _write_coordinate(group, name, ("row",), values, attrs)
        coordinate_names = " ".join(sorted(row_coords))
        for output in model.outputs():
            shape = (n_rows, *(len(model_coords[dim][0]) for dim in output.dims))
            dtype = np.dtype(output.dtype)
            group.create_array(
                output.name, shape=shape, dtype=dtype, chunks=(block_rows, *shape[1:]),
                fill_value=np.nan if dtype.kind == "f" else 0, dimension_names=("row", *output.dims),
                attributes={"units": output.units, "description": output.description,
                            "coordinates": coordinate_names},
            )
        zarr.consolidate_metadata(path)


def _write_coordinate(group, name: str, dims: tuple, values: np.ndarray, attrs: dict) -> None:
    """One coordinate array, whole in one chunk; text as zarr's variable-length strings."""
    text = values.dtype.kind in "USOT"
    array = group.create_array(
        name, shape=values.shape, dtype=str if text else values.dtype, chunks=values.shape or None,
        fill_value="" if text else (np.nan if values.dtype.kind == "f" else 0),
        dimension_names=dims, attributes=attrs,
    )
    array[...] = values.astype(str) if text else values


def _stored_variables(path: Path) -> dict | None:
    """Shape after ``row`` of every data variable in a store, by name in checksum order."""
    try:
        meta = json.loads((path / "zarr.json").read_text())
        arrays = meta["consolidated_metadata"]["metadata"]
        names = json.loads(meta["attributes"]["variables"])
        return {name: tuple(arrays[name]["shape"][1:]) for name in names}
    except (KeyError, TypeError, ValueError, OSError):
        return None


def _check_same_spec(path: Path, spec) -> None:
    stored_hash = _root_attrs(path)["spec_hash"]
    if stored_hash != spec.hash:
        raise UserInputError(
            f"{path}: was written from another sweep definition (spec hash {stored_hash[:12]}, "
            f"this one {spec.hash[:12]}); use --fresh to start it again, or --output another path"
        )


def check_writable(path, spec, fresh: bool = False) -> None:
    """Refuse early, without taking the lock, what :func:`create_or_resume` would refuse.

    A folder or file that is not a sweep store, a store of another spec (unless ``fresh``), a
    store a live run is writing: one-line :class:`UserInputError`. Cheap: reads metadata only.
    """
    path = Path(path)
    kind = _classify(path)
    if kind == "foreign":
        what = "is a file" if path.exists() and not path.is_dir() else "is a folder that is not a sweep store"
        raise UserInputError(f"{path}: {what}; choose another output path (--output) or move it away")
    holder = RunLock.holder(path) if path.is_dir() else None
    if holder is not None:
        raise RunLock.busy_error(path, holder)
    if kind == "store" and not fresh:
        _check_same_spec(path, spec)


def create_or_resume(path, spec, rows, model, fresh: bool = False) -> CubeStore:
    """Open the store for writing: allocate it, or resume one made from the same spec.

    Takes the store's lock (released by :meth:`CubeStore.close`). Refuses a folder that is not a
    sweep store, a store made from a different spec unless ``fresh``, and a store a live run is
    writing. Deletes nothing unless ``fresh`` (and then only a sweep store's own files).

    Parameters
    ----------
    path : path
        The store folder (created if absent).
    spec : sweep.spec.Spec
        The validated sweep definition.
    rows : sweep.design.RowTable
        The rows of the sweep.
    model : sweep.blocks.BlockModel
        The model whose outputs the cube holds.
    fresh : bool
        Start again from an empty cube, whatever the store held.
    """
    path = Path(path)
    check_writable(path, spec, fresh)
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UserInputError(f"{path}: cannot create the store there ({exc.strerror})") from None
    lock = RunLock(path)
    lock.acquire()
    try:
        kind = _classify(path)
        variables = _variables(model)
        if kind == "store" and not fresh:
            _check_same_spec(path, spec)
            stored = _stored_variables(path)
            if stored is None or list(stored.items()) != [(name, shape) for name, _, shape in variables]:
                raise UserInputError(
                    f"{path}: its variables do not match what this version of sweep computes for the "
                    "same definition; use --fresh to start it again, or --output another path"
                )
        else:
            if kind in ("store", "partial"):
                _clear(path)
            try:
                _allocate(path, spec, rows, model)
                (path / COMPLETION).touch()
            except PermissionError as exc:
                raise UserInputError(f"{path}: cannot write the store there ({exc.strerror})") from None
    except BaseException:
        lock.release()
        raise
    return CubeStore(path, rows.n_rows, spec.run.block_rows, variables, spec.hash, lock=lock)


# ---------------------------------------------------------------------------- read-only access


def _existing(path) -> tuple[Path, dict]:
    path = Path(path)
    if not path.exists():
        raise UserInputError(f"{path}: no such store")
    attrs = _root_attrs(path)
    if attrs is None or not (path / COMPLETION).exists():
        raise UserInputError(f"{path}: is not a sweep store (no completed allocation with a spec hash)")
    return path, attrs


def _reader(path: Path, attrs: dict) -> CubeStore:
    stored = _stored_variables(path)
    if stored is None:
        raise UserInputError(f"{path}: is not a sweep store (its metadata lacks the variable list)")
    meta = json.loads((path / "zarr.json").read_text())["consolidated_metadata"]["metadata"]
    variables = [(name, meta[name]["data_type"], shape) for name, shape in stored.items()]
    return CubeStore(path, attrs["n_rows"], attrs["block_rows"], variables, attrs["spec_hash"])


def open_store(path) -> CubeStore:
    """A read-only handle on an existing store (for its completion record); takes no lock."""
    return _reader(*_existing(path))


def open_cube(path):
    """Open a store as a lazy :class:`xarray.Dataset` (dask arrays; units and spec in ``attrs``).

    Blocks that are not done read as the fill value (0 for counts, NaN for floats).
    """
    import xarray as xr

    path, _ = _existing(path)
    with _quiet_zarr():
        dataset = xr.open_zarr(path, consolidated=True, zarr_format=3)
    labels = {}
    for name, coord in dataset.coords.items():
        if coord.dtype.kind == "T":  # zarr's variable-length strings: plain numpy strings for users
            values = np.asarray(coord.values)
            width = max((len(value) for value in values.ravel()), default=1)
            labels[name] = coord.copy(data=values.astype(f"U{max(width, 1)}"))
    return dataset.assign_coords(labels) if labels else dataset


def status(path) -> dict:
    """Progress of a store: safe to call while a run writes it.

    Returns
    -------
    dict
        ``path``, ``name``, ``mode``, ``spec_hash``, ``blocks_done``, ``blocks_total``, ``rows``,
        ``rows_done``, ``block_rows``, ``created``, ``started`` (first run), ``last_write`` (last
        completed block), ``running`` (the live writer's pid/host/start, or None) and ``last_run``
        (the last run's start/end figures, or None).
    """
    path, attrs = _existing(path)
    n_rows, block_rows = int(attrs["n_rows"]), int(attrs["block_rows"])
    n_blocks = -(-n_rows // block_rows)
    records = [e for e in _read_jsonl(path / COMPLETION) if isinstance(e.get("block"), int)]
    done = _done_blocks(path, n_blocks)
    rows_done = sum(min(block_rows, n_rows - i * block_rows) for i in done)
    runs = _read_jsonl(path / RUNS)
    starts = [r for r in runs if r.get("event") == "start"]
    last_run = None
    if starts:
        last_run = dict(starts[-1])
        ends = [r for r in runs if r.get("event") == "end" and r.get("run") == last_run.get("run")]
        if ends:
            last_run.update({k: v for k, v in ends[-1].items() if k not in ("event", "at")})
            last_run["ended"] = ends[-1].get("at")
    holder = RunLock.holder(path)
    return {
        "path": str(path),
        "name": attrs.get("name"),
        "mode": attrs.get("mode"),
        "spec_hash": attrs.get("spec_hash"),
        "blocks_done": len(done),
        "blocks_total": n_blocks,
        "rows": n_rows,
        "rows_done": rows_done,
        "block_rows": block_rows,
        "created": attrs.get("created"),
        "started": starts[0].get("at") if starts else None,
        "last_write": records[-1].get("at") if records else None,
        "running": None if holder is None else {k: holder.get(k) for k in ("pid", "host", "started")},
        "last_run": last_run,
    }


def verify(path) -> dict:
    """Recompute the checksum of every recorded block; drop damaged ones from the record.

    Takes the store's lock for the time it runs (a store being written is refused). The next
    ``sweep run`` recomputes every block that is damaged or missing.

    Returns
    -------
    dict
        ``blocks_total``, ``blocks_ok`` (list of block numbers), ``damaged`` (list of
        ``{"block", "rows", "problem"}``) and ``missing`` (blocks never recorded as done).
    """
    path, attrs = _existing(path)
    lock = RunLock(path)
    lock.acquire()
    try:
        cube = _reader(path, attrs)
        done = cube.done_blocks()
        ok, damaged = [], []
        for index, checksum in sorted(done.items()):
            start, stop = cube.block_range(index)
            try:
                found = cube.read_checksum(index)
            except Exception as exc:  # noqa: BLE001 - any failure to decode a chunk is damage
                problem = f"unreadable ({type(exc).__name__}: {exc})"
            else:
                problem = None if found == checksum else "checksum differs from the completion record"
            if problem is None:
                ok.append(index)
            else:
                damaged.append({"block": index, "rows": [start, stop], "problem": " ".join(problem.split())})
        if damaged:
            keep = set(ok)
            lines = [e for e in _read_jsonl(path / COMPLETION) if e.get("block") in keep]
            write_atomic(path / COMPLETION, "".join(json.dumps(e, sort_keys=True) + "\n" for e in lines))
        missing = [i for i in range(cube.n_blocks) if i not in done]
    finally:
        lock.release()
    return {"path": str(path), "blocks_total": cube.n_blocks, "blocks_ok": ok, "damaged": damaged, "missing": missing}
