"""Nothing lost, nothing half-written: SIGKILL at many points of a nightly run, a full disk,
two runs at once.  Each killed run is followed by a normal one, which must finish the work
exactly as an uninterrupted run does (catalog accounting and fixity included).

Most kill points kill the run sequence without the orchestrator (``nightly_in_process.py``
beside this file: ``nightly_run`` with ``InProcess`` in a forked child of a process that
imported qcpipe once), which writes the archive through the same code as the command and
costs no orchestrator start; one point in each phase of the run (ingest, stores, QC, report)
kills the real ``qcpipe process``, and the real command runs again after one of them."""

from __future__ import annotations

import json
import os
import queue
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

from qcpipe.cli import ARCHIVE_MIN_FREE_KB
from tests.conftest import REPO, run_cli, run_sequence, small_tmpfs

#: the run sequence without the orchestrator, as a command (see its docstring)
IN_PROCESS = Path(__file__).with_name("nightly_in_process.py")


class Forks:
    """``nightly_in_process.py --serve``: commands run in forked children of one process that
    imported qcpipe once (see that file's docstring)."""

    def __init__(self):
        self.proc = subprocess.Popen([sys.executable, str(IN_PROCESS), "--serve"], stdin=subprocess.PIPE,
                                     stdout=subprocess.PIPE, text=True)

    def run(self, argv: list[str], log: Path, env: dict | None = None) -> subprocess.CompletedProcess:
        """``argv``: ``["nightly", workspace]`` or the ``qcpipe`` command's arguments; stdout and
        stderr together in ``log``, returned as both."""
        self.proc.stdin.write(json.dumps({"argv": argv, "env": env or {}, "log": str(log)}) + "\n")
        self.proc.stdin.flush()
        answer = self.proc.stdout.readline()
        assert answer, f"the fork server ended ({argv})"
        out = log.read_text()
        return subprocess.CompletedProcess(argv, json.loads(answer)["returncode"], out, out)

    def close(self) -> None:
        self.proc.stdin.close()
        self.proc.wait(timeout=60)


@pytest.fixture(scope="module")
def forks():
    """Two fork servers (one for each of the two threads the kill tests use), in a queue."""
    servers = [Forks(), Forks()]
    pool = queue.Queue()
    for s in servers:
        pool.put(s)
    yield pool
    for s in servers:
        s.close()


def fresh_copy(root: Path) -> Path:
    root.mkdir(parents=True)
    shutil.copytree(REPO / "sample_raw", root / "sample_raw")
    shutil.copytree(REPO / "qc_rules", root / "qc_rules")
    return root / "sample_raw" / "workspace.toml"


def settled_copies(roots: list[Path]) -> list[Path]:
    """Fresh copies of the demo, returned once their files are older than the inbox cache's settling
    time (``qcpipe.ingest.discover.SETTLE_NS``): a run caches the inbox's hashes only then, so every run
    of a settled copy passes the same crash points (one cache write more than on a fresh copy)."""
    from qcpipe.ingest.discover import SETTLE_NS

    copies = [fresh_copy(root) for root in roots]
    time.sleep(SETTLE_NS / 1e9 + 0.5)
    return copies


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
def reference(tmp_path_factory, forks):
    """One uninterrupted run of the run sequence, with every crash point it passes counted.

    The command passes the same points: they are in the archive's own writes (``qcpipe.files``,
    the catalog), which the orchestrator's tasks only call; the command runs some steps at the
    same time, so the order within a phase may differ, never the phases' order."""
    root = tmp_path_factory.mktemp("crash-ref")
    (ws,) = settled_copies([root / "w"])
    points = root / "points.txt"
    server = forks.get()
    try:
        r = server.run(["nightly", str(ws)], root / "run.log", env={"QCPIPE_TEST_COUNT_POINTS": str(points)})
    finally:
        forks.put(server)
    assert r.returncode == 0, r.stderr
    names = [ln.split(" ", 1)[1] for ln in points.read_text().splitlines()]
    return {"archive": root / "w" / "demo_archive", "names": names, "flags": latest_flags(root / "w" / "demo_archive")}


def test_enough_crash_points_across_the_run(reference):
    names = reference["names"]
    assert len(names) >= 40
    kinds = {n.split(" ", 1)[0] for n in names}
    assert kinds == {"before-rename", "before-commit"}
    written = " ".join(names)
    for part in (".wet", "_temp.csv", ".nc", "catalog", ".html"):   # raw copies, stores/datasets, catalog, report
        assert part in written


def phase_points(names: list[str]) -> dict[str, int]:
    """The crash point (1-based) in the middle of each phase of the run, found by the names of the points:
    ingest (the run's start, quarantine) up to the first store written (``<deployment>.nc``), stores up to
    the first dataset (``qcpipe_...``), QC (datasets, products, raw copies, catalog) up to the first report
    page (``.html``), the report."""
    first_store = next(i for i, n in enumerate(names) if n.endswith(".nc"))
    first_dataset = next(i for i, n in enumerate(names) if n.startswith("before-rename qcpipe_"))
    first_page = next(i for i, n in enumerate(names) if n.endswith(".html"))
    assert 0 < first_store < first_dataset < first_page < len(names), names
    bounds = {"ingest": (0, first_store), "stores": (first_store, first_dataset),
              "qc": (first_dataset, first_page), "report": (first_page, len(names))}
    return {phase: (lo + hi) // 2 + 1 for phase, (lo, hi) in bounds.items()}


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


def _group_alive(pgid: int) -> bool:
    try:
        os.killpg(pgid, 0)
    except ProcessLookupError:
        return False
    return True


def _opens_after_kill(archive: Path):
    """What the killed run left opens (True), or it left no catalog yet (None)."""
    if archive.exists() and (archive / "catalog.sqlite").exists():
        assert_archive_opens(archive)
        return True
    return None


def _kill_in_process_and_recover(k: int, tmp: Path, forks) -> tuple:
    """Kill the run sequence without the orchestrator at point ``k``, check what it left opens, run it
    again and audit (``qcpipe audit``), each in a forked child of a fork server."""
    ws = tmp / f"k{k}" / "sample_raw" / "workspace.toml"            # settled by the caller
    archive = tmp / f"k{k}" / "demo_archive"
    server = forks.get()
    try:
        killed = server.run(["nightly", str(ws)], tmp / f"k{k}" / "killed.log", env={"QCPIPE_TEST_KILL_AT": str(k)})
        opened_ok = _opens_after_kill(archive)
        again = server.run(["nightly", str(ws)], tmp / f"k{k}" / "again.log")
        audit = server.run(["audit", "-w", str(ws)], tmp / f"k{k}" / "audit.log")
    finally:
        forks.put(server)
    return k, killed.returncode, opened_ok, again, audit, archive


def assert_recovered(results, ref):
    """Every killed run was killed, and the run after it left the archive as an uninterrupted run does."""
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


def test_kill_at_many_points_then_recover(reference, tmp_path, forks):
    """21 points spread over the whole run, killed and recovered without the orchestrator (the archive's
    writes are the same code; the command's own kills are ``command_kills``)."""
    n = len(reference["names"])
    kill_at = sorted({int(x) for x in np.linspace(1, n, 21).round()})
    assert len(kill_at) >= 20
    settled_copies([tmp_path / f"k{k}" for k in kill_at])
    with ThreadPoolExecutor(max_workers=2) as pool:
        results = list(pool.map(lambda k: _kill_in_process_and_recover(k, tmp_path, forks), kill_at))
    assert_recovered(results, reference["flags"])


@pytest.fixture(scope="module")
def command_kills(reference, tmp_path_factory, forks):
    """The real ``qcpipe process`` killed about the middle of each phase of the run.

    In the ingest phase only the command's own process dies: what it started (the orchestrator's
    embedded server) lives on while the real command runs again, as in a lost terminal; at the other
    points whatever it started dies too, as in a power cut, and the run after it is the sequence without
    the orchestrator.  A long fixture (five orchestrator starts, two runs at a time) because only the
    command shows that a killed flow run, and its server, leave nothing the next command trips on."""
    tmp = tmp_path_factory.mktemp("command-kills")
    points = phase_points(reference["names"])
    assert len(set(points.values())) == 4, points
    settled_copies([tmp / f"k{k}" for k in points.values()])

    def one(phase: str) -> tuple:
        k = points[phase]
        ws = tmp / f"k{k}" / "sample_raw" / "workspace.toml"
        archive = tmp / f"k{k}" / "demo_archive"
        if phase == "ingest":
            left = []
            try:
                rc = run_until_killed(ws, k, pgids=left)
                opened_ok = _opens_after_kill(archive)
                children_alive = _group_alive(left[0])
                again = run_cli("process", "-w", str(ws), "-q")
            finally:
                for pgid in left:
                    _kill_group(pgid)
            audit = run_cli("audit", "-w", str(ws))
            return phase, children_alive, (k, rc, opened_ok, again, audit, archive)
        rc = run_until_killed(ws, k)
        opened_ok = _opens_after_kill(archive)
        server = forks.get()
        try:
            again = server.run(["nightly", str(ws)], tmp / f"k{k}" / "again.log")
            audit = server.run(["audit", "-w", str(ws)], tmp / f"k{k}" / "audit.log")
        finally:
            forks.put(server)
        return phase, None, (k, rc, opened_ok, again, audit, archive)

    with ThreadPoolExecutor(max_workers=2) as pool:
        done = list(pool.map(one, ["ingest", "stores", "qc", "report"]))
    return {phase: (alive, result) for phase, alive, result in done}


def test_kill_the_command_once_per_phase_then_recover(reference, command_kills):
    assert_recovered([result for _, result in command_kills.values()], reference["flags"])


def test_lock_released_when_the_holder_is_killed(command_kills):
    """The command killed in the ingest phase held the archive's lock; what it started was still
    running when the real command ran again, and that run took the lock and finished."""
    children_alive, (k, rc, _, again, _, _) = command_kills["ingest"]
    assert rc == -signal.SIGKILL, f"point {k}: the run was not killed (rc {rc})"
    assert children_alive, "the killed command had left nothing running: not the case this test is about"
    assert again.returncode == 0, again.stderr


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


@pytest.fixture()
def small_disk(tmp_path):
    with small_tmpfs(tmp_path / "disk", 24) as mnt:
        yield mnt


def test_disk_full_fails_clearly_and_keeps_earlier_versions(tmp_path, small_disk):
    """The failing run is the real command (the error crosses the orchestrator to the command's one
    line); the runs before and after it, the sequence without the orchestrator."""
    ws = fresh_copy(tmp_path / "w")
    text = ws.read_text().replace('archive = "../demo_archive"', f'archive = "{small_disk / "archive"}"')
    ws.write_text(text)
    env = {"PREFECT_HOME": str(tmp_path / "prefect-home")}      # the orchestrator's own state elsewhere
    r = run_sequence("process", ws, quiet=True)               # the first versions (no orchestrator needed)
    assert r.returncode == 0, r.stderr
    archive = small_disk / "archive"
    before = {p: p.read_bytes() for p in (archive / "datasets").rglob("*.nc")}
    # fill the disk, then ask for a re-run (a changed threshold re-versions the temperature datasets)
    filler = small_disk / "filler"
    free = shutil.disk_usage(small_disk).free
    with open(filler, "wb") as fh:
        # just above the command's free-space floor (cli.ARCHIVE_MIN_FREE_KB), so the orchestrator starts
        # and the run's own writes meet the full disk
        fh.write(b"\0" * max(free - ARCHIVE_MIN_FREE_KB * 2**10 - 64 * 1024, 0))
    rules = tmp_path / "w" / "qc_rules" / "kelpwhistle-cove.toml"
    text = rules.read_text()      # every temperature dataset re-versioned: more than the space left
    assert 'spike = { half_window = "20 min", suspect = 4.0, fail = 7.0 }' in text
    rules.write_text(text.replace('spike = { half_window = "20 min", suspect = 4.0, fail = 7.0 }',
                                  'spike = { half_window = "20 min", suspect = 3.0, fail = 7.0 }'))
    r = run_cli("process", "-w", str(ws), "-q", env=env)
    assert r.returncode == 2, r.stdout + r.stderr
    assert "disk full while writing" in r.stderr and "Traceback" not in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
    for p, data in before.items():
        assert p.read_bytes() == data                          # earlier versions intact
    assert [p for p in archive.rglob("*.tmp")] == []          # nothing half-written left
    assert_archive_opens(archive)
    filler.unlink()
    r = run_sequence("process", ws, quiet=True)
    assert r.returncode == 0, r.stderr
    assert run_cli("audit", "-w", str(ws)).returncode == 0
