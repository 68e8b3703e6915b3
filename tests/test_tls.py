"""Keeping others out: the run's scheduler talks TLS with certificates made for the run.

These tests start the cluster of :func:`sweep.cluster.batch_client` with dask-jobqueue's
``local`` job kind (each "job" is a process on this machine), so they need no batch system;
the SLURM tests in ``test_cluster.py`` repeat the main check with real SLURM jobs.
All traffic stays on 127.0.0.1.
"""

from __future__ import annotations

import socket
import ssl

import dask
import pytest
from distributed import Client

from sweep import cluster


@pytest.fixture(scope="module")
def secured(tmp_path_factory):
    """A TLS cluster with one worker "job" on loopback, and its client."""
    base = tmp_path_factory.mktemp("tls")
    settings = {
        "jobqueue.local.scheduler-options": {"host": "127.0.0.1"},
        "jobqueue.local.worker-extra-args": ["--host", "127.0.0.1"],
        "jobqueue.local.shared-temp-directory": str(base / "credentials"),
        "jobqueue.local.cores": 1,
        "jobqueue.local.memory": "1GiB",
        "jobqueue.local.processes": 1,
        "sweep.cluster.dashboard-address": "127.0.0.1:0",
    }
    cluster.load_defaults()  # before dask.config.set, which forgets keys added inside its block
    with dask.config.set(settings):
        with cluster.batch_client(cluster.ClusterOptions("local", jobs=1)) as client:
            client.wait_for_workers(1, timeout=60)
            yield client


def _host_port(address: str) -> tuple[str, int]:
    host, port = address.split("://", 1)[1].rsplit(":", 1)
    return host, int(port)


def _handshake_then_read(address: str, context: ssl.SSLContext) -> bytes:
    """Open a TLS connection to the scheduler and read; return what arrived (b"" = closed)."""
    host, port = _host_port(address)
    with socket.create_connection((host, port), timeout=10) as raw:
        with context.wrap_socket(raw, server_hostname=None) as tls:
            tls.settimeout(10)
            tls.sendall(b"\x00" * 16)
            return tls.recv(1)


def _trusting_context() -> ssl.SSLContext:
    """A client context that does not check the server: only the scheduler can refuse."""
    context = ssl.SSLContext(ssl.PROTOCOL_TLS_CLIENT)
    context.check_hostname = False
    context.verify_mode = ssl.CERT_NONE
    return context


def test_scheduler_and_workers_speak_tls_on_loopback(secured):
    assert secured.scheduler.address.startswith("tls://127.0.0.1:")
    workers = secured.scheduler_info()["workers"]
    assert workers and all(address.startswith("tls://127.0.0.1:") for address in workers)
    assert "127.0.0.1" in secured.dashboard_link  # dashboard stays on this machine


def test_the_runs_own_client_works(secured):
    assert secured.submit(sum, [1, 2, 3], pure=False).result(timeout=30) == 6  # common practice


def test_client_with_other_credentials_is_refused(secured):
    stranger = cluster.temporary_security()  # valid TLS, but certificates from another CA
    with pytest.raises((OSError, TimeoutError)):
        Client(secured.scheduler.address, security=stranger, timeout=5, set_as_default=False)


def test_scheduler_refuses_tls_without_client_certificate(secured):
    with pytest.raises((ssl.SSLError, ConnectionError, OSError)) as caught:
        if _handshake_then_read(secured.scheduler.address, _trusting_context()) == b"":
            raise ConnectionError("closed by the scheduler")
    assert not isinstance(caught.value, socket.timeout)


def test_scheduler_refuses_certificate_from_another_ca(secured, tmp_path):
    stranger = cluster.temporary_security()
    cert, key = tmp_path / "cert.pem", tmp_path / "key.pem"
    cert.write_text(stranger.tls_client_cert)
    key.write_text(stranger.tls_client_key)
    context = _trusting_context()
    context.load_cert_chain(cert, key)
    with pytest.raises((ssl.SSLError, ConnectionError, OSError)) as caught:
        if _handshake_then_read(secured.scheduler.address, context) == b"":
            raise ConnectionError("closed by the scheduler")
    assert not isinstance(caught.value, socket.timeout)


def test_plain_tcp_client_is_refused(secured):
    host, port = _host_port(secured.scheduler.address)
    with pytest.raises((OSError, TimeoutError)):
        Client(f"tcp://{host}:{port}", timeout=5, set_as_default=False)


def test_worker_credentials_are_private(secured, tmp_path_factory):
    files = list((tmp_path_factory.getbasetemp() / "tls0" / "credentials").iterdir())
    assert files  # the workers' copies of the run's certificates
    for path in files:
        assert path.stat().st_mode & 0o077 == 0  # readable by the user only (common practice)
