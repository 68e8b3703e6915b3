"""Shared fixtures: small sweep definitions and a dask cluster of separate processes."""

from __future__ import annotations

import math
import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

TESTS = Path(__file__).resolve().parent

YEAR_D = 365.25  # Julian year [d] (IAU)
# SAG13 central values, from memory (Kopparapu et al. 2018, ApJ 856, 122, which tabulates SAG13)
SAG13 = [(0.0, 3.4, 0.38, -0.19, 0.26), (3.4, math.inf, 0.73, -1.18, 0.59)]


def power_law_integral(gamma, alpha, beta, r1, r2, p1_d, p2_d):
    """Gamma (R2^a - R1^a)/a (P2^b - P1^b)/b, P in years: the analytic integral of the rate density
    Gamma R^alpha P^beta over dlnR dlnP (a logarithm where an exponent is 0)."""
    p1, p2 = p1_d / YEAR_D, p2_d / YEAR_D
    r_part = math.log(r2 / r1) if alpha == 0 else (r2**alpha - r1**alpha) / alpha
    p_part = math.log(p2 / p1) if beta == 0 else (p2**beta - p1**beta) / beta
    return gamma * r_part * p_part


def sag13_expected(r1, r2, p1_d, p2_d):
    """Planets per star of SAG13 in a radius-period box [1]: :func:`power_law_integral` summed over
    the pieces of :data:`SAG13`."""
    total = 0.0
    for low, high, gamma, alpha, beta in SAG13:
        a, b = max(r1, low), min(r2, high)
        if b > a:
            total += power_law_integral(gamma, alpha, beta, a, b, p1_d, p2_d)
    return total

#: The ``[model]`` and ``[inputs]`` tables of an Ishigami sweep: x1, x2, x3 uniform on [-pi, pi)
#: (Ishigami & Homma 1990). Put a ``[run]`` table before it.
ISHIGAMI_MODEL = """\
[model]
kind = "ishigami"

[inputs]
x1 = { dist = "uniform", loc = -3.141592653589793, scale = 6.283185307179586 }
x2 = { dist = "uniform", loc = -3.141592653589793, scale = 6.283185307179586 }
x3 = { dist = "uniform", loc = -3.141592653589793, scale = 6.283185307179586 }
"""

ISHIGAMI_TEMPLATE = """\
[run]
name = "{name}"
mode = "saltelli"
base_rows = {base_rows}
seed = 20261202
block_rows = {block_rows}

""" + ISHIGAMI_MODEL.replace("{", "{{").replace("}", "}}")


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
