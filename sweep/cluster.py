"""Batch-queue clusters for ``sweep run --cluster``: dask workers as SLURM, PBS, SGE, LSF or HTCondor jobs.

The run's client and the dask scheduler stay in the ``sweep run`` process (on a login node, or in a
batch job of its own, see ``workflows/cluster/``); every dask worker is a batch job submitted
through dask-jobqueue. Settings follow dask's conventions (flags, then the user's dask YAML, then
sweep's packaged defaults); :mod:`sweep.cluster_settings` reads them, this module starts and keeps
the cluster.

What the run does to keep going and keep others out:

- Every connection uses TLS with certificates made for the run (:func:`temporary_security`); the
  workers' copies are written, readable only by the user, into a directory the jobs share. A
  client without them is refused by the scheduler.
- The dashboard listens on loopback unless asked otherwise (reach it through an SSH tunnel).
- Workers retire before their job's walltime (``--lifetime`` with a stagger) and ended jobs are
  replaced by new ones (dask-jobqueue does not resubmit them on its own), so a sweep longer than
  any one job still finishes.
- A worker that stops sending heartbeats is removed after ``sweep.cluster.worker-ttl`` and its
  tasks move to other workers.
"""

from __future__ import annotations

import argparse
import contextlib
import logging
import os
import re
import signal
import sys
import threading

import dask
import dask.config

from sweep.cluster_settings import (  # noqa: F401  (re-exported: the flags and settings are public here too)
    KINDS,
    TEST_KINDS,
    ClusterOptions,
    add_cluster_arguments,
    cluster_kwargs,
    import_jobqueue,
    lifetime_arguments,
    load_defaults,
    parse_adapt,
    run_config,
    seconds_setting,
    setting,
    walltime_seconds,
)
from sweep.errors import UserInputError

logger = logging.getLogger(__name__)


def temporary_security():
    """TLS credentials made for one run: a new CA, and certificates for scheduler, workers and client.

    Every connection must then present a certificate signed by this CA, so only processes given
    the credentials (the run's own client and workers) can talk to the scheduler.

    Returns
    -------
    distributed.Security
        With ``require_encryption=True``.
    """
    from distributed import Security

    try:
        return Security.temporary()
    except ImportError as exc:
        raise UserInputError(
            "TLS for the cluster needs the cryptography package; install it with "
            "pip install 'sweep[cluster]'"
        ) from exc


# --------------------------------------------------------------------------------------------
# The cluster
# --------------------------------------------------------------------------------------------


class _JobKeeper:
    """Resubmit worker jobs that ended (walltime, lifetime, scancel) while the cluster wants them.

    dask-jobqueue keeps an ended job's name in the cluster's plan, so neither ``scale`` nor
    ``adapt`` replaces it. Every ``interval`` seconds this asks the cluster to bring its running
    jobs back in line with its plan (``SpecCluster._correct_state``), which submits a new job for
    each one that has left.
    """

    def __init__(self, cluster, interval: float):
        self.cluster = cluster
        self.interval = interval
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="sweep-job-keeper", daemon=True)

    def __enter__(self):
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join(timeout=self.interval + 5)

    def _run(self):
        while not self._stop.wait(self.interval):
            try:
                ended = set(self.cluster.worker_spec) - set(self.cluster.workers)
                if ended:
                    logger.info("replacing %d ended worker job(s): %s", len(ended), sorted(map(str, ended)))
                    self.cluster.loop.add_callback(self.cluster._correct_state)
            except Exception:  # the cluster is closing; nothing left to keep
                logger.debug("job keeper stopped", exc_info=True)
                return


@contextlib.contextmanager
def _terminate_as_interrupt():
    """In the main thread, turn SIGTERM (a batch job's end) into KeyboardInterrupt, so jobs are cancelled."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        raise KeyboardInterrupt(f"signal {signum}")

    previous = signal.signal(signal.SIGTERM, handler)
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


@contextlib.contextmanager
def batch_cluster(args_or_options):
    """Start a dask-jobqueue cluster for the run, protected by TLS; yield it (no client).

    Parameters
    ----------
    args_or_options : argparse.Namespace or ClusterOptions
        The run's cluster settings (see :func:`add_cluster_arguments`).

    Yields
    ------
    dask_jobqueue.JobQueueCluster
        Scaled to ``--jobs`` or adapting within ``--adapt``; ended jobs are resubmitted while
        it is open. On exit every job is cancelled.
    """
    options = ClusterOptions.from_args(args_or_options)
    dask_jobqueue = import_jobqueue()
    load_defaults()
    security = temporary_security()
    kwargs = cluster_kwargs(options, security)
    adapt = options.adapt
    if adapt is None and setting("adapt"):
        try:
            adapt = parse_adapt(setting("adapt"))
        except argparse.ArgumentTypeError as exc:
            raise UserInputError(f"dask configuration: sweep.cluster.adapt: {exc}") from None
    jobs = options.jobs or int(setting("jobs"))
    if options.kind in TEST_KINDS:
        from dask_jobqueue import local as dask_jobqueue
    cls = getattr(dask_jobqueue, {**KINDS, **TEST_KINDS}[options.kind])
    with dask.config.set(run_config()), _terminate_as_interrupt():
        try:
            cluster = cls(**kwargs)
        except (ValueError, TypeError) as exc:  # dask-jobqueue's complaint about a setting
            raise UserInputError(f"--cluster {options.kind}: {exc}") from exc
        try:
            if adapt is not None:
                cluster.adapt(minimum_jobs=adapt[0], maximum_jobs=adapt[1])
            else:
                cluster.scale(jobs=jobs)
            with _JobKeeper(cluster, seconds_setting("resubmit-interval")):
                yield cluster
        finally:
            cluster.close()


@contextlib.contextmanager
def batch_client(args_or_options):
    """A :class:`distributed.Client` whose workers are batch jobs; for ``sweep run --cluster``.

    Parameters
    ----------
    args_or_options : argparse.Namespace or ClusterOptions
        The parsed ``sweep run`` arguments (``args.cluster`` names the batch system) or options.

    Yields
    ------
    distributed.Client
        Connected over TLS with the run's credentials. On exit the client closes and every
        worker job is cancelled. While it is open, SIGTERM (the end of the client's own batch
        job) raises :class:`KeyboardInterrupt` in the main thread.
    """
    from distributed import Client

    with batch_cluster(args_or_options) as cluster:
        client = Client(cluster, security=cluster.security)
        hint = dashboard_tunnel_hint(client)
        if hint:
            print(f"sweep: {hint}", file=sys.stderr)
        try:
            yield client
        finally:
            with contextlib.suppress(Exception):
                client.close()


def dashboard_tunnel_hint(client) -> str:
    """One line telling how to reach the client's dashboard from a laptop through SSH."""
    link = client.dashboard_link or ""
    match = re.search(r"//([^/:]+):(\d+)", link)
    if not match:
        return ""
    host, port = match.groups()
    node = os.uname().nodename
    return (f"dashboard on {node} only; from your laptop: ssh -N -L {port}:{host}:{port} {node} "
            f"then open http://localhost:{port}/status")


__all__ = [
    "KINDS",
    "ClusterOptions",
    "add_cluster_arguments",
    "batch_client",
    "batch_cluster",
    "cluster_kwargs",
    "dashboard_tunnel_hint",
    "lifetime_arguments",
    "load_defaults",
    "parse_adapt",
    "run_config",
    "temporary_security",
    "walltime_seconds",
]
