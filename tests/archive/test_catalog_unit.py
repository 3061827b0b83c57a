"""The archive layer on its own: the SQLite catalog on a temporary file (real SQLite, no mocks),
ArchivePaths keeping ids inside the root, and atomic writes that keep the old file on an error."""

from __future__ import annotations

import errno
import os
import sqlite3

import pytest

from qcpipe.archive.catalog import MIGRATIONS, Catalog
from qcpipe.archive.store import ArchivePaths
from qcpipe.errors import ArchiveError
from qcpipe.files import atomic_path, copy_atomic, write_text_atomic

SHA_A = "a" * 64
SHA_B = "b" * 64


def raw_row(sha, name="f.csv", **extra):
    row = dict(sha256=sha, size=10, original_name=name, original_path=f"/inbox/{name}", archived_path=None,
               station="st1", deployment="dep1", status="archived", reason=None)
    row.update(extra)
    return row


def dataset_row(version, deployment="dep1", **extra):
    row = dict(path=f"/archive/datasets/st1/{deployment}_v{version:03d}.nc", station="st1", deployment=deployment,
               version=version, rules_name="r", rules_sha256="0" * 64, register_sha256="1" * 64,
               software_version="0.1.0", samples=5, flag_counts={"1": 4, "4": 1}, raw_sha256=[SHA_A])
    row.update(extra)
    return row


@pytest.fixture
def cat(tmp_path):
    return Catalog(tmp_path / "archive" / "catalog.sqlite")


# --- schema -----------------------------------------------------------------------------------

def test_new_catalog_has_every_migration_and_reopening_keeps_rows(cat):
    # six migrations are listed in catalog.py (first schema, re-run columns, run_id, inbox hashes,
    # archive paths relative to the archive root, the runs' notices)
    assert len(MIGRATIONS) == 6 and cat.schema_version == 6
    with cat.transaction() as con:
        cat.record_raw(con, **raw_row(SHA_A))
    again = Catalog(cat.path)                   # migrations must not run twice or drop anything
    assert again.schema_version == 6 and again.known_hashes() == {SHA_A}


# --- paths relative to the archive root -------------------------------------------------------

def test_paths_stored_relative_and_resolved_against_where_the_catalog_is(tmp_path):
    root = tmp_path / "a" / "archive"
    cat = Catalog(root / "catalog.sqlite")
    inside = root / "datasets" / "st1" / "dep1_v001.nc"
    copy = root / "raw" / "st1" / "dep1" / "aaaaaaaaaaaa_f.csv"
    with cat.transaction() as con:
        cat.record_raw(con, **raw_row(SHA_A, archived_path=str(copy)))
        cat.record_raw(con, **raw_row(SHA_B, "g.csv", archived_path=None, status="quarantined", reason="r"))
        cat.record_dataset(con, **dataset_row(1, path=str(inside)))
        cat.record_dataset(con, **dataset_row(2, path="/elsewhere/dep1_v002.nc"))
    con = sqlite3.connect(cat.path)
    assert sorted(r[0] for r in con.execute("SELECT path FROM datasets")) == \
        ["/elsewhere/dep1_v002.nc", "datasets/st1/dep1_v001.nc"]
    assert con.execute("SELECT archived_path FROM raw_files WHERE sha256 = ?", (SHA_A,)).fetchone()[0] == \
        "raw/st1/dep1/aaaaaaaaaaaa_f.csv"
    con.close()
    cat.mark_pruned(str(inside))
    assert [d["pruned"] for d in cat.dataset_versions("dep1")] == [1, 0]

    # the archive moved: the same catalog file, opened from the new place, gives the new place's paths
    moved = tmp_path / "b" / "restored"
    moved.parent.mkdir()
    os.rename(root, moved)
    again = Catalog(moved / "catalog.sqlite")
    v1, v2 = again.dataset_versions("dep1")
    assert v1["path"] == str(moved.resolve() / "datasets" / "st1" / "dep1_v001.nc")
    assert v2["path"] == "/elsewhere/dep1_v002.nc"                # outside the archive: kept as recorded
    assert again.latest_dataset("dep1")["path"] == v2["path"]
    assert [d["path"] for d in again.datasets()] == [v1["path"], v2["path"]]
    assert {r["sha256"]: r["archived_path"] for r in again.raw_files()} == \
        {SHA_A: str(moved.resolve() / "raw" / "st1" / "dep1" / "aaaaaaaaaaaa_f.csv"), SHA_B: None}


def test_migration_5_makes_existing_paths_inside_the_archive_relative(tmp_path):
    root = tmp_path / "archive"
    root.mkdir()
    con = sqlite3.connect(root / "catalog.sqlite", isolation_level=None)
    for version, script in enumerate(MIGRATIONS[:4], start=1):       # a catalog written before migration 5
        for stmt in filter(str.strip, script.split(";")):
            con.execute(stmt)
        con.execute(f"PRAGMA user_version = {version}")
    inside, outside = root.resolve() / "datasets" / "st1" / "d_v001.nc", "/old/archive/datasets/st1/d_v002.nc"
    for version, path in ((1, str(inside)), (2, outside)):
        con.execute("INSERT INTO datasets (path, station, deployment, version, rules_name, rules_sha256, "
                    "register_sha256, software_version, created, samples, flag_counts, raw_sha256) "
                    "VALUES (?, 'st1', 'd', ?, 'r', '', '', '0', '', 1, '{}', '[]')", (path, version))
    con.execute("INSERT INTO raw_files (sha256, size, original_name, original_path, archived_path, first_seen, "
                "status) VALUES (?, 1, 'f', '/inbox/f', ?, '', 'archived')",
                (SHA_A, str(root.resolve() / "raw" / "st1" / "d" / "f")))
    con.close()
    cat = Catalog(root / "catalog.sqlite")
    assert cat.schema_version == len(MIGRATIONS)      # and every later one
    con = sqlite3.connect(cat.path)
    assert [r[0] for r in con.execute("SELECT path FROM datasets ORDER BY version")] == \
        ["datasets/st1/d_v001.nc", outside]
    assert con.execute("SELECT archived_path FROM raw_files").fetchone()[0] == "raw/st1/d/f"
    con.close()
    assert [d["path"] for d in cat.dataset_versions("d")] == [str(inside), outside]


# --- transactions ---------------------------------------------------------------------------

def test_raw_files_and_dataset_recorded_in_one_transaction(cat):
    with cat.transaction() as con:
        cat.record_raw(con, **raw_row(SHA_A, "one.csv"))
        cat.record_raw(con, **raw_row(SHA_B, "two.csv", status="quarantined", reason="bad header"))
        cat.record_dataset(con, **dataset_row(1, qc_inputs={"rules": {"x": 1}}))
    assert cat.known_hashes() == {SHA_A, SHA_B}
    assert [r["original_name"] for r in cat.raw_files(status="archived")] == ["one.csv"]
    (q,) = cat.raw_files(status="quarantined")
    assert q["reason"] == "bad header" and q["first_seen"].endswith("Z")
    (d,) = cat.datasets()
    # JSON columns come back as the Python values written
    assert d["flag_counts"] == {"1": 4, "4": 1} and d["raw_sha256"] == [SHA_A]
    assert d["qc_inputs"] == {"rules": {"x": 1}} and d["pruned"] == 0


def test_transaction_that_raises_leaves_nothing(cat):
    with pytest.raises(RuntimeError, match="crash in the middle"):
        with cat.transaction() as con:
            cat.record_raw(con, **raw_row(SHA_A))
            cat.record_dataset(con, **dataset_row(1))
            raise RuntimeError("crash in the middle")
    assert cat.known_hashes() == set() and cat.datasets() == []
    # the catalog is usable afterwards (no transaction left open, no lock held)
    with cat.transaction() as con:
        cat.record_raw(con, **raw_row(SHA_B))
    assert cat.known_hashes() == {SHA_B}


def test_constraint_violation_rolls_back_the_rows_before_it(cat):
    with cat.transaction() as con:
        cat.record_dataset(con, **dataset_row(1))
    with pytest.raises(sqlite3.IntegrityError):
        with cat.transaction() as con:
            cat.record_raw(con, **raw_row(SHA_A))
            cat.record_dataset(con, **dataset_row(1, path="/elsewhere.nc"))   # (deployment, version) taken
    assert cat.known_hashes() == set()
    assert [d["path"] for d in cat.datasets()] == [dataset_row(1)["path"]]


def test_status_must_be_archived_or_quarantined(cat):
    with pytest.raises(sqlite3.IntegrityError):
        with cat.transaction() as con:
            cat.record_raw(con, **raw_row(SHA_A, status="lost"))
    assert cat.known_hashes() == set()


def test_recording_a_raw_file_again_replaces_its_row(cat):
    with cat.transaction() as con:
        cat.record_raw(con, **raw_row(SHA_A, status="quarantined", reason="unknown serial"))
    with cat.transaction() as con:
        cat.record_raw(con, **raw_row(SHA_A, archived_path="/archive/raw/x"))
    (r,) = cat.raw_files()
    assert r["status"] == "archived" and r["reason"] is None and r["archived_path"] == "/archive/raw/x"


# --- dataset versions -----------------------------------------------------------------------

def test_latest_dataset_and_versions_ordered_by_version_not_by_insertion(cat):
    assert cat.latest_dataset("dep1") is None and cat.dataset_versions("dep1") == []
    for v in (2, 10, 1):                                  # inserted out of order; 10 > 2 numerically
        with cat.transaction() as con:
            cat.record_dataset(con, **dataset_row(v))
    with cat.transaction() as con:
        cat.record_dataset(con, **dataset_row(99, deployment="other"))
    assert cat.latest_dataset("dep1")["version"] == 10
    assert [r["version"] for r in cat.dataset_versions("dep1")] == [1, 2, 10]
    assert cat.latest_dataset("other")["version"] == 99
    assert cat.latest_dataset("nobody") is None


def test_mark_pruned_marks_only_that_path(cat):
    for v in (1, 2, 3):
        with cat.transaction() as con:
            cat.record_dataset(con, **dataset_row(v))
    cat.mark_pruned(dataset_row(2)["path"])
    assert {r["version"]: r["pruned"] for r in cat.dataset_versions("dep1")} == {1: 0, 2: 1, 3: 0}
    cat.mark_pruned("/no/such/path.nc")                   # no row: nothing changes, no error
    assert [r["pruned"] for r in cat.dataset_versions("dep1")] == [0, 1, 0]


# --- runs -----------------------------------------------------------------------------------

def test_run_start_and_end_recorded_and_the_lock_released(cat):
    first = cat.start_run("nightly")
    (row,) = cat.runs()
    assert row["id"] == first and row["kind"] == "nightly" and row["started"].endswith("Z")
    assert row["ended"] is None and row["outcome"] is None
    cat.end_run(first, "completed", {"datasets_written": 3})
    (row,) = cat.runs()
    assert row["ended"] >= row["started"] and row["outcome"] == "completed"
    assert row["counts"] == {"datasets_written": 3}
    # the lock was given back: a second run starts, gets a new id and ends
    second = cat.start_run("rerun")
    cat.end_run(second, "nothing new", {})
    assert [(r["id"], r["kind"], r["outcome"]) for r in cat.runs()] == [(first, "nightly", "completed"),
                                                                      (second, "rerun", "nothing new")]
    assert second > first


def test_start_run_removes_stale_temporaries_but_not_prefects(cat):
    root = cat.path.parent
    stale = root / "datasets" / "st1" / ".x_v001.nc.k3j2.tmp"
    stale.parent.mkdir(parents=True)
    stale.write_text("half")
    prefect = root / ".prefect" / ".state.abc.tmp"
    prefect.parent.mkdir()
    prefect.write_text("theirs")
    keep = root / "datasets" / "st1" / "x_v001.nc"
    keep.write_text("done")
    run = cat.start_run()
    cat.end_run(run, "completed", {})
    assert not stale.exists() and prefect.exists() and keep.read_text() == "done"


# --- ArchivePaths -----------------------------------------------------------------------------

@pytest.mark.parametrize("station, deployment", [("..", "dep1"), ("st1", ".."), ("st1", "../../etc"),
                                                 ("st/1", "dep1"), ("st1", "/abs"), ("", "dep1"),
                                                 ("st1", "dep1\n")])
def test_archive_paths_refuse_ids_that_would_leave_the_root(tmp_path, station, deployment):
    paths = ArchivePaths(tmp_path / "archive")
    for make in (lambda: paths.ingested(station, deployment), lambda: paths.dataset(station, deployment, 1),
                 lambda: paths.raw_copy(station, deployment, SHA_A, "f.csv")):
        with pytest.raises(ValueError):
            make()


def test_archive_paths_stay_inside_for_good_ids_and_hostile_names(tmp_path):
    paths = ArchivePaths(tmp_path / "archive")
    root = (tmp_path / "archive").resolve()
    # the layout written in store.py's docstring
    assert paths.dataset("st1", "dep1", 7) == root / "datasets" / "st1" / "qcpipe_st1_dep1_v007.nc"
    assert paths.ingested("st1", "dep1") == root / "ingested" / "st1" / "dep1.nc"
    # file names are reduced to a safe base name; they cannot climb out
    q = paths.quarantine(SHA_A, "../../../etc/passwd")
    assert q.parent == root / "quarantine" and q.name == "aaaaaaaaaaaa_passwd"
    assert paths.derived("st1", "../../x.nc").parent == root / "derived" / "st1"
    with pytest.raises(ValueError):
        paths.quarantine("not-a-digest", "f.csv")
    with pytest.raises(ValueError):
        paths.derived("../st", "x.nc")


def test_archive_paths_refuse_a_folder_that_links_outside(tmp_path):
    outside = tmp_path / "outside"
    outside.mkdir()
    root = tmp_path / "archive"
    root.mkdir()
    (root / "ingested").symlink_to(outside, target_is_directory=True)
    with pytest.raises(ValueError, match="would leave the archive"):
        ArchivePaths(root).ingested("st1", "dep1")


# --- atomic writes ----------------------------------------------------------------------------

def temporaries(folder):
    return sorted(p.name for p in folder.iterdir() if p.name.endswith(".tmp"))


@pytest.mark.parametrize("err, raised", [(errno.EIO, OSError), (errno.ENOSPC, ArchiveError),
                                         (errno.EACCES, ArchiveError)])
def test_failed_rename_keeps_the_old_file_and_no_temporary(tmp_path, monkeypatch, err, raised):
    final = tmp_path / "data.txt"
    final.write_text("old contents")

    def failing_replace(src, dst):
        raise OSError(err, os.strerror(err))

    monkeypatch.setattr(os, "replace", failing_replace)
    with pytest.raises(raised) as info:
        write_text_atomic(final, "new contents")
    assert info.value.errno == err or isinstance(info.value, ArchiveError)
    assert final.read_text() == "old contents"
    assert temporaries(tmp_path) == []


def test_error_while_writing_keeps_the_old_file_and_no_temporary(tmp_path):
    final = tmp_path / "data.txt"
    final.write_text("old contents")
    with pytest.raises(ValueError, match="writer failed"):
        with atomic_path(final) as tmp:
            assert tmp.parent == final.parent and tmp.name.startswith(".data.txt.")
            tmp.write_text("partial")
            raise ValueError("writer failed")
    assert final.read_text() == "old contents"
    assert temporaries(tmp_path) == []


def test_copy_atomic_with_failing_rename_and_then_succeeding(tmp_path, monkeypatch):
    src = tmp_path / "src.bin"
    src.write_bytes(b"\x00new\xff")
    final = tmp_path / "out" / "dest.bin"
    final.parent.mkdir()
    final.write_bytes(b"old")
    real_replace = os.replace
    monkeypatch.setattr(os, "replace", lambda a, b: (_ for _ in ()).throw(OSError(errno.EIO, "I/O error")))
    with pytest.raises(OSError):
        copy_atomic(src, final)
    assert final.read_bytes() == b"old" and temporaries(final.parent) == []
    monkeypatch.setattr(os, "replace", real_replace)
    copy_atomic(src, final)
    assert final.read_bytes() == b"\x00new\xff" and temporaries(final.parent) == []
    assert src.read_bytes() == b"\x00new\xff"                  # the source is only read


def test_notices_unshown_by_their_run_go_to_the_next_run_once(cat):
    """A run's notices are recorded in a transaction; those its run never marked shown (it was killed)
    are the next run's to show, and once that run marks them they are nobody's."""
    clock = {"kind": "clock", "text": "clock off", "station": "st1", "deployment": "dep1"}
    with cat.transaction() as con:
        cat.record_notices(con, 1, [clock])
    with pytest.raises(RuntimeError):
        with cat.transaction() as con:          # rolled back with what it was recorded with
            cat.record_notices(con, 1, [{"kind": "fouling", "text": "x", "deployment": "dep2"}])
            raise RuntimeError("stop")
    cat.replace_notice_text(1, "dep1", "clock", "clock off; and its companions")
    assert [(n["run_id"], n["text"]) for n in cat.unreported_notices(2)] == [(1, "clock off; and its companions")]
    assert cat.unreported_notices(1) == []     # a run's own notices are not "earlier" ones
    with cat.transaction() as con:
        cat.record_notices(con, 2, [{"kind": "run", "text": "own"}])
    cat.mark_notices_reported(2)
    assert cat.unreported_notices(3) == []
    assert {n["reported_run"] for n in cat.notices()} == {2}


def test_every_catalog_operation_closes_its_connection(tmp_path):
    """No operation leaves a connection for the garbage collector: with the cyclic collector off, no
    ``sqlite3.Connection`` outlives the operations, and the last close has checkpointed the WAL into the
    database file and removed the WAL and its index (SQLite's documented behaviour on the last close of a
    WAL database, sqlite.org/wal.html "the WAL file is deleted" when the last connection closes).

    A connection left open keeps POSIX locks that a copy of the files closed in the same process drops;
    another process then checkpoints and deletes the WAL under it and a new connection here reads
    "database disk image is malformed" (a moved archive, tests/archive/test_relocation.py)."""
    import gc

    def open_connections() -> int:
        n = 0
        for o in gc.get_objects():
            if isinstance(o, sqlite3.Connection):
                try:
                    o.total_changes                 # ProgrammingError once closed
                    n += 1
                except sqlite3.ProgrammingError:
                    pass
        return n

    path = tmp_path / "archive" / "catalog.sqlite"
    gc.collect()
    gc.disable()
    try:
        before = open_connections()
        cat = Catalog(path)
        with cat.transaction() as con:
            cat.record_raw(con, **raw_row(SHA_A))
            cat.record_dataset(con, **dataset_row(1))
            cat.record_notices(con, 1, [{"kind": "clock", "text": "t", "station": "st1", "deployment": "dep1"}])
        run_id = cat.start_run()
        cat.end_run(run_id, "completed", {})
        cat.save_inbox_hashes({"a.csv": (1, 2, 3, SHA_A)})
        assert cat.schema_version == len(MIGRATIONS) and cat.known_hashes() == {SHA_A}
        assert cat.latest_dataset("dep1")["version"] == 1 and len(cat.datasets()) == 1
        assert cat.inbox_hashes() and cat.runs() and cat.raw_files() and cat.notices()
        assert [n["text"] for n in cat.unreported_notices(2)] == ["t"]
        cat.mark_notices_reported(2)
        left = open_connections() - before
    finally:
        gc.enable()
    assert left == 0
    assert sorted(p.name for p in path.parent.iterdir() if p.name.startswith("catalog")) == ["catalog.sqlite"]
