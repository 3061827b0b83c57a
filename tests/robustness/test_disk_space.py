"""Small and full disks: ``qcpipe process`` stops with one line and exit status 2, never a hang or a
traceback, wherever the disk is full: the orchestrator's folder, the archive before the run, the
archive during it.

Each case mounts a small tmpfs (3, 8, 12 MB; skipped with the reason where mounting is not allowed) and
runs the real command in a subprocess with a time-out: the time-out is the "no hang" check (before this
was handled, a 3 MB disk held the command 192 s in the orchestrator's start-up).  Only the case of the
archive filling during the run starts the orchestrator; the others stop before it.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys

import pytest

from tests.conftest import copy_demo, run_cli, run_sequence, small_tmpfs

#: seconds a command may take before the test calls it a hang: the orchestrator's start-up is 15-20 s,
#: the demo's whole run about 30 s on this machine (measured); the old failure took 192 s
NO_HANG_S = 150


def _demo_with_archive_on(root, archive):
    ws = copy_demo(root)
    ws.write_text(ws.read_text().replace('archive = "../demo_archive"', f'archive = "{archive}"'))
    return ws


def _process(ws, env=None):
    full = dict(os.environ, **(env or {}))
    return subprocess.run([sys.executable, "-m", "qcpipe.cli", "process", "-w", str(ws), "-q"], env=full,
                          capture_output=True, text=True, timeout=NO_HANG_S)


def _one_line(r) -> str:
    assert r.returncode == 2, r.stdout + r.stderr
    assert "Traceback" not in r.stderr
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1, r.stderr
    return lines[0]


@pytest.mark.parametrize("size_mb", [3, 8, 12])
def test_orchestrator_folder_on_a_small_disk_stops_before_starting(tmp_path, size_mb):
    """Archive and orchestrator state on one small disk (``QCPIPE_STATE_DIR`` there): refused at once,
    naming the orchestrator's folder; its database is never made."""
    with small_tmpfs(tmp_path / "disk", size_mb) as disk:
        ws = _demo_with_archive_on(tmp_path / "w", disk / "archive")
        r = _process(ws, env={"QCPIPE_STATE_DIR": str(disk / "state")})
        line = _one_line(r)
        assert line.startswith("qcpipe: error: disk full: ") and f"orchestrator's folder {disk / 'state'}" in line
        assert "a run needs 64 MB there" in line
        assert not list((disk / "state").rglob("*.db"))


@pytest.mark.parametrize("free_kb", [0, 128], ids=["no space left", "128 kB left"])
def test_archive_disk_full_before_the_run_stops_at_once(tmp_path, free_kb):
    """An archive disk already full: a new catalog cannot be made (0 kB), or an archive whose catalog exists
    is refused by the free-space check (``cli.ARCHIVE_MIN_FREE_KB``, 256 kB) with 128 kB left; either way
    before the orchestrator starts."""
    from qcpipe.archive.catalog import Catalog
    from qcpipe.cli import ARCHIVE_MIN_FREE_KB

    with small_tmpfs(tmp_path / "disk", 3) as disk:
        ws = _demo_with_archive_on(tmp_path / "w", disk / "archive")
        if free_kb:
            Catalog(disk / "archive" / "catalog.sqlite")
        with open(disk / "filler", "wb") as fh:
            try:
                fh.write(b"\0" * max(shutil.disk_usage(disk).free - free_kb * 1024, 0))
                fh.flush()
            except OSError:
                pass                                   # filled to the last block
        line = _one_line(_process(ws))
        if free_kb == 0:
            assert "cannot write the catalog" in line and "disk is full" in line
        else:
            free = re.search(r"disk full: (\d+) kB free on the disk of archive ", line)
            assert free and int(free[1]) < ARCHIVE_MIN_FREE_KB, line
        assert "run again" in line


def test_archive_disk_filling_during_the_run(tmp_path):
    """The failing run is the real command (the error crosses the orchestrator to the command's one line);
    the disk made larger (tmpfs remount), the next run finishes the work and the audit passes."""
    with small_tmpfs(tmp_path / "disk", 3) as disk:
        archive = disk / "archive"
        ws = _demo_with_archive_on(tmp_path / "w", archive)
        line = _one_line(_process(ws))
        # whichever write meets the full disk first: a file (files.storage_error) or the catalog
        assert re.match(rf"qcpipe: error: (disk full while writing|cannot write the catalog) {re.escape(str(archive))}/",
                        line), line
        assert "disk" in line and "run again" in line
        assert [p for p in archive.rglob("*.tmp")] == []              # nothing half-written left
        subprocess.run(["mount", "-o", "remount,size=32m", str(disk)], check=True)
        done = run_sequence("process", ws, quiet=True)
        assert done.returncode == 0, done.stderr
        audit = run_cli("audit", "-w", str(ws))
        assert audit.returncode == 0, audit.stdout + audit.stderr
        assert audit.stdout.splitlines()[-1] == "all accounted for, all hashes match"


def test_orchestrator_disk_full_during_the_run_is_one_line(tmp_path):
    """The command's guard around the flow: an unexpected error (the embedded server answers a full disk
    with HTTP 500) while the orchestrator's disk is full becomes one line; with space left it is not hidden."""
    from qcpipe.cli import _on_orchestrator
    from qcpipe.errors import ArchiveError

    class Args:
        quiet = True

    def server_error():
        raise RuntimeError("Server error '500 Internal Server Error'")

    with small_tmpfs(tmp_path / "disk", 3) as disk:
        ws = type("Ws", (), {"archive": tmp_path / "archive"})
        with pytest.MonkeyPatch.context() as mp:
            mp.setenv("QCPIPE_STATE_DIR", str(disk / "state"))
            mp.delenv("PREFECT_HOME", raising=False)
            with pytest.raises(ArchiveError, match="ran out of space during the run"):
                _on_orchestrator(Args, ws, server_error)
            mp.setenv("QCPIPE_STATE_DIR", str(tmp_path / "state"))        # a disk with space: the error as it is
            with pytest.raises(RuntimeError, match="500"):
                _on_orchestrator(Args, ws, server_error)


@pytest.mark.parametrize("writer", ["columns", "dataset"])
def test_netcdf_writers_turn_a_full_disk_into_the_one_line_error(tmp_path, writer):
    """Both NetCDF writers (the store's column writer, the dataset writer) on a 1 MB disk with a series
    that cannot fit (random values do not compress): the netCDF library's "HDF error" becomes the
    one-line disk-full error and no file, not even a temporary one, is left."""
    import numpy as np

    from qcpipe.archive.ncio import write_columns_atomic, write_dataset_atomic
    from qcpipe.errors import ArchiveError

    n = 400_000                                   # 3.2 MB of float64 per variable
    time = np.datetime64("2026-01-01", "ns") + np.arange(n) * np.timedelta64(1, "s")
    values = np.random.default_rng(1).normal(size=n)
    with small_tmpfs(tmp_path / "disk", 1) as disk:
        final = disk / "x.nc"
        with pytest.raises(ArchiveError, match=r"^disk full while writing .*x\.nc"):
            if writer == "columns":
                write_columns_atomic(final, time, {"v": (values, {"units": "1"})}, {"title": "t"})
            else:
                import xarray as xr

                write_dataset_atomic(xr.Dataset({"v": ("time", values)}, coords={"time": time}), final,
                                     {"v": {"zlib": True, "complevel": 4}})
        assert list(disk.iterdir()) == []


def test_a_staging_copy_that_meets_a_full_disk_leaves_nothing(tmp_path):
    """An inbox file is copied into <archive>/.staging while it is hashed: on a full disk the copy fails
    with ENOSPC (the run turns it into the one-line disk-full error) and no partial copy is left."""
    import errno

    from qcpipe.pipeline.inbox import _stage_copy

    src = tmp_path / "big.csv"
    src.write_bytes(os.urandom(3 * 2**20))
    with small_tmpfs(tmp_path / "disk", 1) as disk:
        with pytest.raises(OSError) as err:
            _stage_copy(src, disk / ".staging")
        assert err.value.errno == errno.ENOSPC
        assert list((disk / ".staging").iterdir()) == []
