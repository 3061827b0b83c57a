"""Fault injection for the crash tests: kill this process at a named point.

Set ``QCPIPE_TEST_KILL_AT=<n>`` and the process sends itself SIGKILL at the
n-th crash point it passes (1-based), wherever that is: after a temporary file
is written but before it is renamed, inside a catalog transaction before the
commit, between the stages of a deployment.  ``QCPIPE_TEST_COUNT_POINTS=<file>``
appends the name of every point passed to that file instead.  Without either
variable a crash point costs one dictionary lookup.
"""

from __future__ import annotations

import os
import signal
import threading

_lock = threading.Lock()
_passed = 0


def crash_point(name: str) -> None:
    """Die here if the test harness asked for it (see module docstring)."""
    global _passed
    kill_at = os.environ.get("QCPIPE_TEST_KILL_AT")
    count_file = os.environ.get("QCPIPE_TEST_COUNT_POINTS")
    if not kill_at and not count_file:
        return
    with _lock:
        _passed += 1
        n = _passed
        if count_file:
            with open(count_file, "a", encoding="utf-8") as fh:
                fh.write(f"{n} {name}\n")
    if kill_at and n == int(kill_at):
        os.kill(os.getpid(), signal.SIGKILL)
