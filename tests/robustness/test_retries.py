"""Transient I/O errors are tried again (a bounded number of times); permanent ones are not.

The errors are injected at the archive's real write points (``QCPIPE_TEST_IO_ERROR``,
see ``qcpipe/faults.py``) of a real nightly run with Prefect's local runner: the retries are the
orchestrator's, so these runs are the real command (an orchestrator start each); the run after a
failed one, which only has to finish the work, is the sequence without the orchestrator."""

from __future__ import annotations

import errno
import sqlite3

import pytest

from flows.tasks import RETRIES, transient_only
from qcpipe.errors import ArchiveError, ConfigError, ParseError, is_transient
from tests.conftest import run_cli, run_sequence
from tests.robustness.test_crash import assert_archive_opens, fresh_copy


# The errno names are POSIX's (IEEE Std 1003.1, <errno.h>); which of them pass
# with time is common practice for network file systems and busy devices, no source.
@pytest.mark.parametrize("exc, transient", [
    (OSError(errno.EIO, "I/O error"), True),
    (OSError(errno.ESTALE, "stale file handle"), True),
    (OSError(errno.ETIMEDOUT, "timed out"), True),
    (OSError(errno.EAGAIN, "try again"), True),
    (OSError(errno.EBUSY, "busy"), True),
    (sqlite3.OperationalError("database is locked"), True),
    (OSError(errno.ENOSPC, "no space left on device"), False),
    (OSError(errno.EACCES, "permission denied"), False),
    (FileNotFoundError(errno.ENOENT, "no such file"), False),
    (sqlite3.OperationalError("no such table: datasets"), False),
    (ArchiveError("disk full while writing x"), False),
    (ConfigError("bad key"), False),
    (ParseError("bad line"), False),
    (ValueError("bad value"), False),
])
def test_which_errors_are_transient(exc, transient):
    assert is_transient(exc) is transient


def test_retry_condition_reads_the_failed_state():
    from prefect.states import Failed

    assert transient_only(None, None, Failed(data=OSError(errno.EIO, "x"))) is True
    assert transient_only(None, None, Failed(data=ArchiveError("disk full"))) is False


def _log_lines(path):
    return path.read_text().splitlines() if path.exists() else []


def test_transient_error_in_a_station_task_is_retried_without_duplicating_work(tmp_path):
    """kc-mid's task fails after both its datasets are committed (writing its exposure products);
    the retry writes the products and no second version."""
    ws = fresh_copy(tmp_path / "w")
    log = tmp_path / "raised.txt"
    env = {"QCPIPE_TEST_IO_ERROR": "EIO:2:kc-mid-probe-2026-09_v001_emersion_periods.csv",
           "QCPIPE_TEST_IO_ERROR_LOG": str(log)}
    r = run_cli("process", "-w", str(ws), env=env)
    assert r.returncode == 0, r.stdout + r.stderr
    assert len(_log_lines(log)) == 2                       # raised twice, third attempt went through
    assert "written by an earlier attempt of this run" in r.stdout
    archive = tmp_path / "w" / "demo_archive"
    assert_archive_opens(archive)
    con = sqlite3.connect(archive / "catalog.sqlite")
    versions = con.execute("SELECT deployment, COUNT(*), MAX(version) FROM datasets GROUP BY deployment").fetchall()
    con.close()
    assert versions and all(n == 1 and v == 1 for _, n, v in versions), versions
    assert list((archive / "derived").rglob("*kc-mid-probe-2026-09_v001_emersion_periods.csv"))
    audit = run_cli("audit", "-w", str(ws))
    assert audit.returncode == 0, audit.stdout


def _run_failing_dataset_write(tmp_path, code: str):
    """A nightly run in which writing kc-high's temperature dataset always fails with ``code``."""
    ws = fresh_copy(tmp_path / "w")
    log = tmp_path / "raised.txt"
    env = {"QCPIPE_TEST_IO_ERROR": f"{code}:100:qcpipe_kc-high_kc-high-temp-2026-09_v001.nc",
           "QCPIPE_TEST_IO_ERROR_LOG": str(log)}
    return ws, log, run_cli("process", "-w", str(ws), "-q", env=env)


def test_retries_are_bounded(tmp_path):
    ws, log, r = _run_failing_dataset_write(tmp_path, "EIO")
    assert r.returncode == 2
    assert len(_log_lines(log)) == 1 + RETRIES
    assert "still failing after the tasks' retries" in r.stderr and "Traceback" not in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
    assert_archive_opens(tmp_path / "w" / "demo_archive")
    again = run_sequence("process", ws, quiet=True)          # the fault has passed: the next run finishes
    assert again.returncode == 0, again.stderr
    assert run_cli("audit", "-w", str(ws)).returncode == 0


def test_permanent_error_is_not_retried(tmp_path):
    ws, log, r = _run_failing_dataset_write(tmp_path, "ENOSPC")
    assert r.returncode == 2, r.stdout + r.stderr
    assert len(_log_lines(log)) == 1
    assert "disk full while writing" in r.stderr and len(r.stderr.strip().splitlines()) == 1
    assert_archive_opens(tmp_path / "w" / "demo_archive")
