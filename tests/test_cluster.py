"""Batch-queue clusters: flags and dask configuration, and real SLURM worker jobs that fail.

The tests marked ``slurm`` need a running one-node SLURM (``.ci/slurm-setup.sh`` starts one). Where
there is none they are skipped with the reason, except under ``SWEEP_REQUIRE_ALL=1`` (CI), where a
missing SLURM fails them. Every connection stays on 127.0.0.1: the scheduler binds there and the
workers are started with ``--host 127.0.0.1``.
"""

from __future__ import annotations

import argparse
import os
import shutil
import signal
import subprocess
import sys
import threading
import time

import cloudpickle
import dask
import numpy as np
import pytest
import xarray as xr

from sweep import cluster
from sweep.engine import WORKER_ENVIRONMENT
from sweep.errors import UserInputError

from conftest import ISHIGAMI_MODEL

# ------------------------------------------------------------------------------- flags, config


@pytest.mark.parametrize(
    "kind, text, seconds",
    [
        # formats as documented for sbatch --time, qsub -l walltime, h_rt and bsub -W (from memory)
        ("slurm", "30", 1800),
        ("slurm", "30:15", 1815),
        ("slurm", "01:00:00", 3600),
        ("slurm", "2-12", 216000),
        ("slurm", "1-00:00:10", 86410),
        ("pbs", "00:30:00", 1800),
        ("pbs", "90", 90),
        ("sge", "3600", 3600),
        ("sge", "1:00:00", 3600),
        ("lsf", "00:30", 1800),
        ("lsf", "45", 2700),
        ("htcondor", "02:00:00", 7200),
    ],
)
def test_walltime_formats(kind, text, seconds):
    assert cluster.walltime_seconds(text, kind) == seconds


@pytest.mark.parametrize("kind, text", [("slurm", "1h"), ("pbs", "1:2:3:4"), ("lsf", "1:00:00"),
                                        ("sge", "10:00"), ("slurm", "0"), ("slurm", "x-1")])
def test_bad_walltime_is_one_line_naming_the_flag(kind, text):
    with pytest.raises(UserInputError) as caught:
        cluster.walltime_seconds(text, kind)
    message = str(caught.value)
    assert message.startswith("--walltime:") and text in message and "\n" not in message


def test_workers_retire_before_walltime():
    walltime = 3600
    flags = cluster.lifetime_arguments(walltime)
    lifetime = int(flags[flags.index("--lifetime") + 1].rstrip("s"))
    stagger = int(flags[flags.index("--lifetime-stagger") + 1].rstrip("s"))
    # packaged defaults: margin 5 min, stagger 2 min (produced by this code's configuration)
    assert (lifetime, stagger) == (3600 - 300 - 120, 120)
    assert lifetime + stagger <= walltime - 300  # the latest retirement still leaves the margin


def test_lifetime_margins_shrink_for_short_jobs():
    flags = cluster.lifetime_arguments(60)
    lifetime = int(flags[1].rstrip("s"))
    stagger = int(flags[3].rstrip("s"))
    assert 0 < lifetime and lifetime + stagger < 60  # 10 % and 5 % caps (produced by this code)


def _parse(argv):
    parser = argparse.ArgumentParser(prog="sweep run")
    parser.add_argument("spec")
    cluster.add_cluster_arguments(parser)
    return parser.parse_args(argv)


def test_flags_become_options():
    args = _parse(["s.toml", "--cluster", "slurm", "--jobs", "3", "--cores", "2", "--memory", "3GiB",
                   "--walltime", "00:20:00", "--queue", "short", "--account", "astro",
                   "--adapt", "1:8", "--dashboard-address", "127.0.0.1:9999"])
    options = cluster.ClusterOptions.from_args(args)
    assert options == cluster.ClusterOptions("slurm", 3, 2, "3GiB", "00:20:00", "short", "astro", (1, 8),
                                             "127.0.0.1:9999")


def test_flags_default_to_none_so_config_decides():
    options = cluster.ClusterOptions.from_args(_parse(["s.toml", "--cluster", "pbs"]))
    assert options == cluster.ClusterOptions("pbs")


@pytest.mark.parametrize("argv", [["--cluster", "torque"], ["--cluster", "slurm", "--adapt", "5:2"],
                                  ["--cluster", "slurm", "--adapt", "2"], ["--cluster", "slurm", "--jobs", "0"],
                                  ["--cluster", "slurm", "--memory", "lots"]])
def test_bad_flags_exit_with_status_2(argv, capsys):
    with pytest.raises(SystemExit) as caught:
        _parse(["s.toml", *argv])
    assert caught.value.code == 2
    assert "error:" in capsys.readouterr().err


def _job_script(kind, options, tmp_path, **settings):
    """The batch script dask-jobqueue would submit, with sweep's flags and configuration."""
    import dask_jobqueue

    config = {f"jobqueue.{kind}.shared-temp-directory": str(tmp_path / "credentials"),
              f"jobqueue.{kind}.log-directory": str(tmp_path / "logs"),
              f"jobqueue.{kind}.scheduler-options": {"host": "127.0.0.1"},
              "sweep.cluster.dashboard-address": "127.0.0.1:0", **settings}
    cluster.load_defaults()
    with dask.config.set(config):
        kwargs = cluster.cluster_kwargs(options, cluster.temporary_security())
        made = getattr(dask_jobqueue, cluster.KINDS[kind])(**kwargs)
        try:
            return made.job_script(), made
        finally:
            made.close()


def test_flags_override_dask_config_which_overrides_packaged_defaults(tmp_path):
    options = cluster.ClusterOptions("slurm", cores=2, walltime="00:10:00", queue="short", account="astro")
    script, made = _job_script("slurm", options, tmp_path, **{"jobqueue.slurm.memory": "3GiB",
                                                               "jobqueue.slurm.cores": 4})
    assert "--cpus-per-task=2" in script  # flag beats jobqueue.slurm.cores
    assert "--mem=3G" in script  # dask config beats the packaged 4GiB
    assert "-t 00:10:00" in script and "-p short" in script and "-A astro" in script
    assert "--lifetime 510s --lifetime-stagger 30s" in script  # 600 s - 60 s - 30 s (produced by this code)
    assert "--tls-ca-file" in script and made.scheduler_address.startswith("tls://127.0.0.1:")


def test_packaged_defaults_fill_what_dask_jobqueue_leaves_empty(tmp_path):
    script, _ = _job_script("slurm", cluster.ClusterOptions("slurm"), tmp_path)
    assert "--cpus-per-task=1" in script and "--mem=4G" in script  # sweep/data/jobqueue.yaml
    assert "-J sweep-worker" in script
    assert "-t 00:30:00" in script  # dask-jobqueue's own default walltime, with lifetime flags
    assert "--lifetime 1530s" in script


@pytest.mark.parametrize("kind, expected", [("pbs", "#PBS -l walltime=01:00:00"), ("sge", "#$ -l h_rt=01:00:00"),
                                            ("lsf", "#BSUB -W 01:00"), ("htcondor", "--lifetime 3180s")])
def test_other_batch_systems_get_walltime_and_tls(kind, expected, tmp_path):
    walltime = "01:00" if kind == "lsf" else "01:00:00"
    script, _ = _job_script(kind, cluster.ClusterOptions(kind, walltime=walltime), tmp_path)
    assert expected in script and "--lifetime" in script and "tls://" in script


def test_job_script_exports_worker_malloc_settings_after_the_users_prologue(tmp_path):
    # The nanny keeps an environment variable that is already set (distributed's
    # _get_env_variables), so the exports replace its MALLOC_TRIM_THRESHOLD_=65536.
    script, _ = _job_script("slurm", cluster.ClusterOptions("slurm"), tmp_path,
                            **{"jobqueue.slurm.job-script-prologue": ["module load python"]})
    exports = [f"export {key}={value}" for key, value in WORKER_ENVIRONMENT.items()]
    positions = [script.index(line) for line in ["module load python", *exports]]
    assert positions == sorted(positions) and positions[-1] < script.index("distributed.cli.dask_worker")


def test_user_dask_config_wins_over_packaged_defaults():
    # DASK_* variables are the user's configuration, read when dask is imported (dask's convention).
    code = ("from sweep import cluster; import dask; cluster.load_defaults(); "
            "print(dask.config.get('jobqueue.slurm.memory'), dask.config.get('jobqueue.slurm.cores'))")
    env = {**os.environ, "DASK_JOBQUEUE__SLURM__MEMORY": "7GiB"}
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["7GiB", "1"]  # user's memory kept; packaged cores filled in


def test_unsupported_options_for_htcondor_are_user_errors(tmp_path):
    with dask.config.set({"jobqueue.htcondor.shared-temp-directory": str(tmp_path),
                          "jobqueue.htcondor.log-directory": str(tmp_path)}):
        for options in (cluster.ClusterOptions("htcondor", queue="long"),
                        cluster.ClusterOptions("htcondor", account="astro")):
            with pytest.raises(UserInputError):
                cluster.cluster_kwargs(options)


def test_run_config_sets_failure_detection_from_sweep_config():
    with dask.config.set({"sweep.cluster.worker-ttl": "45 seconds"}):
        settings = cluster.run_config()
    assert settings["distributed.scheduler.worker-ttl"] == "45.0s"
    with dask.config.set({"sweep.cluster.worker-ttl": "soon"}), pytest.raises(UserInputError):
        cluster.run_config()


# ------------------------------------------------------------------------------- real SLURM

SPEC_TEXT = """
[run]
name = "cluster-test"
mode = "saltelli"
base_rows = 64            # rows = 64 (2 + 3) = 320
seed = 20240607
block_rows = 8            # 40 blocks

""" + ISHIGAMI_MODEL

BLOCK_DELAY_S = 0.3  # long enough that a worker can be cancelled or stopped mid-run


class SlowModel:
    """The spec's model, slowed down so that the run is still going when a worker is hit."""

    def __init__(self, inner, delay_s):
        self.inner, self.delay_s = inner, delay_s

    def outputs(self):
        return self.inner.outputs()

    def coords(self):
        return self.inner.coords()

    def evaluate(self, block):
        time.sleep(self.delay_s)
        return self.inner.evaluate(block)


# Worker jobs cannot import this test module: ship SlowModel by value.
cloudpickle.register_pickle_by_value(sys.modules[__name__])


def _slurm_missing() -> str | None:
    if shutil.which("sinfo") is None or shutil.which("sbatch") is None:
        return "SLURM is not installed (run .ci/slurm-setup.sh as root)"
    try:
        state = subprocess.run(["sinfo", "--noheader", "--format=%T"], capture_output=True, text=True,
                               timeout=20).stdout.split()
    except (OSError, subprocess.TimeoutExpired) as exc:
        return f"sinfo failed: {exc}"
    if not {"idle", "mixed", "allocated"} & set(state):
        return f"no SLURM node takes jobs (sinfo says {state or 'nothing'}; run .ci/slurm-setup.sh)"
    return None


@pytest.fixture(scope="module")
def slurm():
    reason = _slurm_missing()
    if reason:
        if os.environ.get("SWEEP_REQUIRE_ALL") == "1":
            pytest.fail(f"SWEEP_REQUIRE_ALL=1 but {reason}")
        pytest.skip(reason)


@pytest.fixture(scope="module")
def spec(tmp_path_factory):
    from sweep.spec import parse_spec

    path = tmp_path_factory.mktemp("spec") / "cluster-test.toml"
    path.write_text(SPEC_TEXT)
    return parse_spec(SPEC_TEXT, path)


@pytest.fixture(scope="module")
def local_cube(spec, tmp_path_factory):
    """The same sweep on a clean local cluster: the reference cube."""
    from sweep.engine import run_sweep

    from distributed import Client, LocalCluster

    output = tmp_path_factory.mktemp("local") / "cube.zarr"
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None) as local:
        with Client(local, set_as_default=False) as client:
            run_sweep(spec, output=output, client=client, progress=False)
    with xr.open_zarr(output) as cube:
        return cube.load()


@pytest.fixture()
def slurm_settings(tmp_path):
    settings = {
        "jobqueue.slurm.scheduler-options": {"host": "127.0.0.1"},
        "jobqueue.slurm.worker-extra-args": ["--host", "127.0.0.1"],
        "jobqueue.slurm.shared-temp-directory": str(tmp_path / "credentials"),
        "jobqueue.slurm.log-directory": str(tmp_path / "logs"),
        "sweep.cluster.dashboard-address": "127.0.0.1:0",
        "sweep.cluster.lost-worker-timeout": "2s",
        "sweep.cluster.resubmit-interval": "1s",
    }
    cluster.load_defaults()  # before dask.config.set, which forgets keys added inside its block
    with dask.config.set(settings):
        yield


def _run_with_hit(spec, output, client, hit, after_blocks=4):
    """Run the sweep; once ``after_blocks`` blocks are recorded call ``hit()`` from a watcher thread.

    Returns the run's summary and the number of blocks done when ``hit`` ran.
    """
    from sweep import store
    from sweep.engine import run_sweep

    seen = {}
    done = threading.Event()

    def watch():
        while not done.is_set():
            try:
                blocks = store.status(output)["blocks_done"]
            except Exception:  # the store is not made yet
                blocks = 0
            if blocks >= after_blocks:
                seen["blocks_done"] = blocks
                seen["hit"] = hit()
                return
            time.sleep(0.05)

    watcher = threading.Thread(target=watch, daemon=True)
    watcher.start()
    try:
        summary = run_sweep(spec, output=output, client=client, progress=False,
                            model=SlowModel(spec.build_model(), BLOCK_DELAY_S))
    finally:
        done.set()
        watcher.join(timeout=30)
    return summary, seen


def _busy_worker(client) -> str:
    """Address of a worker that is running a task now (the other is left alone)."""
    for _ in range(200):
        busy = [address for address, keys in client.processing().items() if keys]
        if busy:
            return sorted(busy)[0]
        time.sleep(0.02)
    raise AssertionError("no worker was processing a task")


def _job_of(client, address) -> str:
    name = client.scheduler_info()["workers"][address]["name"]
    return client.cluster.workers[name].job_id


def _assert_same_cube(output, reference):
    with xr.open_zarr(output) as cube:
        xr.testing.assert_equal(cube.load(), reference)  # values and coordinates; attrs hold times
        np.testing.assert_array_equal(cube["y"].values, reference["y"].values)


def _wait_for(predicate, timeout_s=90):
    deadline = time.monotonic() + timeout_s
    while not predicate():
        if time.monotonic() >= deadline:
            return False
        time.sleep(0.5)
    return True


def _queued_jobs() -> list[str]:
    out = subprocess.run(["squeue", "--noheader", "--name=sweep-worker", "--format=%i"],
                         capture_output=True, text=True, check=True).stdout
    return out.split()


@pytest.mark.slurm
def test_cancelled_worker_job_tasks_move_and_cube_matches_local(slurm, slurm_settings, spec, local_cube, tmp_path):
    output = tmp_path / "cube.zarr"
    options = cluster.ClusterOptions("slurm", jobs=2, cores=1, memory="1GiB", walltime="00:10:00")
    with cluster.batch_client(options) as client:
        client.wait_for_workers(2, timeout=120)
        assert all(address.startswith("tls://127.0.0.1:") for address in client.scheduler_info()["workers"])
        with pytest.raises((OSError, TimeoutError)):  # without the run's credentials: refused
            from distributed import Client

            Client(client.scheduler.address, security=cluster.temporary_security(), timeout=5,
                   set_as_default=False)
        first_jobs = {_job_of(client, address) for address in client.scheduler_info()["workers"]}

        def cancel_a_busy_job():
            job = _job_of(client, _busy_worker(client))
            subprocess.run(["scancel", job], check=True)
            return job

        summary, seen = _run_with_hit(spec, output, client, cancel_a_busy_job)
        assert seen["blocks_done"] < spec.n_blocks  # the job was cancelled mid-run
        assert summary.blocks_computed == spec.n_blocks
        _assert_same_cube(output, local_cube)

        def replaced():  # a new job took the cancelled one's place
            jobs = {_job_of(client, a) for a in client.scheduler_info()["workers"]}
            return len(jobs) == 2 and seen["hit"] not in jobs and jobs - first_jobs
        assert _wait_for(replaced), "the cancelled worker job was not replaced"
    assert _wait_for(lambda: not _queued_jobs(), 30), "worker jobs left in the queue after the run"


@pytest.mark.slurm
def test_worker_that_stops_answering_is_dropped_and_cube_matches_local(slurm, slurm_settings, spec, local_cube,
                                                                       tmp_path):
    output = tmp_path / "cube.zarr"
    options = cluster.ClusterOptions("slurm", jobs=2, cores=1, memory="1GiB", walltime="00:10:00")
    stopped = []
    with dask.config.set({"sweep.cluster.worker-ttl": "5s"}), cluster.batch_client(options) as client:
        client.wait_for_workers(2, timeout=120)
        pids = client.run(os.getpid)  # worker processes run on this machine (one-node SLURM)

        def stop_a_busy_worker():
            address = _busy_worker(client)
            os.kill(pids[address], signal.SIGSTOP)
            stopped.append(pids[address])
            return address

        try:
            summary, seen = _run_with_hit(spec, output, client, stop_a_busy_worker)
            assert seen["blocks_done"] < spec.n_blocks  # stopped mid-run
            assert summary.blocks_computed == spec.n_blocks
            assert seen["hit"] not in client.scheduler_info()["workers"]  # dropped after the TTL
            _assert_same_cube(output, local_cube)
        finally:
            for pid in stopped:  # never leave a stopped process behind
                try:
                    os.kill(pid, signal.SIGCONT)
                except ProcessLookupError:
                    pass
    assert _wait_for(lambda: not _queued_jobs(), 30), "worker jobs left in the queue after the run"


def test_example_jobqueue_yaml_is_dask_config_for_a_slurm_job(tmp_path):
    import yaml
    from pathlib import Path

    example = Path(__file__).parents[1] / "workflows" / "cluster" / "jobqueue.yaml"
    settings = yaml.safe_load(example.read_text())
    settings["jobqueue"]["slurm"].update({"queue": "short", "account": "astro-yields",
                                          "shared-temp-directory": str(tmp_path / "credentials")})
    cluster.load_defaults()
    with dask.config.set(settings):
        script, _ = _job_script("slurm", cluster.ClusterOptions("slurm"), tmp_path)
    for line in ("--cpus-per-task=4", "--mem=16G", "-t 02:00:00", "-p short", "-A astro-yields"):
        assert line in script  # the example's values reach the batch script


BATCH_SPEC_TEXT = SPEC_TEXT.replace("base_rows = 64            # rows = 64 (2 + 3) = 320",
                                    "base_rows = 512           # rows = 512 (2 + 3) = 2560, 320 blocks")


def _wait_job_gone(job, timeout_s=180):
    return _wait_for(lambda: not subprocess.run(["squeue", "--noheader", "--jobs", job, "--format=%i"],
                                                capture_output=True, text=True).stdout.strip(), timeout_s)


@pytest.mark.slurm
def test_batch_script_client_job_resumes_when_started_again(slurm, tmp_path):
    """workflows/cluster/sweep-client.sbatch: the client as a job, cancelled mid-run, then started again."""
    from pathlib import Path

    from distributed import Client, LocalCluster
    from sweep import store
    from sweep.engine import run_sweep
    from sweep.spec import parse_spec

    script = Path(__file__).parents[1] / "workflows" / "cluster" / "sweep-client.sbatch"
    spec_path = tmp_path / "batch.toml"
    spec_path.write_text(BATCH_SPEC_TEXT)
    output = tmp_path / "cube.zarr"
    sweep_command = tmp_path / "sweep"
    sweep_command.write_text(f'#!/bin/sh\nexec "{sys.executable}" -m sweep "$@"\n')
    sweep_command.chmod(0o755)
    env = {**os.environ, "SWEEP": str(sweep_command), "SWEEP_JOBS": "1", "SWEEP_WORKER_WALLTIME": "00:10:00",
           # dask configuration through DASK_* variables: loopback only, files under tmp_path
           "DASK_JOBQUEUE__SLURM__SCHEDULER_OPTIONS": '{"host": "127.0.0.1"}',
           "DASK_JOBQUEUE__SLURM__WORKER_EXTRA_ARGS": '["--host", "127.0.0.1"]',
           "DASK_JOBQUEUE__SLURM__MEMORY": "1GiB",
           "DASK_JOBQUEUE__SLURM__SHARED_TEMP_DIRECTORY": str(tmp_path / "credentials"),
           "DASK_JOBQUEUE__SLURM__LOG_DIRECTORY": str(tmp_path / "logs"),
           "DASK_SWEEP__CLUSTER__DASHBOARD_ADDRESS": "127.0.0.1:0"}
    submit = ["sbatch", "--parsable", "--mem=1G", f"--chdir={tmp_path}", str(script), str(spec_path),
              "--output", str(output)]

    def blocks_done():
        try:
            return store.status(output)["blocks_done"]
        except Exception:  # not made yet
            return 0

    def log_of(job):
        path = tmp_path / f"sweep-client-{job}.log"
        return path.read_text()[-2000:] if path.exists() else "(no log)"

    first = subprocess.run(submit, env=env, capture_output=True, text=True, check=True).stdout.strip()
    try:
        _wait_for(lambda: blocks_done() >= 10 or _wait_job_gone(first, 0), 120)
        assert blocks_done() >= 10, f"the client job computed nothing:\n{log_of(first)}"
    finally:
        subprocess.run(["scancel", first], check=False)
    assert _wait_job_gone(first, 60)
    done_at_cancel = blocks_done()
    assert done_at_cancel < 320  # cancelled mid-run
    assert _wait_for(lambda: not _queued_jobs(), 60), "the cancelled client left worker jobs behind"

    second = subprocess.run(submit, env=env, capture_output=True, text=True, check=True).stdout.strip()
    try:
        assert _wait_job_gone(second, 240), "the restarted client job did not finish"
    finally:
        subprocess.run(["scancel", second], check=False)
    assert "exited with status 0" in log_of(second), log_of(second)
    assert store.status(output)["blocks_done"] == 320

    reference = tmp_path / "reference.zarr"
    spec = parse_spec(BATCH_SPEC_TEXT, spec_path)
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None) as local:
        with Client(local, set_as_default=False) as client:
            run_sweep(spec, output=reference, client=client, progress=False)
    with xr.open_zarr(reference) as expected:
        _assert_same_cube(output, expected.load())
