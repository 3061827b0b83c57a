"""One run at a time per archive: an advisory lock on ``<archive>/.lock``.

``fcntl.flock`` locks belong to the open file: the operating system releases
them when the process ends, however it ends (a crash or SIGKILL leaves no
stale lock).  The lock file also records who holds it, for the message.
A command that writes takes it first, so an archive it cannot write (read-only disk or
folder) stops it here, with one line, before anything else is done.
"""

from __future__ import annotations

import datetime as dt
import errno
import fcntl
import os
import time
from pathlib import Path

from ..errors import ArchiveError


class ArchiveBusy(ArchiveError):
    """Another run holds the archive."""


class ArchiveReadOnly(ArchiveError):
    """The archive is on a read-only disk or in a folder this process cannot write."""


def archive_is_read_only(root: Path, catalog: Path | None = None) -> bool:
    """Whether this process cannot write the archive folder ``root`` (or its ``catalog`` file): a read-only
    mount (EROFS, also for root) or missing write permission.  A folder not made yet is not read-only."""
    if not root.exists():
        return False
    if not os.access(root, os.W_OK):
        return True
    return catalog is not None and catalog.exists() and not os.access(catalog, os.W_OK)


def read_only_message(root: Path) -> str:
    """The one line that says a writing command cannot run on the read-only archive ``root``."""
    return (f"archive {root} is read-only: 'process', 'rerun' and 'apply-clock' write to it; 'audit', 'holdings', "
            "'diff', 'lineage' and 'package --out <folder elsewhere>' work on it as it is (make it writable, "
            "or copy it to a writable disk, to process)")


_HELD: dict[str, list] = {}       # lock path -> [fd, holders] for locks this process holds


class ArchiveLock:
    """Re-entrant within one process (the command takes it before the orchestrator starts, the
    run takes it again), exclusive between processes."""

    def __init__(self, root: str | Path):
        self.path = Path(root) / ".lock"
        self.fd: int | None = None

    def acquire(self, wait_s: float = 0.0) -> "ArchiveLock":
        key = str(self.path.resolve())
        if key in _HELD:
            _HELD[key][1] += 1
            self.fd, self._key = _HELD[key][0], key
            return self
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as err:
            if err.errno in (errno.EROFS, errno.EACCES, errno.EPERM) and archive_is_read_only(self.path.parent):
                raise ArchiveReadOnly(read_only_message(self.path.parent)) from None
            if err.errno in (errno.ENOSPC, errno.EDQUOT):
                raise ArchiveError(f"disk full while making the archive's lock file {self.path}: free space on "
                                   "the archive's disk and run again") from None
            if err.errno in (errno.EACCES, errno.EPERM):     # a shared archive: the lock file made by another user
                raise ArchiveError(f"cannot open the archive's lock file {self.path} ({err.strerror}): every user "
                                   "who runs qcpipe on this archive needs write permission on it (for example "
                                   "'chmod g+w' on the file for a group-shared archive)") from None
            raise
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
        stamp = dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
        try:
            os.ftruncate(fd, 0)
            os.pwrite(fd, f"pid {os.getpid()}, since {stamp}".encode(), 0)
        except OSError as err:      # a full disk: the lock holds all the same, only the note of its holder is lost
            if err.errno not in (errno.ENOSPC, errno.EDQUOT):
                os.close(fd)
                raise
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
