"""Raw files of a run: new ones in the inbox, each read on its own, rejected ones quarantined."""

from __future__ import annotations

import errno
import os
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

from .. import progress
from ..config.layouts import LoadedLayouts
from ..config.register import LoadedRegister
from ..errors import ConfigError
from ..faults import crash_point
from ..files import copy_atomic, storage_error, write_text_atomic
from ..ingest.discover import InboxSkip, RawFile, discover_files
from ..report.model import Quarantined
from .context import Context

if TYPE_CHECKING:                 # the readers (pandas) are imported when a file is read
    from ..ingest.match import IngestedFile


def find_new_files(ctx: Context) -> tuple[list[RawFile], dict]:
    """New raw files in the inbox (content not yet in the catalog).

    Content hashes come from the catalog's cache of the inbox (``Catalog.inbox_hashes``) for
    files whose size and time stamps are those it recorded; the others are read and hashed,
    and the cache is written back (in one transaction) for the next run.

    A link in the inbox that leads into the archive stops the run here, before anything is read
    (ConfigError): the archive's own files would be taken for new downloads."""
    if not ctx.inbox.is_dir():
        raise ConfigError(f"{ctx.workspace_path}: key paths.inbox: folder {ctx.inbox} does not exist; "
                          "create it or correct the path")
    catalog = ctx.catalog
    cached = catalog.inbox_hashes()
    new, counts, hashes = discover_files(ctx.inbox, catalog.known_hashes(), cached)
    check_no_link_into_archive(ctx.workspace_path, ctx.inbox, ctx.paths.root, counts["links_out"])
    if hashes != cached:
        catalog.save_inbox_hashes(hashes)
    progress.expect("read", len(new))
    return new, counts


def check_no_link_into_archive(workspace: Path, inbox: Path, archive: Path, links_out) -> None:
    """ConfigError (one line) naming the first inbox link, of ``links_out`` ((link, target) pairs), that leads
    into the archive."""
    root = Path(archive).resolve()
    for link, target in links_out:
        if target is not None and (target == root or root in target.parents):
            raise ConfigError(f"{workspace}: key paths.inbox: the inbox {inbox} holds a link "
                              f"{link.relative_to(inbox)} that leads into the archive {root} ({target}); remove "
                              "the link (the archive's files must never be read as new downloads)")


# --- one file -------------------------------------------------------------------

@dataclass
class FileOutcome:
    """A file read: ingested, rejected (``reason``, to quarantine) or skipped this run (``skipped``: it
    vanished or changed since it was listed; neither quarantined nor recorded, so the next run sees it)."""
    raw: RawFile
    ingested: IngestedFile | None = None
    reason: str | None = None
    skipped: InboxSkip | None = None


def read_one_file(raw: RawFile, register: LoadedRegister, layouts: LoadedLayouts,
                  read_from: Path | None = None) -> FileOutcome:
    """Ingest one file; a rejected file comes back with its one-line reason (never raises).
    ``read_from``: a checked copy of the file to read instead of ``raw.path``."""
    from ..ingest.match import FileRejected, ingest_file

    try:
        return FileOutcome(raw, ingested=ingest_file(raw, register, layouts, read_from))
    except FileRejected as err:
        return FileOutcome(raw, reason=str(err))
    finally:
        progress.step("read", raw.name)


def read_inbox_file(ctx: Context, raw: RawFile) -> FileOutcome:
    """Read a new inbox file once, and use it only if it still has the content it was listed with.

    The file is copied into the archive's staging folder (``<archive>/.staging``) and hashed as it is
    copied, a block at a time (memory bounded whatever the file's size).  A file that vanished, or whose
    copy's SHA-256 is no longer ``raw.sha256``, comes back skipped (:class:`InboxSkip`), never raising.
    Otherwise the copy is parsed and then renamed into place: the raw copy of an ingested file, the
    quarantine copy of a rejected one (unless already there).  So no later step reads the inbox file
    again, and every copy is exactly what its hash names."""
    rel = str(raw.path.relative_to(ctx.inbox)) if raw.path.is_relative_to(ctx.inbox) else raw.name
    staged = None
    try:
        try:
            staged, sha, size = _stage_copy(raw.path, ctx.paths.root / STAGING_DIR)
        except FileNotFoundError:
            return FileOutcome(raw, skipped=InboxSkip(rel, "vanished"))
        except OSError as err:
            if err.errno in (errno.ENOSPC, errno.EDQUOT, errno.EFBIG):
                raise storage_error(err, ctx.paths.root / STAGING_DIR) from None
            return FileOutcome(raw, skipped=InboxSkip(rel, "unreadable", err.strerror or type(err).__name__))
        if sha != raw.sha256:
            return FileOutcome(raw, skipped=InboxSkip(rel, "changed", f"{raw.size} -> {size} bytes"))
        outcome = read_one_file(raw, ctx.register, ctx.layouts, read_from=staged)
        f = outcome.ingested
        dest = (ctx.paths.raw_copy(f.station, f.deployment, raw.sha256, raw.name) if f is not None
                else ctx.paths.quarantine(raw.sha256, raw.name))
        if not dest.exists():
            dest.parent.mkdir(parents=True, exist_ok=True)
            crash_point(f"before-rename {dest.name}")
            os.replace(staged, dest)
        return outcome
    finally:
        if staged is not None and staged.exists():
            staged.unlink()


#: the archive's folder for inbox files being read (copied and hashed, not yet kept); emptied at each run's start
STAGING_DIR = ".staging"


def _stage_copy(src: Path, folder: Path, block: int = 1 << 20) -> tuple[Path, str, int]:
    """Copy ``src`` into ``folder`` under a temporary name, hashing the bytes copied; flushed to disk.
    Returns the copy, its SHA-256 and its size."""
    import hashlib
    import tempfile

    folder.mkdir(parents=True, exist_ok=True)
    h, size = hashlib.sha256(), 0
    with open(src, "rb") as fin:
        fd, tmp = tempfile.mkstemp(prefix=".", suffix=".tmp", dir=folder)
        try:
            with os.fdopen(fd, "wb") as fout:
                while chunk := fin.read(block):
                    h.update(chunk)
                    size += len(chunk)
                    fout.write(chunk)
                fout.flush()
                os.fsync(fout.fileno())
        except BaseException:          # a full disk or a read error: no partial copy is left behind
            os.unlink(tmp)
            raise
    return Path(tmp), h.hexdigest(), size


def clear_staging(ctx: Context) -> None:
    """Remove what a killed run left in the staging folder (call under the archive's lock)."""
    folder = ctx.paths.root / STAGING_DIR
    if folder.is_dir():
        for p in folder.iterdir():
            try:
                p.unlink()
            except OSError:
                pass


def quarantine_file(ctx: Context, outcome: FileOutcome, run_id: int | None = None) -> Path:
    """Copy a rejected file (unless :func:`read_inbox_file` kept it there already) and its reason to
    quarantine, and record it in the catalog with the notice of run ``run_id`` that names it (for a next
    run to show if this one stops before its summary).  The copy must have the file's hash (SourceChanged if not)."""
    raw = outcome.raw
    dest = ctx.paths.quarantine(raw.sha256, raw.name)
    if not dest.exists():
        copy_atomic(raw.path, dest, sha256=raw.sha256)
    write_text_atomic(dest.with_name(dest.name + ".reason.txt"),
                      f"{outcome.reason}\nsha256: {raw.sha256}\noriginal path: {raw.path}\n")
    with ctx.catalog.transaction() as con:
        ctx.catalog.record_raw(con, sha256=raw.sha256, size=raw.size, original_name=raw.name,
                               original_path=str(raw.path), archived_path=str(dest), status="quarantined",
                               reason=outcome.reason)
        if run_id is not None:
            ctx.catalog.record_notices(con, run_id, [Quarantined(raw.name, outcome.reason).notice().as_dict()])
    return dest




def group_by_deployment(files: list[IngestedFile]) -> dict[str, list[IngestedFile]]:
    """Ingested files grouped by deployment id (sorted)."""
    out: dict[str, list[IngestedFile]] = {}
    for f in files:
        out.setdefault(f.deployment, []).append(f)
    return dict(sorted(out.items()))
