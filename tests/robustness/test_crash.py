"""Nothing lost, nothing half-written: SIGKILL at many points of a real nightly run, a full
disk, two runs at once.  Each killed run is followed by a normal one, which must finish the
work exactly as an uninterrupted run does (catalog accounting and fixity included)."""

from __future__ import annotations

import os
import shutil
import signal
import sqlite3
import subprocess
import sys
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pytest

import xarray as xr

from tests.conftest import REPO, run_cli


def fresh_copy(root: Path) -> Path:
    root.mkdir(parents=True)
    shutil.copytree(REPO / "sample_raw", root / "sample_raw")
    shutil.copytree(REPO / "qc_rules", root / "qc_rules")
    return root / "sample_raw" / "workspace.toml"


def latest_flags(archive: Path) -> dict:
    con = sqlite3.connect(archive / "catalog.sqlite")
    rows = con.execute("SELECT deployment, MAX(version), path FROM datasets GROUP BY deployment").fetchall()
    con.close()
    out = {}
    for dep, version, path in rows:
        with xr.open_dataset(archive / path) as ds:     # catalog paths are relative to the archive root
            out[dep] = (version, {k: ds[k].values.copy() for k in ds.data_vars if "_qc" in k or k == "immersion"},
                        ds.sizes["time"])
    return out


_NC_LOCK = threading.Lock()        # the netCDF library is not thread-safe; the kill test runs two at once


def assert_archive_opens(archive: Path):
    with _NC_LOCK:
        _assert_archive_opens(archive)


def _assert_archive_opens(archive: Path):
    for p in archive.rglob("*.nc"):
        if ".prefect" in p.parts or p.name.startswith("."):
            continue
        with xr.open_dataset(p) as ds:     # a half-written NetCDF would not open
            ds.load()
    con = sqlite3.connect(archive / "catalog.sqlite")
    assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    con.close()


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    """One uninterrupted run, with every crash point it passes counted."""
    root = tmp_path_factory.mktemp("crash-ref")
    ws = fresh_copy(root / "w")
    points = root / "points.txt"
    r = run_cli("process", "-w", str(ws), "-q", env={"QCPIPE_TEST_COUNT_POINTS": str(points)})
    assert r.returncode == 0, r.stderr
    names = [ln.split(" ", 1)[1] for ln in points.read_text().splitlines()]
    return {"archive": root / "w" / "demo_archive", "names": names, "flags": latest_flags(root / "w" / "demo_archive")}


def test_enough_crash_points_across_the_run(reference):
    names = reference["names"]
    assert len(names) >= 40
    kinds = {n.split(" ", 1)[0] for n in names}
    assert kinds == {"before-rename", "before-commit"}
    written = " ".join(names)
    for part in (".wet", "_temp.csv", ".nc", "catalog"):   # raw copies, stores/datasets, catalog updates
        assert part in written


def run_until_killed(ws: Path, k: int, pgids: list | None = None) -> int:
    """Run the nightly command until it kills itself at crash point ``k``, then take down whatever it
    started (the orchestrator's embedded server), as a power cut would; returns the command's code.

    Output goes to files, not pipes: a child left behind by a killed process would hold a pipe open.
    With ``pgids`` given, the children are left running and the group id is appended for the caller."""
    env = dict(os.environ, QCPIPE_TEST_KILL_AT=str(k))
    log = ws.parent.parent / f"killed-{k}.log"
    with open(log, "w") as out:
        proc = subprocess.Popen([sys.executable, "-m", "qcpipe.cli", "process", "-w", str(ws), "-q"],
                                stdout=out, stderr=subprocess.STDOUT, env=env, start_new_session=True)
    try:
        rc = proc.wait(timeout=600)
    except subprocess.TimeoutExpired:
        pgids = None                        # never leave a hung run behind
        raise
    finally:
        if pgids is None:
            _kill_group(proc.pid)
        else:
            pgids.append(proc.pid)
    return rc


def _kill_group(pgid: int) -> None:
    try:
        os.killpg(pgid, signal.SIGKILL)
    except ProcessLookupError:
        pass


def _kill_and_recover(args):
    k, tmp = args
    ws = fresh_copy(tmp / f"k{k}")
    killed = subprocess.CompletedProcess([], run_until_killed(ws, k))
    archive = tmp / f"k{k}" / "demo_archive"
    opened_ok = None
    if archive.exists() and (archive / "catalog.sqlite").exists():
        assert_archive_opens(archive)
        opened_ok = True
    again = run_cli("process", "-w", str(ws), "-q")
    audit = run_cli("audit", "-w", str(ws))
    return k, killed.returncode, opened_ok, again, audit, archive


def test_kill_at_many_points_then_recover(reference, tmp_path):
    n = len(reference["names"])
    kill_at = sorted({int(x) for x in np.linspace(1, n, 21).round()})
    assert len(kill_at) >= 20
    with ThreadPoolExecutor(max_workers=2) as pool:
        results = list(pool.map(_kill_and_recover, [(k, tmp_path) for k in kill_at]))
    ref = reference["flags"]
    for k, rc, opened_ok, again, audit, archive in results:
        assert rc == -signal.SIGKILL, f"point {k}: the run was not killed (rc {rc})"
        assert again.returncode == 0, f"point {k}: recovery run failed: {again.stderr}"
        assert audit.returncode == 0, f"point {k}: {audit.stdout}"
        assert "not in the catalog" not in audit.stdout, f"point {k}: {audit.stdout}"
        assert "18 archived, 2 quarantined" in audit.stdout, f"point {k}: {audit.stdout}"
        got = latest_flags(archive)
        assert set(got) == set(ref), f"point {k}"
        for dep, (version, flags, size) in ref.items():
            gv, gflags, gsize = got[dep]
            assert gsize == size, f"point {k}: {dep}"
            assert gv == version, f"point {k}: {dep} version {gv} != {version} (duplicated work)"
            for name, arr in flags.items():
                np.testing.assert_array_equal(gflags[name], arr, err_msg=f"point {k}: {dep} {name}")
        leftovers = [p for p in archive.rglob("*.tmp") if ".prefect" not in p.parts]
        assert leftovers == [], f"point {k}: {leftovers}"


def test_two_runs_at_once_do_not_interleave(tmp_path):
    ws = fresh_copy(tmp_path / "w")
    env = dict(os.environ)
    first = subprocess.Popen([sys.executable, "-m", "qcpipe.cli", "process", "-w", str(ws), "-q"],
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    lock = tmp_path / "w" / "demo_archive" / ".lock"
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and not (lock.exists() and lock.read_text().startswith("pid")):
        time.sleep(0.2)
    second = run_cli("process", "-w", str(ws), "-q")
    out, err = first.communicate(timeout=300)
    assert first.returncode == 0, err
    assert second.returncode == 2
    assert "is in use by another qcpipe run" in second.stderr and "Traceback" not in second.stderr
    assert len(second.stderr.strip().splitlines()) == 1
    # after the first run ends the lock is free again
    third = run_cli("process", "-w", str(ws), "-q")
    assert third.returncode == 0 and "nothing new" in third.stdout


def test_lock_released_when_the_holder_is_killed(tmp_path):
    ws = fresh_copy(tmp_path / "w")
    left = []           # only the run's own process dies: what it started may live on
    try:
        assert run_until_killed(ws, 5, pgids=left) == -signal.SIGKILL
        again = run_cli("process", "-w", str(ws), "-q")
        assert again.returncode == 0, again.stderr
    finally:
        for pgid in left:
            _kill_group(pgid)


@pytest.fixture()
def small_disk(tmp_path):
    mnt = tmp_path / "disk"
    mnt.mkdir()
    r = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=24m", "tmpfs", str(mnt)], capture_output=True, text=True)
    if r.returncode != 0:
        pytest.skip(f"cannot mount a small tmpfs to fill (needs root): {r.stderr.strip()}")
    try:
        yield mnt
    finally:
        subprocess.run(["umount", "-l", str(mnt)], capture_output=True)


def test_disk_full_fails_clearly_and_keeps_earlier_versions(tmp_path, small_disk):
    ws = fresh_copy(tmp_path / "w")
    text = ws.read_text().replace('archive = "../demo_archive"', f'archive = "{small_disk / "archive"}"')
    ws.write_text(text)
    env = {"PREFECT_HOME": str(tmp_path / "prefect-home")}      # the orchestrator's own state elsewhere
    r = run_cli("process", "-w", str(ws), "-q", env=env)
    assert r.returncode == 0, r.stderr
    archive = small_disk / "archive"
    before = {p: p.read_bytes() for p in (archive / "datasets").rglob("*.nc")}
    # fill the disk, then ask for a re-run (a changed threshold re-versions one dataset)
    filler = small_disk / "filler"
    free = shutil.disk_usage(small_disk).free
    with open(filler, "wb") as fh:
        fh.write(b"\0" * max(free - 64 * 1024, 0))
    rules = tmp_path / "w" / "qc_rules" / "kelpwhistle-cove.toml"
    rules.write_text(rules.read_text() + '\n[station.kc-high.variable.temperature]\nspike = { suspect = 3.0 }\n')
    r = run_cli("process", "-w", str(ws), "-q", env=env)
    assert r.returncode == 2, r.stdout + r.stderr
    assert "disk full while writing" in r.stderr and "Traceback" not in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
    for p, data in before.items():
        assert p.read_bytes() == data                          # earlier versions intact
    assert [p for p in archive.rglob("*.tmp")] == []          # nothing half-written left
    assert_archive_opens(archive)
    filler.unlink()
    r = run_cli("process", "-w", str(ws), "-q", env=env)
    assert r.returncode == 0, r.stderr
    assert run_cli("audit", "-w", str(ws)).returncode == 0
