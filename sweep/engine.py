"""Row blocks become dask tasks: evaluate, write, return the checksum.

:func:`run_sweep` builds the rows, the model and the store, submits one task per block that is not
yet done, and records each block in the store's completion record as soon as its task has
finished. A block whose task fails is submitted again, up to ``max_retries`` times; then the run
stops with a :class:`RunError` naming the block and its first error. A lost scheduler stops the
run the same way. Either way the completion record only lists blocks whose data is on disk, so
``sweep run`` started again computes only what is missing and ends with the same cube.

The engine never knows what the model computes: it calls ``model.evaluate(block)`` and hands the
arrays to :meth:`sweep.store.CubeStore.write_block`.
"""

from __future__ import annotations

import contextlib
import logging
import os
import pickle
import threading
import time
import uuid
from dataclasses import asdict, dataclass, field

from sweep import store as cube_store
from sweep.errors import UserInputError
from sweep.progress import Progress

#: How long the client may be disconnected from the scheduler before the run gives up [s].
SCHEDULER_GRACE_S = 30.0


class RunError(UserInputError):
    """A run that cannot go on (a block that keeps failing, a lost scheduler): one line, exit status 1."""

    exit_status = 1


@dataclass
class RunSummary:
    """What a run did.

    Attributes
    ----------
    path : str
        The store.
    blocks_total, blocks_computed, blocks_skipped : int
        Blocks of the cube, blocks computed by this run, blocks already done before it.
    rows_computed : int
        Rows computed by this run.
    retries : int
        Tasks submitted again after a failure.
    wall_s : float
        Wall time of the run, from submitting the first task to recording the last [s].
    evaluate_s, write_s : float
        Time spent in ``model.evaluate`` and in writing blocks, summed over tasks [s].
    task_evaluate_s, task_write_s : list of float
        The same for each block computed, in order of completion [s].
    dashboard : str or None
        The dask dashboard's address.
    """

    path: str
    blocks_total: int
    blocks_computed: int = 0
    blocks_skipped: int = 0
    rows_computed: int = 0
    retries: int = 0
    wall_s: float = 0.0
    evaluate_s: float = 0.0
    write_s: float = 0.0
    task_evaluate_s: list = field(default_factory=list)
    task_write_s: list = field(default_factory=list)
    dashboard: str | None = None

    def as_dict(self) -> dict:
        """A JSON-ready dict of every field."""
        return asdict(self)


# ------------------------------------------------------------------------------------- clients


@contextlib.contextmanager
def open_client(workers=None, scheduler=None, threads_per_worker=1, dashboard_address="127.0.0.1:0",
                security=None):
    """A :class:`distributed.Client`: a local cluster of worker processes, or a running scheduler.

    Parameters
    ----------
    workers : int or None
        Local worker processes; None or 0 = one per core.
    scheduler : str or None
        Address of a running dask scheduler (``tcp://host:port``); no local cluster is started.
    threads_per_worker : int
        Threads of each local worker process.
    dashboard_address : str
        Where the local cluster serves its dashboard (localhost only by default).
    security : distributed.Security or None
        TLS settings for connecting to ``scheduler``.
    """
    import dask
    from distributed import Client, LocalCluster

    if scheduler:
        try:
            client = Client(scheduler, security=security, timeout=15, set_as_default=False)
        except (OSError, TimeoutError) as exc:
            raise UserInputError(f"--scheduler {scheduler}: no dask scheduler answered there ({exc})") from None
        try:
            yield client
        finally:
            _close_quietly(client)
        return
    n_workers = workers or os.cpu_count() or 1
    with dask.config.set({f"distributed.nanny.pre-spawn-environ.{k}": v for k, v in WORKER_ENVIRONMENT.items()}):
        cluster = LocalCluster(
            n_workers=n_workers,
            threads_per_worker=threads_per_worker,
            processes=True,
            host="127.0.0.1",
            dashboard_address=dashboard_address,
            silence_logs=logging.CRITICAL,
            preload=list(WORKER_PRELOAD),
        )
    try:
        client = Client(cluster, set_as_default=False)
        try:
            yield client
        finally:
            _close_quietly(client)
    finally:
        cluster.close()


#: Environment of worker processes, set before they start. distributed's nanny sets
#: ``MALLOC_TRIM_THRESHOLD_=65536`` by default, which also switches off glibc's adaptive mmap
#: threshold: every temporary array above 128 KiB is then a fresh mmap whose pages fault in again,
#: and the model ran 1.8 times slower (user time alike, system time up 40-fold; measured on the
#: demo's blocks). These values keep temporaries in the heap and still give back free memory
#: above 64 MiB.
WORKER_ENVIRONMENT = {"MALLOC_TRIM_THRESHOLD_": str(64 << 20), "MALLOC_MMAP_THRESHOLD_": str(32 << 20)}

#: Modules each local worker imports as it starts, while the client still prepares the run, so the
#: first task does not pay for importing the model's libraries.
WORKER_PRELOAD = ("sweep.model", "sweep.testfunctions", "sweep.store", "zarr")


def _close_quietly(client) -> None:
    """Close a client without distributed's log noise about an already lost scheduler."""
    logger = logging.getLogger("distributed")
    level = logger.level
    logger.setLevel(logging.CRITICAL)
    try:
        with contextlib.suppress(Exception):
            client.close(timeout=5)
    finally:
        logger.setLevel(level)


def dashboard_link(client) -> str | None:
    """The scheduler's dashboard address, or None when it serves none."""
    try:
        services = client.scheduler_info().get("services", {})
    except Exception:  # noqa: BLE001 - a dashboard link is never worth failing a run
        return None
    return client.dashboard_link if "dashboard" in services else None


# ---------------------------------------------------------------------------------------- tasks


def _unpickle(payload: bytes):
    return pickle.loads(payload)


def evaluate_block(model, cube, block):
    """The task body: evaluate the block, write it, return its checksum and the two times [s]."""
    started = time.perf_counter()
    arrays = model.evaluate(block)
    evaluated = time.perf_counter()
    checksum = cube.write_block(block, arrays)
    written = time.perf_counter()
    return checksum, evaluated - started, written - evaluated


def _model_future(client, model):
    """The model as a task result, so workers fetch it once and a lost copy is recomputed."""
    import cloudpickle

    payload = cloudpickle.dumps(model)
    return client.submit(_unpickle, payload, key=f"sweep-model-{uuid.uuid4().hex}", pure=False)


def _first_line(exc) -> str:
    text = " ".join(str(exc).split())
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


# ------------------------------------------------------------------------------------------ run


class StartingClient:
    """A local cluster (or a connection to ``scheduler``) started in a thread, so that the workers
    start and import the model's libraries while the caller validates the spec and prepares the
    run. Pass it as ``client`` to :func:`run_sweep`, which waits for it (:meth:`wait`) only before
    the first task. Use it as a context manager: leaving it closes the client and the cluster.

    Parameters
    ----------
    execution : sweep.spec.ExecutionSection
        The spec's ``[execution]`` defaults (workers, threads per worker, dashboard address).
    workers, scheduler : int, str or None
        Command-line overrides: local worker processes, or a running scheduler's address.
    """

    def __init__(self, execution, workers=None, scheduler=None):
        self._context = open_client(
            workers=workers if workers is not None else execution.workers, scheduler=scheduler,
            threads_per_worker=execution.threads_per_worker, dashboard_address=execution.dashboard_address,
        )
        self._client = None
        self._error = None
        self._thread = threading.Thread(target=self._start, name="sweep-start-workers", daemon=True)

    def _start(self):
        try:
            self._client = self._context.__enter__()
        except BaseException as exc:  # noqa: BLE001 - handed to the caller by wait()
            self._error = exc

    def __enter__(self):
        self._thread.start()
        return self

    def wait(self):
        """The started client (raises what starting it raised)."""
        self._thread.join()
        if self._error is not None:
            raise self._error
        return self._client

    def __exit__(self, *exc_info):
        self._thread.join()
        if self._error is None:
            return self._context.__exit__(*exc_info)
        return False


def run_sweep(spec, output=None, client=None, fresh=False, progress=True, max_retries=None, model=None,
              workers=None, scheduler=None) -> RunSummary:
    """Compute every block of a sweep that its store does not hold yet.

    Parameters
    ----------
    spec : sweep.spec.Spec
        The validated sweep definition.
    output : path or None
        The store; default ``spec.output_path()``.
    client : distributed.Client, StartingClient or None
        Where tasks run; default a :class:`StartingClient` (local cluster, or ``scheduler``).
    fresh : bool
        Start the store again from empty, even if it holds another sweep.
    progress : bool or Progress
        Show rows done, rate, ETA and the dashboard link on stderr.
    max_retries : int or None
        Submissions of a failing block after its first; default ``spec.execution.max_retries``.
    model : BlockModel or None
        The model to run; default ``spec.build_model()``.
    workers, scheduler : int, str or None
        For the default client: local worker processes, or a running scheduler's address.

    Returns
    -------
    RunSummary
    """
    from sweep.design import build_rows

    path = spec.output_path(None if output is None else str(output))
    cube_store.check_writable(path, spec, fresh)
    max_retries = spec.execution.max_retries if max_retries is None else int(max_retries)
    with contextlib.ExitStack() as stack:
        if client is None:  # start the workers while the rows, the model and the store are prepared
            client = stack.enter_context(StartingClient(spec.execution, workers, scheduler))
        rows = build_rows(spec)
        model = spec.build_model() if model is None else model
        return _run(spec, path, rows, model, client, fresh, progress, max_retries)


def _run(spec, path, rows, model, client, fresh, progress, max_retries) -> RunSummary:
    """Open the store, compute its missing blocks on ``client``, log the run."""
    with cube_store.create_or_resume(path, spec, rows, model, fresh=fresh) as cube:
        done = cube.done_blocks()
        todo = [index for index in range(cube.n_blocks) if index not in done]
        summary = RunSummary(str(path), cube.n_blocks, blocks_skipped=len(done))
        run_id = uuid.uuid4().hex[:12]
        cube.log_run(event="start", run=run_id, pid=os.getpid(), blocks_todo=len(todo), blocks_done=len(done))
        outcome = "interrupted"
        try:
            if todo:
                if isinstance(client, StartingClient):
                    client = client.wait()
                _compute(client, cube, rows, model, todo, max_retries, summary, progress)
            outcome = "complete"
        except UserInputError as exc:
            outcome = f"failed: {exc}"
            raise
        except Exception as exc:
            outcome = f"error: {_first_line(exc)}"
            raise
        finally:
            cube.log_run(event="end", run=run_id, outcome=outcome, blocks_computed=summary.blocks_computed,
                         blocks_skipped=summary.blocks_skipped, retries=summary.retries,
                         wall_s=round(summary.wall_s, 3))
    return summary


def _compute(client, cube, rows, model, todo, max_retries, summary, progress) -> None:
    """Submit the blocks, record them as they finish, resubmit failures, stop on a lost scheduler."""
    from distributed import as_completed

    summary.dashboard = dashboard_link(client)
    bar = progress if isinstance(progress, Progress) else Progress(
        total_rows=cube.n_rows, done_rows=cube.n_rows - sum(len(range(*cube.block_range(i))) for i in todo),
        enabled=bool(progress), dashboard=summary.dashboard,
    )
    started = time.perf_counter()
    model_future = _model_future(client, model)
    attempts = {index: 0 for index in todo}
    first_error = {}
    futures = {}

    def block_key(index):
        return f"sweep-block-{index}-{attempts[index]}-{uuid.uuid4().hex[:8]}"

    def submit(index):
        attempts[index] += 1
        future = client.submit(evaluate_block, model_future, cube, rows.block(index, cube.block_rows),
                               key=block_key(index), pure=False)
        futures[future.key] = (index, future)
        return future

    for index in todo:
        attempts[index] += 1
    first = client.map(
        evaluate_block, [model_future] * len(todo), [cube] * len(todo),
        [rows.block(index, cube.block_rows) for index in todo],
        key=[block_key(index) for index in todo], pure=False,
    )
    futures.update({future.key: (index, future) for index, future in zip(todo, first)})
    pending = as_completed(first, with_results=True, raise_errors=False, loop=client.loop)
    disconnected_since = None
    try:
        while not pending.is_empty():
            if not pending.has_ready():
                if client.status != "running":
                    disconnected_since = disconnected_since or time.monotonic()
                    if time.monotonic() - disconnected_since > SCHEDULER_GRACE_S:
                        raise _lost_scheduler(client)
                else:
                    disconnected_since = None
                time.sleep(0.05)
                continue
            for future, result in pending.next_batch(block=False):
                index, _ = futures.pop(future.key)
                if future.status == "finished":
                    checksum, evaluate_s, write_s = result
                    cube.record_done(index, checksum)
                    summary.blocks_computed += 1
                    start, stop = cube.block_range(index)
                    summary.rows_computed += stop - start
                    summary.task_evaluate_s.append(evaluate_s)
                    summary.task_write_s.append(write_s)
                    bar.update(stop - start)
                    continue
                if future.status == "cancelled" or client.status != "running":
                    raise _lost_scheduler(client)
                error = result[1] if isinstance(result, tuple) and len(result) == 3 else future.exception()
                first_error.setdefault(index, error)
                if attempts[index] > max_retries:
                    start, stop = cube.block_range(index)
                    raise RunError(
                        f"block {index} (rows {start}..{stop - 1}) failed {attempts[index]} times; first "
                        f"error: {_first_line(first_error[index])}; the run stopped (blocks done so far are "
                        "kept: run again to resume)"
                    )
                summary.retries += 1
                pending.add(submit(index))
    finally:
        summary.wall_s = time.perf_counter() - started
        summary.evaluate_s = float(sum(summary.task_evaluate_s))
        summary.write_s = float(sum(summary.task_write_s))
        bar.close()
        with contextlib.suppress(Exception):
            client.cancel([future for _, future in futures.values()] + [model_future])


def _lost_scheduler(client) -> RunError:
    address = getattr(client.scheduler, "address", None) or "the dask scheduler"
    return RunError(
        f"lost the connection to the dask scheduler ({address}); blocks done so far are kept: start the "
        "scheduler again (or drop --scheduler) and run the same command to resume"
    )
