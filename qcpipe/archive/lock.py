"""One run at a time per archive: an advisory lock on ``<archive>/.lock``.

``fcntl.flock`` locks belong to the open file: the operating system releases
them when the process ends, however it ends (a crash or SIGKILL leaves no
stale lock).  The lock file also records who holds it, for the message.
"""

from __future__ import annotations

import datetime as dt
import fcntl
import os
import time
from pathlib import Path

from ..errors import ArchiveError


class ArchiveBusy(ArchiveError):
    """Another run holds the archive."""


_HELD: dict[str, list] = {}       # lock path -> [fd, holders] for locks this process holds


class ArchiveLock:
    """Re-entrant within one process (the command takes it before the orchestrator starts, the
    run takes it again), exclusive between processes."""

    def __init__(self, root: str | Path):
        self.path = Path(root) / ".lock"
        self.fd: int | None = None

    def acquire(self, wait_s: float = 0.0) -> "ArchiveLock":
        self.path.parent.mkdir(parents=True, exist_ok=True)
        key = str(self.path.resolve())
        if key in _HELD:
            _HELD[key][1] += 1
            self.fd, self._key = _HELD[key][0], key
            return self
        fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        deadline = time.monotonic() + max(wait_s, 0.0)
        while True:
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
                break
            except BlockingIOError:
                if time.monotonic() >= deadline:
                    holder = os.pread(fd, 200, 0).decode("utf-8", "replace").strip() or "unknown"
                    os.close(fd)
                    raise ArchiveBusy(f"archive {self.path.parent} is in use by another qcpipe run ({holder}); "
                                      "it finishes on its own: try again later, or set QCPIPE_LOCK_WAIT "
                                      "(seconds) to wait for it") from None
                time.sleep(0.2)
        os.ftruncate(fd, 0)
        stamp = dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
        os.pwrite(fd, f"pid {os.getpid()}, since {stamp}".encode(), 0)
        self.fd, self._key = fd, key
        _HELD[key] = [fd, 1]
        return self

    def release(self) -> None:
        if self.fd is None:
            return
        entry = _HELD.get(self._key)
        if entry is not None:
            entry[1] -= 1
            if entry[1] > 0:
                self.fd = None
                return
            del _HELD[self._key]
        try:
            os.ftruncate(self.fd, 0)
            fcntl.flock(self.fd, fcntl.LOCK_UN)
        finally:
            os.close(self.fd)
            self.fd = None

    def __enter__(self):
        return self.acquire(float(os.environ.get("QCPIPE_LOCK_WAIT", "0") or 0))

    def __exit__(self, *exc):
        self.release()
