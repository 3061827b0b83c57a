"""The archive catalog: a SQLite file recording every raw file, dataset and run.

Schema versioned with ordered migrations (``MIGRATIONS``); every change is
made inside a transaction, so a crash leaves the previous state.
"""

from __future__ import annotations

import datetime as dt
import json
import sqlite3
from contextlib import contextmanager
from pathlib import Path

from ..errors import ArchiveError
from ..faults import crash_point
from .lock import ArchiveLock, ArchiveReadOnly, archive_is_read_only, read_only_message

MIGRATIONS = [
    # 1: first schema
    """
    CREATE TABLE raw_files (
        sha256 TEXT PRIMARY KEY,
        size INTEGER NOT NULL,
        original_name TEXT NOT NULL,
        original_path TEXT NOT NULL,
        archived_path TEXT,
        station TEXT,
        deployment TEXT,
        layout TEXT,
        time_start TEXT,
        time_end TEXT,
        first_seen TEXT NOT NULL,
        status TEXT NOT NULL CHECK (status IN ('archived', 'quarantined')),
        reason TEXT
    );
    CREATE TABLE datasets (
        id INTEGER PRIMARY KEY AUTOINCREMENT,
        path TEXT NOT NULL UNIQUE,
        station TEXT NOT NULL,
        deployment TEXT NOT NULL,
        version INTEGER NOT NULL,
        rules_name TEXT NOT NULL,
        rules_sha256 TEXT NOT NULL,
        register_sha256 TEXT NOT NULL,
        software_version TEXT NOT NULL,
        created TEXT NOT NULL,
        samples INTEGER NOT NULL,
        flag_counts TEXT NOT NULL,
        raw_sha256 TEXT NOT NULL,
        UNIQUE (deployment, version)
    );
    CREATE TABLE runs (
        id INTEGER PRIMARY KEY AUTOINCREMENT,
        started TEXT NOT NULL,
        ended TEXT,
        outcome TEXT,
        counts TEXT
    );
    """,
    # 2: re-runs: what decided each dataset, its own hash, retention; the ingest key of raw files
    """
    ALTER TABLE datasets ADD COLUMN qc_key TEXT;
    ALTER TABLE datasets ADD COLUMN qc_inputs TEXT;
    ALTER TABLE datasets ADD COLUMN sha256 TEXT;
    ALTER TABLE datasets ADD COLUMN pruned INTEGER NOT NULL DEFAULT 0;
    ALTER TABLE runs ADD COLUMN kind TEXT
    """,
    # 3: the run that wrote each dataset version (a retried task skips what its run already committed)
    """
    ALTER TABLE datasets ADD COLUMN run_id INTEGER
    """,
    # 4: the inbox's content hashes by path, size and time stamps, so unchanged files are not read again
    """
    CREATE TABLE inbox_hashes (
        path TEXT PRIMARY KEY,
        size INTEGER NOT NULL,
        mtime_ns INTEGER NOT NULL,
        ctime_ns INTEGER NOT NULL,
        sha256 TEXT NOT NULL
    )
    """,
    # 5: archive paths relative to the archive root (the folder holding the catalog), so a moved or restored
    # archive works unchanged; rows outside the root stay absolute (see relative_paths)
    lambda con, root: relative_paths(con, root),
    # 6: the notices of each run, recorded with what they are about (a dataset, a quarantined file) in the
    # same transaction, and the run that showed them to a person: a run killed before its summary and
    # report leaves them for the next run to show
    """
    CREATE TABLE notices (
        id INTEGER PRIMARY KEY AUTOINCREMENT,
        run_id INTEGER NOT NULL,
        kind TEXT NOT NULL,
        station TEXT,
        deployment TEXT,
        text TEXT NOT NULL,
        reported_run INTEGER
    );
    CREATE INDEX notices_unreported ON notices (reported_run, run_id)
    """,
]

# the columns holding a path inside the archive: stored relative to the archive root, returned absolute
PATH_COLUMNS = {"raw_files": "archived_path", "datasets": "path"}


def stored_path(path, root: Path) -> str | None:
    """``path`` as the catalog stores it: relative to the archive ``root`` (POSIX separators) when it lies
    inside it, else absolute and unchanged (None stays None)."""
    if path is None or str(path) == "":
        return path
    p = Path(path)
    if not p.is_absolute():
        return p.as_posix()
    try:
        return p.resolve().relative_to(root).as_posix()
    except ValueError:
        return str(path)


def resolved_path(stored, root: Path) -> str | None:
    """A stored path as an absolute one: a relative path is joined to the archive ``root`` the catalog was
    opened from (so the archive may be moved or restored elsewhere); an absolute one is returned unchanged."""
    if stored is None or stored == "":
        return stored
    p = Path(stored)
    return str(p if p.is_absolute() else root / p)


def relative_paths(con: sqlite3.Connection, root: Path) -> None:
    """Migration 5: rewrite the archive paths of existing rows relative to ``root`` (rows outside it stay)."""
    for table, column in PATH_COLUMNS.items():
        key = "sha256" if table == "raw_files" else "id"
        for k, value in con.execute(f"SELECT {key}, {column} FROM {table}").fetchall():
            new = stored_path(value, root)
            if new != value:
                con.execute(f"UPDATE {table} SET {column} = ? WHERE {key} = ?", (new, k))


_RUN_LOCKS: dict = {}      # (catalog path, run id) -> ArchiveLock held for the run


def remove_stale_temporaries(root: Path) -> list[Path]:
    """Delete temporary files an interrupted run left behind (``.<name>.<random>.tmp``; see files.atomic_path).

    Only called under the archive lock, so no live run is writing them.
    """
    removed = []
    for p in Path(root).rglob(".*.tmp"):
        if ".prefect" in p.parts or not p.is_file():
            continue
        p.unlink()
        removed.append(p)
    return removed


def utc_now() -> str:
    return dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


class Catalog:
    """Thin access layer over the SQLite catalog; one short connection per operation, closed when it ends.

    Every connection is closed explicitly (:meth:`_connection`, :meth:`transaction`), never left to the
    garbage collector: a ``sqlite3.Connection`` refers to itself through its statement cache (CPython
    3.11), so only the cyclic collector frees it, at any later time.  Until then it keeps its POSIX locks
    and its mapping of the WAL index (``-shm``); once a copy of the catalog's files is closed in the same
    process (the locks of every descriptor of a file go with it), another process may take the catalog
    as unused, checkpoint it and delete its WAL and index, and a new connection in this process then
    shares the stale index and reads a "malformed" database.  The last connection's close checkpoints
    the WAL into the database file, so between operations the catalog is one file.

    On an archive this process cannot write (a read-only disk or folder: :func:`archive_is_read_only`)
    the catalog is opened read-only (``mode=ro``; ``immutable=1`` when SQLite cannot make the
    shared-memory file beside it and there is no write-ahead log to read): reading works, migrations are
    not run and a write raises :class:`ArchiveReadOnly`.
    """

    def __init__(self, path: str | Path):
        self.path = Path(path)
        self.root = self.path.parent.resolve()      # the archive root: relative paths are resolved against it
        self.read_only = archive_is_read_only(self.root, self.path)
        if self.read_only:
            with self._connection() as con:
                self._check_schema(con)
            return
        self.path.parent.mkdir(parents=True, exist_ok=True)
        with self._connection() as con:
            self._migrate(con)

    def _connect(self) -> sqlite3.Connection:
        if self.read_only:
            return self._connect_read_only()
        con = sqlite3.connect(self.path, timeout=30, isolation_level=None)
        con.row_factory = sqlite3.Row
        try:
            con.execute("PRAGMA journal_mode=WAL")
            con.execute("PRAGMA foreign_keys=ON")
        except sqlite3.OperationalError as err:
            con.close()
            raise _storage_error(err, self.path) from None
        return con

    def _connect_read_only(self) -> sqlite3.Connection:
        """A read-only connection: ``mode=ro`` (reads the write-ahead log, needs its shared-memory file),
        else ``immutable=1`` when there is no write-ahead log to miss (the main file holds everything)."""
        base = f"{self.path.resolve().as_uri()}?mode=ro"
        wal = self.path.with_name(self.path.name + "-wal")
        for uri in (base, f"{base}&immutable=1"):
            if uri != base and wal.exists() and wal.stat().st_size > 0:
                raise ArchiveReadOnly(f"catalog {self.path} has a write-ahead log ({wal.name}) that SQLite cannot "
                                      "read on a read-only disk: open the archive once where it can be written "
                                      "('qcpipe holdings' folds the log in), then make it read-only again")
            con = None
            try:
                con = sqlite3.connect(uri, uri=True, timeout=30, isolation_level=None)
                con.row_factory = sqlite3.Row
                con.execute("SELECT count(*) FROM sqlite_master").fetchone()
                return con
            except sqlite3.OperationalError as err:
                last = err
                if con is not None:
                    con.close()
        raise ArchiveError(f"cannot read the catalog {self.path} on a read-only archive ({last}); "
                           "check that the file is readable") from None

    def _check_schema(self, con: sqlite3.Connection) -> None:
        current = con.execute("PRAGMA user_version").fetchone()[0]
        if current != len(MIGRATIONS):
            raise ArchiveReadOnly(f"catalog {self.path} is at schema version {current}, this qcpipe reads version "
                                  f"{len(MIGRATIONS)}, and the archive is read-only so it cannot be brought up to "
                                  "date: run any qcpipe command once where the archive can be written")

    @contextmanager
    def _connection(self):
        """A connection in autocommit mode (reads; migrations begin their own transactions), closed when the block ends."""
        con = self._connect()
        try:
            yield con
        finally:
            con.close()

    @contextmanager
    def transaction(self):
        if self.read_only:
            raise ArchiveReadOnly(read_only_message(self.root))
        con = self._connect()
        try:
            con.execute("BEGIN IMMEDIATE")
            yield con
            crash_point("before-commit catalog")
            con.execute("COMMIT")
        except BaseException as err:
            if con.in_transaction:
                try:
                    con.execute("ROLLBACK")
                except sqlite3.Error:
                    pass               # the connection closes below; SQLite rolls back what was not committed
            mapped = _storage_error(err, self.path) if isinstance(err, sqlite3.OperationalError) else err
            if mapped is not err:
                raise mapped from None
            raise
        finally:
            con.close()

    def _migrate(self, con: sqlite3.Connection) -> None:
        current = con.execute("PRAGMA user_version").fetchone()[0]
        for version, script in enumerate(MIGRATIONS[current:], start=current + 1):
            con.execute("BEGIN IMMEDIATE")
            try:
                if callable(script):
                    script(con, self.root)
                else:
                    for stmt in filter(str.strip, script.split(";")):
                        con.execute(stmt)
                con.execute(f"PRAGMA user_version = {version}")
                con.execute("COMMIT")
            except BaseException as err:
                if con.in_transaction:        # a failed COMMIT (a full disk) has already rolled back
                    con.execute("ROLLBACK")
                mapped = _storage_error(err, self.path) if isinstance(err, sqlite3.OperationalError) else err
                if mapped is not err:
                    raise mapped from None
                raise

    @property
    def schema_version(self) -> int:
        with self._connection() as con:
            return con.execute("PRAGMA user_version").fetchone()[0]

    # raw files -------------------------------------------------------------
    def known_hashes(self) -> set[str]:
        with self._connection() as con:
            return {r[0] for r in con.execute("SELECT sha256 FROM raw_files")}

    def inbox_hashes(self) -> dict[str, tuple[int, int, int, str]]:
        """The cached content hashes of the inbox: {path: (size, mtime_ns, ctime_ns, sha256)}."""
        with self._connection() as con:
            return {r[0]: (r[1], r[2], r[3], r[4])
                    for r in con.execute("SELECT path, size, mtime_ns, ctime_ns, sha256 FROM inbox_hashes")}

    def save_inbox_hashes(self, hashes: dict[str, tuple[int, int, int, str]]) -> None:
        """Replace the cached inbox hashes with ``hashes`` (one transaction: the old cache or the new one)."""
        with self.transaction() as con:
            con.execute("DELETE FROM inbox_hashes")
            con.executemany("INSERT INTO inbox_hashes (path, size, mtime_ns, ctime_ns, sha256) VALUES (?, ?, ?, ?, ?)",
                            [(path, *row) for path, row in hashes.items()])

    def record_raw(self, con: sqlite3.Connection, **row) -> None:
        row.setdefault("first_seen", utc_now())
        if "archived_path" in row:
            row["archived_path"] = stored_path(row["archived_path"], self.root)
        cols = ", ".join(row)
        marks = ", ".join("?" for _ in row)
        con.execute(f"INSERT OR REPLACE INTO raw_files ({cols}) VALUES ({marks})", tuple(row.values()))

    def raw_files(self, **where) -> list[dict]:
        return self._select("raw_files", where, "first_seen, original_name")

    # datasets --------------------------------------------------------------
    def latest_dataset(self, deployment: str) -> dict | None:
        with self._connection() as con:
            r = con.execute("SELECT * FROM datasets WHERE deployment = ? ORDER BY version DESC LIMIT 1",
                            (deployment,)).fetchone()
        return self._row(r, "datasets") if r else None

    def record_dataset(self, con: sqlite3.Connection, **row) -> None:
        for key in ("flag_counts", "raw_sha256", "qc_inputs"):
            if key in row and not isinstance(row[key], str):
                row[key] = json.dumps(row[key], sort_keys=True)
        row.setdefault("created", utc_now())
        if "path" in row:
            row["path"] = stored_path(row["path"], self.root)
        cols = ", ".join(row)
        con.execute(f"INSERT INTO datasets ({cols}) VALUES ({', '.join('?' for _ in row)})",
                    tuple(row.values()))

    def datasets(self, **where) -> list[dict]:
        return self._select("datasets", where, "station, deployment, version")

    # runs ------------------------------------------------------------------
    def dataset_versions(self, deployment: str) -> list[dict]:
        return self._select("datasets", {"deployment": deployment}, "version")

    def mark_pruned(self, path: str) -> None:
        with self.transaction() as con:
            con.execute("UPDATE datasets SET pruned = 1 WHERE path = ?", (stored_path(path, self.root),))

    def start_run(self, kind: str = "nightly") -> int:
        """Record a run's start, holding the archive's lock until :meth:`end_run` (one run at a time)."""
        lock = ArchiveLock(self.path.parent)
        lock.__enter__()
        remove_stale_temporaries(self.path.parent)
        with self.transaction() as con:
            cur = con.execute("INSERT INTO runs (started, kind) VALUES (?, ?)", (utc_now(), kind))
            run_id = int(cur.lastrowid)
        _RUN_LOCKS[(str(self.path), run_id)] = lock
        return run_id

    def end_run(self, run_id: int, outcome: str, counts: dict) -> None:
        try:
            with self.transaction() as con:
                con.execute("UPDATE runs SET ended = ?, outcome = ?, counts = ? WHERE id = ?",
                            (utc_now(), outcome, json.dumps(counts, sort_keys=True, default=int), run_id))
        finally:
            lock = _RUN_LOCKS.pop((str(self.path), run_id), None)
            if lock is not None:
                lock.release()

    def runs(self) -> list[dict]:
        return self._select("runs", {}, "id")

    # notices ---------------------------------------------------------------
    def record_notices(self, con: sqlite3.Connection, run_id: int, notices: list[dict]) -> None:
        """Record a run's notices (``Notice.as_dict()``), not yet shown, in the transaction ``con``."""
        con.executemany("INSERT INTO notices (run_id, kind, station, deployment, text) VALUES (?, ?, ?, ?, ?)",
                        [(run_id, n["kind"], n.get("station"), n.get("deployment"), n["text"]) for n in notices])

    def notices(self, **where) -> list[dict]:
        """Recorded notices (``run_id=``, ``deployment=``...), oldest first."""
        return self._select("notices", where, "id")

    def replace_notice_text(self, run_id: int, deployment: str, kind: str, text: str) -> None:
        """The sentence of a run's notice of ``kind`` about ``deployment``, completed after it was recorded."""
        with self.transaction() as con:
            con.execute("UPDATE notices SET text = ? WHERE run_id = ? AND deployment = ? AND kind = ?",
                        (text, run_id, deployment, kind))

    def unreported_notices(self, run_id: int) -> list[dict]:
        """Notices of runs before ``run_id`` that no run has shown (their run stopped before its report)."""
        with self._connection() as con:
            return [_row(r) for r in con.execute(
                "SELECT * FROM notices WHERE reported_run IS NULL AND run_id < ? ORDER BY id", (run_id,))]

    def mark_notices_reported(self, run_id: int) -> None:
        """Every notice not yet shown (the run's own and those of earlier runs) as shown by run ``run_id``."""
        with self.transaction() as con:
            con.execute("UPDATE notices SET reported_run = ? WHERE reported_run IS NULL AND run_id <= ?",
                        (run_id, run_id))

    def _select(self, table: str, where: dict, order: str) -> list[dict]:
        column = PATH_COLUMNS.get(table)
        if column in where:
            where = {**where, column: stored_path(where[column], self.root)}
        clause = " AND ".join(f"{k} = ?" for k in where)
        sql = f"SELECT * FROM {table}" + (f" WHERE {clause}" if clause else "") + f" ORDER BY {order}"
        with self._connection() as con:
            return [self._row(r, table) for r in con.execute(sql, tuple(where.values()))]

    def _row(self, r: sqlite3.Row, table: str) -> dict:
        """A row as a dict: JSON columns decoded, the archive path resolved against this archive's root."""
        d = _row(r)
        column = PATH_COLUMNS.get(table)
        if column in d:
            d[column] = resolved_path(d[column], self.root)
        return d


def _storage_error(err: sqlite3.OperationalError, path: Path) -> Exception:
    """SQLite's report of a full disk or a failing device as a one-line ArchiveError (others unchanged)."""
    text = str(err).lower()
    if "readonly" in text or "read-only" in text:
        return ArchiveReadOnly(read_only_message(path.parent))
    if "disk" in text or "full" in text:
        return ArchiveError(f"cannot write the catalog {path} ({err}): the archive's disk is full or failing; "
                            "free space (or fix the disk) and run again (the catalog keeps its last committed "
                            "state)")
    return err


def _row(r: sqlite3.Row) -> dict:
    d = dict(r)
    for key in ("flag_counts", "raw_sha256", "counts", "qc_inputs"):
        if key in d and isinstance(d[key], str):
            d[key] = json.loads(d[key])
    return d
