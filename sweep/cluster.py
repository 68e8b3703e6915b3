"""Batch-queue clusters for ``sweep run --cluster``: dask workers as SLURM, PBS, SGE, LSF or HTCondor jobs.

The run's client and the dask scheduler stay in the ``sweep run`` process (on a login node, or in a
batch job of its own, see ``workflows/cluster/``); every dask worker is a batch job submitted
through dask-jobqueue. Settings follow dask's conventions: the ``jobqueue.<kind>`` section of
dask's configuration supplies defaults (``sweep/data/jobqueue.yaml`` fills the keys dask-jobqueue
leaves empty; the user's own dask YAML wins over both) and command-line flags override them.
sweep's own cluster settings live under ``sweep.cluster`` in the same configuration.

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
from dataclasses import dataclass, fields
from importlib import resources
from pathlib import Path

import dask
import dask.config
import yaml

from sweep.errors import UserInputError

logger = logging.getLogger(__name__)

#: Batch systems ``--cluster`` accepts, and the dask-jobqueue class for each.
KINDS = {
    "slurm": "SLURMCluster",
    "pbs": "PBSCluster",
    "sge": "SGECluster",
    "lsf": "LSFCluster",
    "htcondor": "HTCondorCluster",
}
#: Also accepted by :func:`batch_client` (not on the command line): dask-jobqueue's ``local``
#: kind, which runs each "job" as a process on this machine. Only for tests.
_TEST_KINDS = {"local": "LocalCluster"}

#: Name of the job-scheduler keyword that ``--account`` sets, per kind (None: not supported).
_ACCOUNT_KEYWORD = {"slurm": "account", "pbs": "account", "sge": "project", "lsf": "project",
                    "htcondor": None, "local": None}

_defaults = None
_defaults_lock = threading.Lock()


# --------------------------------------------------------------------------------------------
# Options
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ClusterOptions:
    """Batch-cluster settings from the command line; ``None`` means "from dask's configuration".

    Attributes
    ----------
    kind : str
        Batch system: one of :data:`KINDS`.
    jobs : int or None
        Worker jobs to keep running (ignored when ``adapt`` is given).
    cores : int or None
        Cores per job.
    memory : str or None
        Memory per job, e.g. ``"4GiB"`` [bytes, with a unit].
    walltime : str or None
        Time limit per job in the batch system's own format (SLURM ``D-HH:MM:SS``, PBS and SGE
        ``HH:MM:SS``, LSF ``HH:MM``) [time].
    queue : str or None
        Queue or partition.
    account : str or None
        Account or project charged for the jobs.
    adapt : tuple of int or None
        ``(minimum, maximum)`` number of jobs: dask grows and shrinks the cluster between them.
    dashboard_address : str or None
        Where the dask dashboard listens, e.g. ``"127.0.0.1:8787"``.
    """

    kind: str
    jobs: int | None = None
    cores: int | None = None
    memory: str | None = None
    walltime: str | None = None
    queue: str | None = None
    account: str | None = None
    adapt: tuple | None = None
    dashboard_address: str | None = None

    @classmethod
    def from_args(cls, args) -> "ClusterOptions":
        """Options from an :class:`argparse.Namespace` made by :func:`add_cluster_arguments`."""
        if isinstance(args, cls):
            return args
        values = {f.name: getattr(args, f.name, None) for f in fields(cls)}
        values["kind"] = getattr(args, "cluster", None) or values.get("kind")
        if not values["kind"]:
            raise UserInputError("--cluster: no batch system given; use one of " + ", ".join(KINDS))
        return cls(**values)


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"{text!r} must be 1 or more")
    return value


def parse_adapt(text: str) -> tuple[int, int]:
    """``"MIN:MAX"`` -> ``(MIN, MAX)`` jobs, with ``0 <= MIN <= MAX`` and ``MAX >= 1``.

    Parameters
    ----------
    text : str
        Minimum and maximum number of jobs, separated by a colon.
    """
    match = re.fullmatch(r"\s*(\d+)\s*:\s*(\d+)\s*", str(text))
    if not match:
        raise argparse.ArgumentTypeError(f"{text!r} is not MIN:MAX (two whole numbers, e.g. 0:20)")
    low, high = int(match.group(1)), int(match.group(2))
    if high < 1 or low > high:
        raise argparse.ArgumentTypeError(f"{text!r}: need 0 <= MIN <= MAX and MAX >= 1")
    return low, high


def _memory(text: str) -> str:
    from dask.utils import parse_bytes

    try:
        if parse_bytes(text) <= 0:
            raise ValueError
    except (ValueError, TypeError):
        raise argparse.ArgumentTypeError(f"{text!r} is not an amount of memory (e.g. 4GiB, 8GB)") from None
    return text


def add_cluster_arguments(parser: argparse.ArgumentParser) -> argparse._ArgumentGroup:
    """Add the batch-queue cluster flags of ``sweep run`` to ``parser``; return their group.

    The flags are ``--cluster KIND``, ``--jobs N``, ``--cores C``, ``--memory M``,
    ``--walltime T``, ``--queue Q``, ``--account A``, ``--adapt MIN:MAX`` and
    ``--dashboard-address``. Each defaults to ``None``: the value then comes from dask's
    configuration (``jobqueue.<kind>.*`` and ``sweep.cluster.*``).
    """
    group = parser.add_argument_group(
        "batch-queue cluster",
        "Start dask workers as batch jobs (dask-jobqueue). Defaults come from dask's configuration: "
        "the jobqueue.<kind> section of your dask YAML (~/.config/dask/), then sweep's packaged "
        "defaults; these flags override both. Connections use TLS with certificates made for the run.",
    )
    group.add_argument("--cluster", choices=tuple(KINDS), default=None, metavar="KIND",
                       help="batch system that runs the workers: " + ", ".join(KINDS))
    group.add_argument("--jobs", type=_positive_int, default=None, metavar="N",
                       help="worker jobs to keep running (default: sweep.cluster.jobs, 2)")
    group.add_argument("--cores", type=_positive_int, default=None, metavar="C",
                       help="cores per job (default: jobqueue.<kind>.cores, 1)")
    group.add_argument("--memory", type=_memory, default=None, metavar="M",
                       help="memory per job, e.g. 4GiB (default: jobqueue.<kind>.memory, 4GiB)")
    group.add_argument("--walltime", default=None, metavar="T",
                       help="time limit per job, in the batch system's format (e.g. 01:00:00); "
                            "workers retire a few minutes before it and are replaced")
    group.add_argument("--queue", default=None, metavar="Q", help="queue or partition")
    group.add_argument("--account", default=None, metavar="A", help="account or project to charge")
    group.add_argument("--adapt", type=parse_adapt, default=None, metavar="MIN:MAX",
                       help="let dask vary the number of jobs between MIN and MAX instead of --jobs")
    group.add_argument("--dashboard-address", default=None, metavar="HOST:PORT",
                       help="where the dashboard listens (default 127.0.0.1:8787, this machine only; "
                            "use an SSH tunnel to see it)")
    return group


# --------------------------------------------------------------------------------------------
# Configuration
# --------------------------------------------------------------------------------------------


def load_defaults() -> None:
    """Add sweep's packaged cluster defaults (``sweep/data/jobqueue.yaml``) to dask's configuration.

    Imports dask-jobqueue first, so that its own defaults are in place; values the user set in
    their dask configuration are kept. Safe to call more than once: later calls only put back
    keys that have gone missing (for example after a ``dask.config.set`` block that started
    before the defaults were loaded has ended).
    """
    global _defaults
    with _defaults_lock:
        if _defaults is None:
            jobqueue = _import_jobqueue()
            ours = yaml.safe_load(resources.files("sweep").joinpath("data/jobqueue.yaml").read_text())
            dask.config.update_defaults(ours)
            theirs = yaml.safe_load(resources.files(jobqueue).joinpath("jobqueue.yaml").read_text())
            _defaults = dask.config.merge(theirs, ours)
        else:
            dask.config.update(dask.config.config, _defaults, priority="old")


def _import_jobqueue():
    try:
        import dask_jobqueue
    except ModuleNotFoundError as exc:
        raise UserInputError(
            "--cluster: the dask-jobqueue package is not installed; install it with "
            "pip install 'sweep[cluster]'"
        ) from exc
    return dask_jobqueue


def _setting(key: str):
    return dask.config.get(f"sweep.cluster.{key}")


def _seconds(key: str) -> float:
    from dask.utils import parse_timedelta

    value = _setting(key)
    try:
        return float(parse_timedelta(value, default="seconds"))
    except (ValueError, KeyError, TypeError):
        raise UserInputError(
            f"dask configuration: sweep.cluster.{key}: {value!r} is not a time span "
            "(e.g. '30 seconds', '2 minutes')"
        ) from None


def run_config() -> dict:
    """dask settings for the run's scheduler and cluster, from ``sweep.cluster.*``.

    ``distributed.scheduler.worker-ttl`` (a worker silent this long is removed and its tasks move
    on), ``distributed.deploy.lost-worker-timeout`` (a worker gone this long is forgotten and its
    job replaced) and ``distributed.comm.timeouts.connect``. Use as
    ``with dask.config.set(run_config()): ...`` around starting the scheduler.
    """
    load_defaults()
    return {
        "distributed.scheduler.worker-ttl": f"{_seconds('worker-ttl')}s",
        "distributed.deploy.lost-worker-timeout": f"{_seconds('lost-worker-timeout')}s",
        "distributed.comm.timeouts.connect": f"{_seconds('connect-timeout')}s",
    }


_WALLTIME_FORMS = {
    "slurm": "MM, MM:SS, HH:MM:SS, D-HH, D-HH:MM or D-HH:MM:SS",
    "pbs": "SS, MM:SS or HH:MM:SS",
    "sge": "SS or HH:MM:SS",
    "lsf": "MM or HH:MM",
    "htcondor": "SS, MM:SS or HH:MM:SS",
    "local": "SS, MM:SS or HH:MM:SS",
}


def walltime_seconds(text: str, kind: str) -> int:
    """A job time limit in the batch system's own format -> seconds [s].

    Parameters
    ----------
    text : str
        The time limit as the batch system writes it: SLURM ``MM``, ``MM:SS``, ``HH:MM:SS``,
        ``D-HH``, ``D-HH:MM``, ``D-HH:MM:SS``; PBS ``[[HH:]MM:]SS``; SGE ``SS`` or ``HH:MM:SS``;
        LSF ``[HH:]MM``.
    kind : str
        The batch system (a key of :data:`KINDS`).

    Returns
    -------
    int
        The limit [s].

    References
    ----------
    Time formats as documented for ``sbatch --time`` (SLURM), ``qsub -l walltime`` (PBS),
    ``h_rt`` (SGE) and ``bsub -W`` (LSF) (from memory).
    """
    text = str(text).strip()
    bad = UserInputError(
        f"--walltime: {text!r} is not a {kind} time limit; use {_WALLTIME_FORMS.get(kind, 'HH:MM:SS')}"
    )
    days = 0
    if kind == "slurm" and "-" in text:
        day_text, text = text.split("-", 1)
        if not day_text.isdigit():
            raise bad
        days = int(day_text)
        parts = text.split(":")
        if len(parts) > 3 or not all(p.isdigit() for p in parts):
            raise bad
        hours, minutes, seconds = ([int(p) for p in parts] + [0, 0])[:3]
        return ((days * 24 + hours) * 60 + minutes) * 60 + seconds
    parts = text.split(":")
    if not parts or not all(p.isdigit() for p in parts) or len(parts) > 3:
        raise bad
    values = [int(p) for p in parts]
    if kind == "slurm":
        units = {1: (60,), 2: (60, 1), 3: (3600, 60, 1)}[len(values)]
    elif kind == "lsf":
        units = {1: (60,), 2: (3600, 60)}.get(len(values))
    elif kind == "sge":
        units = {1: (1,), 3: (3600, 60, 1)}.get(len(values))
    else:
        units = (3600, 60, 1)[-len(values):]
    if units is None:
        raise bad
    total = sum(v * u for v, u in zip(values, units))
    if total <= 0:
        raise bad
    return total


def lifetime_arguments(walltime_s: float) -> list[str]:
    """dask-worker flags that retire a worker before its job's walltime.

    The worker lives ``walltime - margin - stagger`` give or take a random ``stagger``, so it
    ends at least ``margin`` before the job is killed and the jobs of one run do not all end at
    once. ``margin`` and ``stagger`` come from ``sweep.cluster.lifetime-margin`` and
    ``sweep.cluster.lifetime-stagger``, capped at 10 % and 5 % of the walltime.

    Parameters
    ----------
    walltime_s : float
        The job's time limit [s].

    Returns
    -------
    list of str
        ``["--lifetime", "<s>s", "--lifetime-stagger", "<s>s"]``.
    """
    load_defaults()
    margin = min(_seconds("lifetime-margin"), 0.10 * walltime_s)
    stagger = min(_seconds("lifetime-stagger"), 0.05 * walltime_s)
    lifetime = walltime_s - margin - stagger
    return ["--lifetime", f"{int(lifetime)}s", "--lifetime-stagger", f"{int(stagger)}s"]


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


def _private_directory(path: str) -> str:
    expanded = Path(os.path.expandvars(str(path))).expanduser()
    try:
        expanded.mkdir(parents=True, exist_ok=True, mode=0o700)
    except OSError as exc:
        raise UserInputError(f"dask configuration: cannot create the directory {expanded}: {exc.strerror}") from None
    return str(expanded)


def cluster_kwargs(options: ClusterOptions, security=None) -> dict:
    """Keyword arguments for the dask-jobqueue cluster class of ``options.kind``.

    Flags override ``jobqueue.<kind>.*``; what is not given here is read by dask-jobqueue itself
    from the same configuration. Adds the worker lifetime flags (unless the configuration's
    ``worker-extra-args`` already sets ``--lifetime``), the dashboard address and the
    directories for credentials and logs.

    Parameters
    ----------
    options : ClusterOptions
        The command-line settings.
    security : distributed.Security or None
        The run's TLS credentials.
    """
    load_defaults()
    kind = options.kind
    if kind not in KINDS and kind not in _TEST_KINDS:
        raise UserInputError(f"--cluster: unknown batch system {kind!r}; use one of " + ", ".join(KINDS))
    section = f"jobqueue.{kind}"
    kwargs: dict = {"security": security}
    if options.cores is not None:
        kwargs["cores"] = options.cores
    if options.memory is not None:
        kwargs["memory"] = options.memory
    if options.queue is not None:
        if kind == "htcondor":
            raise UserInputError("--queue: HTCondor has no queues; set requirements in "
                                 "jobqueue.htcondor.job-extra-directives instead")
        kwargs["queue"] = options.queue
    if options.account is not None:
        keyword = _ACCOUNT_KEYWORD[kind]
        if keyword is None:
            raise UserInputError(f"--account: not supported for {kind}; leave it out")
        kwargs[keyword] = options.account

    walltime = options.walltime or dask.config.get(f"{section}.walltime", None)
    if options.walltime is not None and kind in KINDS and kind != "htcondor":
        kwargs["walltime"] = options.walltime
    extra_args = list(dask.config.get(f"{section}.worker-extra-args", None) or [])
    if walltime and "--lifetime" not in extra_args:
        extra_args += lifetime_arguments(walltime_seconds(walltime, kind))
    kwargs["worker_extra_args"] = extra_args

    scheduler_options = dict(dask.config.get(f"{section}.scheduler-options", None) or {})
    if options.dashboard_address is not None:
        scheduler_options["dashboard_address"] = options.dashboard_address
    else:
        scheduler_options.setdefault("dashboard_address", _setting("dashboard-address"))
    kwargs["scheduler_options"] = scheduler_options

    shared = dask.config.get(f"{section}.shared-temp-directory", None) or _setting("credentials-directory")
    kwargs["shared_temp_directory"] = _private_directory(shared)
    logs = dask.config.get(f"{section}.log-directory", None) or _setting("log-directory")
    if kind in KINDS:
        kwargs["log_directory"] = _private_directory(logs)
    return kwargs


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
    dask_jobqueue = _import_jobqueue()
    load_defaults()
    security = temporary_security()
    kwargs = cluster_kwargs(options, security)
    adapt = options.adapt
    if adapt is None and _setting("adapt"):
        try:
            adapt = parse_adapt(_setting("adapt"))
        except argparse.ArgumentTypeError as exc:
            raise UserInputError(f"dask configuration: sweep.cluster.adapt: {exc}") from None
    jobs = options.jobs or int(_setting("jobs"))
    if options.kind in _TEST_KINDS:
        from dask_jobqueue import local as dask_jobqueue
    cls = getattr(dask_jobqueue, {**KINDS, **_TEST_KINDS}[options.kind])
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
            with _JobKeeper(cluster, _seconds("resubmit-interval")):
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
