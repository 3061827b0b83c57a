"""A read-only archive: the commands that only read work on it as it is, the ones that write stop with
one line, and nothing in it changes.

Read-only two ways: a read-only mount (EROFS for everyone, root included: a bind mount of the archive
on itself, remounted read-only) and a folder without write permission (``chmod -R a-w``; root ignores
permission bits, so that case is skipped under root).  The archive is the demo's, made by the run
sequence without the orchestrator, with a second version of one deployment so ``diff`` reads two
NetCDF files; the commands are the real ``qcpipe`` in a subprocess (none of them starts the
orchestrator: the writing ones stop at the archive's lock).
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import shutil
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest

from qcpipe.archive.catalog import Catalog
from qcpipe.archive.lock import ArchiveReadOnly

from tests.conftest import demo_in_process, read_only_in_place, run_cli, run_sequence

DEPLOYMENT = "kc-deck-baro-2026-09"      # a barometer of the demo: nothing else depends on it, re-run quickly


@pytest.fixture(scope="module")
def archive(tmp_path_factory):
    demo = demo_in_process(tmp_path_factory.mktemp("read-only"))
    done = run_sequence("rerun", demo.workspace, deployments=[DEPLOYMENT], quiet=True, even_if_unchanged=True)
    assert done.returncode == 0, done.stderr
    from qcpipe.pipeline import load_context

    assert [r["version"] for r in load_context(demo.workspace).catalog.dataset_versions(DEPLOYMENT)] == [1, 2]
    return demo


@contextlib.contextmanager
def without_write_permission(folder: Path):
    """``folder`` and everything in it without write permission (``chmod -R a-w``) for the block."""
    if os.geteuid() == 0:
        pytest.skip("runs as root, which ignores permission bits: the read-only mount case covers it")
    subprocess.run(["chmod", "-R", "a-w", str(folder)], check=True)
    try:
        yield folder
    finally:
        subprocess.run(["chmod", "-R", "u+w", str(folder)], check=True)


@pytest.fixture(params=["read-only mount", "no write permission"])
def read_only(request, archive):
    make = read_only_in_place if request.param == "read-only mount" else without_write_permission
    with make(archive.archive):
        yield archive


def _contents(folder: Path) -> dict:
    """Every file of ``folder`` (names and SHA-256), to show that nothing was written."""
    return {str(p.relative_to(folder)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def test_reading_commands_work_and_change_nothing(read_only, tmp_path):
    ws, root = str(read_only.workspace), read_only.archive
    before = _contents(root)
    audit = run_cli("audit", "-w", ws)
    assert audit.returncode == 0, audit.stderr
    assert audit.stdout.splitlines()[-1] == "all accounted for, all hashes match"
    holdings = run_cli("holdings", "-w", ws)
    assert holdings.returncode == 0, holdings.stderr
    assert f"qcpipe_kc-deck_{DEPLOYMENT}_v002.nc" in holdings.stdout
    diff = run_cli("diff", DEPLOYMENT, "-w", ws)          # opens both NetCDF versions
    assert diff.returncode == 0, diff.stderr
    assert "v001" in diff.stdout and "v002" in diff.stdout
    lineage = run_cli("lineage", DEPLOYMENT, "-w", ws)
    assert lineage.returncode == 0, lineage.stderr
    assert lineage.stdout.startswith(f"dataset qcpipe_kc-deck_{DEPLOYMENT}_v002.nc (version 2")
    bags = tmp_path / "bags"
    package = run_cli("package", "-d", DEPLOYMENT, "--out", str(bags), "-w", ws)
    assert package.returncode == 0, package.stderr
    bag = bags / f"qcpipe_kc-deck_{DEPLOYMENT}_bag"
    assert (bag / "bagit.txt").is_file() and (bag / "manifest-sha256.txt").is_file()
    for r in (audit, holdings, diff, lineage, package):
        assert r.stderr == ""
    assert _contents(root) == before


@pytest.mark.parametrize("command", [["process"], ["rerun"], ["rerun", "-d", DEPLOYMENT], ["package"]],
                         ids=["process", "rerun", "rerun one deployment", "package into the archive"])
def test_writing_commands_stop_with_one_line(read_only, command):
    root = read_only.archive
    before = _contents(root)
    r = run_cli(*command, "-w", str(read_only.workspace))
    assert r.returncode == 2, r.stdout + r.stderr
    assert r.stderr.startswith(f"qcpipe: error: archive {root} is read-only")
    assert len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr
    assert r.stdout == ""
    assert _contents(root) == before


def _catalog_with_a_write_ahead_log(folder: Path) -> None:
    """A catalog whose last transaction is only in its write-ahead log: the writing process ends without
    closing (``os._exit``), so SQLite neither checkpoints nor removes the ``-wal`` and ``-shm`` files."""
    code = ("import os, sys; from qcpipe.archive.catalog import Catalog; cat = Catalog(sys.argv[1]); "
            "con = cat._connect(); con.execute('PRAGMA wal_autocheckpoint=0'); "
            "con.execute(\"INSERT INTO runs (started, kind) VALUES ('2026-01-01T00:00:00Z', 'nightly')\"); "
            "os._exit(0)")
    subprocess.run([sys.executable, "-c", code, str(folder / "catalog.sqlite")], check=True)
    assert (folder / "catalog.sqlite-wal").stat().st_size > 0


def test_read_only_catalog_reads_its_write_ahead_log(tmp_path):
    """With its shared-memory file beside it, ``mode=ro`` reads what only the log holds."""
    folder = tmp_path / "archive"
    folder.mkdir()
    _catalog_with_a_write_ahead_log(folder)
    with read_only_in_place(folder):
        cat = Catalog(folder / "catalog.sqlite")
        assert cat.read_only
        assert [r["started"] for r in cat.runs()] == ["2026-01-01T00:00:00Z"]
        with pytest.raises(ArchiveReadOnly, match="is read-only"):
            cat.start_run()


def test_read_only_catalog_refuses_a_log_it_cannot_read(tmp_path):
    """Without the shared-memory file SQLite cannot open the log read-only; ``immutable=1`` would skip it and
    show an older catalog, so the command stops with one line instead."""
    folder = tmp_path / "archive"
    folder.mkdir()
    _catalog_with_a_write_ahead_log(folder)
    (folder / "catalog.sqlite-shm").unlink()
    with read_only_in_place(folder):
        with pytest.raises(ArchiveReadOnly, match="write-ahead log"):
            Catalog(folder / "catalog.sqlite")
    con = sqlite3.connect(folder / "catalog.sqlite")      # writable again: the transaction was kept
    assert con.execute("SELECT count(*) FROM runs").fetchone()[0] == 1


@pytest.mark.skipif(os.geteuid() != 0, reason="needs root to act as another user (seteuid) in a child")
def test_a_lock_file_of_another_user_is_one_line():
    """A group-shared archive: the lock file was made by another user (mode 0644) in a folder everyone
    may write.  Taking the lock fails with one line saying what permission is missing, no traceback."""
    import tempfile

    from qcpipe.archive.lock import ArchiveLock
    from qcpipe.errors import ArchiveError

    root = Path(tempfile.mkdtemp(prefix="qcpipe-shared-", dir="/tmp"))
    try:
        root.chmod(0o777)
        (root / ".lock").write_text("")
        (root / ".lock").chmod(0o644)                # owned by root
        read, write = os.pipe()
        pid = os.fork()
        if pid == 0:                                 # the child: another user
            os.close(read)
            try:
                os.setegid(65534)
                os.seteuid(65534)
                ArchiveLock(root).acquire()
                answer = "acquired"
            except ArchiveError as err:
                answer = f"ArchiveError|{err}"
            except BaseException as err:             # noqa: BLE001 - reported to the parent
                answer = f"{type(err).__name__}|{err}"
            os.write(write, answer.encode())
            os._exit(0)
        os.close(write)
        os.waitpid(pid, 0)
        answer = os.read(read, 4000).decode()
        os.close(read)
    finally:
        shutil.rmtree(root, ignore_errors=True)
    kind, _, message = answer.partition("|")
    assert kind == "ArchiveError", answer
    assert message.startswith(f"cannot open the archive's lock file {root / '.lock'} (Permission denied)")
    assert "write permission" in message and "\n" not in message
