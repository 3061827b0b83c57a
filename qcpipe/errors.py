"""Domain errors.  Each message names the file, the key or line, what is
wrong and how to fix it; the CLI prints it as one line (no traceback)."""

from __future__ import annotations

import errno
import sqlite3


class QcpipeError(Exception):
    """Base of every expected failure: the CLI prints ``str(err)`` and exits 2."""


class ConfigError(QcpipeError, ValueError):
    """A station register, logger layout set, rule set or workspace file is invalid."""


class ParseError(QcpipeError, ValueError):
    """A raw file cannot be read with its logger layout."""


class MatchError(QcpipeError, LookupError):
    """A raw file matches no instrument or deployment of the station register."""


class ArchiveError(QcpipeError, OSError):
    """The archive cannot be read or written."""


#: OSError numbers worth another attempt: interrupted or busy calls and the
#: hiccups of network file systems.  Disk full, permissions and missing files
#: are permanent: trying again would fail the same way.
TRANSIENT_ERRNOS = frozenset({errno.EAGAIN, errno.EINTR, errno.EBUSY, errno.EIO, errno.ETIMEDOUT,
                              errno.ESTALE, errno.ECONNRESET, errno.ENETUNREACH, errno.EHOSTUNREACH})


class SourceChanged(QcpipeError, OSError):
    """A file that vanished or changed between being hashed and being copied or read."""


def is_transient(exc: BaseException) -> bool:
    """Whether ``exc`` is a passing I/O failure that a later attempt may not meet.

    True for ``OSError`` with a number in :data:`TRANSIENT_ERRNOS` and for
    SQLite's "database is locked/busy"; False for everything else, among them
    every :class:`QcpipeError` (bad input or configuration, disk full, a busy
    archive), which the same attempt again would meet again.
    """
    if isinstance(exc, QcpipeError):
        return False
    if isinstance(exc, sqlite3.OperationalError):
        text = str(exc).lower()
        return "locked" in text or "busy" in text
    return isinstance(exc, OSError) and exc.errno in TRANSIENT_ERRNOS
