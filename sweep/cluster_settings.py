"""Settings of batch-queue clusters: the command-line flags, dask's configuration and the job arguments.

``sweep run --cluster`` starts dask workers as batch jobs (:mod:`sweep.cluster`). Their settings
follow dask's conventions: the ``jobqueue.<kind>`` section of dask's configuration supplies
defaults (``sweep/data/jobqueue.yaml`` fills the keys dask-jobqueue leaves empty; the user's own
dask YAML wins over both) and command-line flags override them. sweep's own cluster settings
live under ``sweep.cluster`` in the same configuration. This module turns all of that into the
keyword arguments of a dask-jobqueue cluster class (:func:`cluster_kwargs`); it starts nothing.
"""

from __future__ import annotations

import argparse
import os
import re
import threading
from dataclasses import dataclass, fields
from importlib import resources
from pathlib import Path

import dask
import dask.config
import yaml

from sweep.engine import WORKER_ENVIRONMENT
from sweep.errors import UserInputError

__all__ = [
    "KINDS",
    "TEST_KINDS",
    "ClusterOptions",
    "add_cluster_arguments",
    "cluster_kwargs",
    "import_jobqueue",
    "lifetime_arguments",
    "load_defaults",
    "parse_adapt",
    "run_config",
    "seconds_setting",
    "setting",
    "walltime_seconds",
]

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
TEST_KINDS = {"local": "LocalCluster"}

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


def positive_int(text: str) -> int:
    """argparse type: a whole number >= 1 (``--jobs``, ``--cores``, ``sweep run --workers``)."""
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
    group.add_argument("--jobs", type=positive_int, default=None, metavar="N",
                       help="worker jobs to keep running (default: sweep.cluster.jobs, 2)")
    group.add_argument("--cores", type=positive_int, default=None, metavar="C",
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
            jobqueue = import_jobqueue()
            ours = yaml.safe_load(resources.files("sweep").joinpath("data/jobqueue.yaml").read_text())
            dask.config.update_defaults(ours)
            theirs = yaml.safe_load(resources.files(jobqueue).joinpath("jobqueue.yaml").read_text())
            _defaults = dask.config.merge(theirs, ours)
        else:
            dask.config.update(dask.config.config, _defaults, priority="old")


def import_jobqueue():
    try:
        import dask_jobqueue
    except ModuleNotFoundError as exc:
        raise UserInputError(
            "--cluster: the dask-jobqueue package is not installed; install it with "
            "pip install 'sweep[cluster]'"
        ) from exc
    return dask_jobqueue


def setting(key: str):
    return dask.config.get(f"sweep.cluster.{key}")


def seconds_setting(key: str) -> float:
    from dask.utils import parse_timedelta

    value = setting(key)
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
        "distributed.scheduler.worker-ttl": f"{seconds_setting('worker-ttl')}s",
        "distributed.deploy.lost-worker-timeout": f"{seconds_setting('lost-worker-timeout')}s",
        "distributed.comm.timeouts.connect": f"{seconds_setting('connect-timeout')}s",
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
    margin = min(seconds_setting("lifetime-margin"), 0.10 * walltime_s)
    stagger = min(seconds_setting("lifetime-stagger"), 0.05 * walltime_s)
    lifetime = walltime_s - margin - stagger
    return ["--lifetime", f"{int(lifetime)}s", "--lifetime-stagger", f"{int(stagger)}s"]


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
    if kind not in KINDS and kind not in TEST_KINDS:
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
    if kind in KINDS:  # a batch script (dask-jobqueue's local test kind runs its lines as commands)
        prologue = list(dask.config.get(f"{section}.job-script-prologue", None) or [])
        kwargs["job_script_prologue"] = prologue + [f"export {key}={value}" for key, value in WORKER_ENVIRONMENT.items()]

    scheduler_options = dict(dask.config.get(f"{section}.scheduler-options", None) or {})
    if options.dashboard_address is not None:
        scheduler_options["dashboard_address"] = options.dashboard_address
    else:
        scheduler_options.setdefault("dashboard_address", setting("dashboard-address"))
    kwargs["scheduler_options"] = scheduler_options

    shared = dask.config.get(f"{section}.shared-temp-directory", None) or setting("credentials-directory")
    kwargs["shared_temp_directory"] = _private_directory(shared)
    logs = dask.config.get(f"{section}.log-directory", None) or setting("log-directory")
    if kind in KINDS:
        kwargs["log_directory"] = _private_directory(logs)
    return kwargs
