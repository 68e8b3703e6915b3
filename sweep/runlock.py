"""The single-writer lock of a store: ``<store>/run.lock`` with the writer's pid, host and heartbeat.

A second ``sweep run`` (or ``sweep verify``) on a store that a live process is writing is refused.
A lock left by a writer that was killed does not stay stuck: it is taken over when its process no
longer runs on this host (pid and start time checked with psutil), or when its heartbeat is older
than :data:`STALE_AFTER_S` (a writer on another host, or one that hangs).
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import json
import os
import socket
import threading
import time
import uuid
from pathlib import Path

from sweep.errors import UserInputError

LOCK = "run.lock"
#: A lock whose heartbeat is older than this is abandoned [s].
STALE_AFTER_S = 120.0
#: How often the writer refreshes its lock [s].
HEARTBEAT_S = 10.0


def _now_iso() -> str:
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


def write_atomic(path: Path, text: str) -> None:
    """Replace a file's text in one step (a reader sees the old text or the new, never a mix)."""
    temporary = path.with_name(f".{path.name}.{os.getpid()}.{threading.get_ident()}.tmp")
    temporary.write_text(text)
    os.replace(temporary, path)


def _process_start_time(pid: int) -> float | None:
    """Start time of a live process on this host [s since the epoch], or None if there is none."""
    import psutil

    try:
        return psutil.Process(pid).create_time()
    except (psutil.NoSuchProcess, psutil.ZombieProcess):
        return None
    except psutil.Error:  # exists, but we may not look at it
        return -1.0


class RunLock:
    """The store's single-writer lock (``<store>/run.lock``), with a heartbeat thread.

    Parameters
    ----------
    store : path
        The store folder.
    """

    def __init__(self, store):
        self.path = Path(store) / LOCK
        self._stop = threading.Event()
        self._thread = None
        self._record = None

    def _describe(self) -> dict:
        return {
            "pid": os.getpid(),
            "host": socket.gethostname(),
            "process_start": _process_start_time(os.getpid()),
            "started": _now_iso(),
            "heartbeat": time.time(),
            "token": uuid.uuid4().hex,
        }

    @staticmethod
    def holder(store) -> dict | None:
        """The live lock holder of a store, or None when the store is free (or its lock stale)."""
        try:
            record = json.loads((Path(store) / LOCK).read_text())
        except (FileNotFoundError, json.JSONDecodeError, OSError):
            return None
        if not isinstance(record, dict):
            return None
        if time.time() - float(record.get("heartbeat", 0.0)) > STALE_AFTER_S:
            return None
        if record.get("host") == socket.gethostname():
            started = _process_start_time(int(record.get("pid", -1)))
            if started is None:
                return None
            recorded = record.get("process_start")
            if started > 0 and recorded and abs(started - float(recorded)) > 1.0:
                return None  # the pid now belongs to another process
        return record

    def acquire(self) -> None:
        """Take the lock, or raise :class:`UserInputError` if a live writer holds it."""
        folder = self.path.parent
        record = self._describe()
        try:
            fd = os.open(self.path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            holder = self.holder(folder)
            if holder is not None:
                raise self.busy_error(folder, holder) from None
            write_atomic(self.path, json.dumps(record))  # stale: take it over
            time.sleep(0.1)  # two runs taking over at once: the last to write wins, the other leaves
            if self._token() != record["token"]:
                raise self.busy_error(folder, self.holder(folder) or {}) from None
        except OSError as exc:
            raise UserInputError(f"{folder}: cannot write there ({exc.strerror})") from None
        else:
            with os.fdopen(fd, "w") as stream:
                stream.write(json.dumps(record))
        self._record = record
        self._stop.clear()
        self._thread = threading.Thread(target=self._beat, name="sweep-lock-heartbeat", daemon=True)
        self._thread.start()

    @staticmethod
    def busy_error(folder, holder) -> UserInputError:
        return UserInputError(
            f"{folder}: is being written by another sweep run (pid {holder.get('pid')} on "
            f"{holder.get('host')}, since {holder.get('started')}); wait for it to end, or stop it"
        )

    def _token(self) -> str | None:
        try:
            return json.loads(self.path.read_text()).get("token")
        except (OSError, ValueError, AttributeError):
            return None

    def _beat(self) -> None:
        while not self._stop.wait(HEARTBEAT_S):
            if self._token() != self._record["token"]:
                return  # taken over (this process looked dead): never overwrite the new holder
            self._record["heartbeat"] = time.time()
            with contextlib.suppress(OSError):
                write_atomic(self.path, json.dumps(self._record))

    def release(self) -> None:
        """Stop the heartbeat and remove the lock (only if it is still ours)."""
        if self._record is None:
            return
        self._stop.set()
        if self._thread is not None:
            self._thread.join()
        if self._token() == self._record["token"]:
            with contextlib.suppress(OSError):
                self.path.unlink()
        self._record = None
