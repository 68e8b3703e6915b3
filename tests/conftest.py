"""Shared fixtures: small sweep definitions and a dask cluster of separate processes."""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

TESTS = Path(__file__).resolve().parent

ISHIGAMI_TEMPLATE = """\
[run]
name = "{name}"
mode = "saltelli"
base_rows = {base_rows}
seed = 20261202
block_rows = {block_rows}

[model]
kind = "ishigami"

[inputs]
x1 = {{ dist = "uniform", loc = -3.141592653589793, scale = 6.283185307179586 }}
x2 = {{ dist = "uniform", loc = -3.141592653589793, scale = 6.283185307179586 }}
x3 = {{ dist = "uniform", loc = -3.141592653589793, scale = 6.283185307179586 }}
"""


@pytest.fixture
def ishigami_spec(tmp_path):
    """Write a small Ishigami sweep definition; return its path.

    Call as ``ishigami_spec(name="ish", base_rows=32, block_rows=16)``; rows = 5 * base_rows.
    """

    def write(name="ish", base_rows=32, block_rows=16, folder=None):
        path = Path(folder or tmp_path) / f"{name}-{block_rows}.toml"
        path.write_text(ISHIGAMI_TEMPLATE.format(name=name, base_rows=base_rows, block_rows=block_rows))
        return path

    return write


def _free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _stop(process: subprocess.Popen) -> None:
    if process.poll() is None:
        os.killpg(process.pid, signal.SIGTERM)
        try:
            process.wait(timeout=10)
        except subprocess.TimeoutExpired:
            os.killpg(process.pid, signal.SIGKILL)
            process.wait()


class ExternalCluster:
    """A ``dask scheduler`` and ``dask worker`` processes on 127.0.0.1 (separate process groups)."""

    def __init__(self, n_workers=2):
        self.port = _free_port()
        self.address = f"tcp://127.0.0.1:{self.port}"
        self.processes = []
        self.env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(TESTS), os.environ.get("PYTHONPATH", "")]))
        self.dask = str(Path(sys.executable).with_name("dask"))
        self.scheduler = self._spawn("scheduler", "--host", "127.0.0.1", "--port", str(self.port), "--no-dashboard")
        for _ in range(n_workers):
            self._spawn("worker", self.address, "--host", "127.0.0.1", "--no-dashboard", "--nthreads", "1",
                        "--nworkers", "1", "--death-timeout", "60")
        self.wait_for_workers(n_workers)

    def _spawn(self, *args):
        process = subprocess.Popen([self.dask, *args], env=self.env, stdout=subprocess.DEVNULL,
                                   stderr=subprocess.DEVNULL, start_new_session=True)
        self.processes.append(process)
        return process

    def wait_for_workers(self, n, timeout=60.0):
        from distributed import Client

        deadline = time.monotonic() + timeout
        while True:
            try:
                with Client(self.address, timeout=5) as client:
                    client.wait_for_workers(n, timeout=max(1.0, deadline - time.monotonic()))
                    return
            except (OSError, TimeoutError):
                if time.monotonic() > deadline:
                    raise

    def close(self):
        for process in reversed(self.processes):
            _stop(process)


@pytest.fixture(scope="session")
def external_cluster():
    """A running dask scheduler with two worker processes, joined through its address."""
    cluster = ExternalCluster(n_workers=2)
    try:
        yield cluster
    finally:
        cluster.close()
