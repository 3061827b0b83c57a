"""Fault injection for the crash tests: kill this process at a named point.

Set ``QCPIPE_TEST_KILL_AT=<n>`` and the process sends itself SIGKILL at the
n-th crash point it passes (1-based), wherever that is: after a temporary file
is written but before it is renamed, inside a catalog transaction before the
commit, between the stages of a deployment.  ``QCPIPE_TEST_COUNT_POINTS=<file>``
appends the name of every point passed to that file instead.  Without either
variable a crash point costs one dictionary lookup.

``QCPIPE_TEST_IO_ERROR=<ERRNO>:<times>:<text>`` (say ``EIO:2:store``) makes
the first ``times`` crash points whose name contains ``text`` raise
``OSError(ERRNO)`` instead, and appends one line per raise to the file named by
``QCPIPE_TEST_IO_ERROR_LOG`` (if set): the retry tests count attempts with it.
"""

from __future__ import annotations

import errno
import os
import signal
import threading

_lock = threading.Lock()
_passed = 0
_raised = 0


def crash_point(name: str) -> None:
    """Die here if the test harness asked for it (see module docstring)."""
    global _passed
    kill_at = os.environ.get("QCPIPE_TEST_KILL_AT")
    count_file = os.environ.get("QCPIPE_TEST_COUNT_POINTS")
    io_error = os.environ.get("QCPIPE_TEST_IO_ERROR")
    if not kill_at and not count_file and not io_error:
        return
    if io_error:
        _maybe_raise(io_error, name)
    with _lock:
        _passed += 1
        n = _passed
        if count_file:
            with open(count_file, "a", encoding="utf-8") as fh:
                fh.write(f"{n} {name}\n")
    if kill_at and n == int(kill_at):
        os.kill(os.getpid(), signal.SIGKILL)


def _maybe_raise(spec: str, name: str) -> None:
    global _raised
    code, times, text = spec.split(":", 2)
    if text not in name:
        return
    with _lock:
        if _raised >= int(times):
            return
        _raised += 1
        log = os.environ.get("QCPIPE_TEST_IO_ERROR_LOG")
        if log:
            with open(log, "a", encoding="utf-8") as fh:
                fh.write(f"{code} {name}\n")
    number = getattr(errno, code)
    raise OSError(number, f"{os.strerror(number)} (injected by the test harness)", name)
