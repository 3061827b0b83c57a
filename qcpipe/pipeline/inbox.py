"""Raw files of a run: new ones in the inbox, each read on its own, rejected ones quarantined."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

from .. import progress
from ..config.layouts import LoadedLayouts
from ..config.register import LoadedRegister
from ..errors import ConfigError
from ..files import copy_atomic, write_text_atomic
from ..ingest.discover import RawFile, discover_files
from .context import Context

if TYPE_CHECKING:                 # the readers (pandas) are imported when a file is read
    from ..ingest.match import IngestedFile


def find_new_files(ctx: Context) -> tuple[list[RawFile], dict]:
    """New raw files in the inbox (content not yet in the catalog).

    Content hashes come from the catalog's cache of the inbox (``Catalog.inbox_hashes``) for
    files whose size and time stamps are those it recorded; the others are read and hashed,
    and the cache is written back (in one transaction) for the next run."""
    if not ctx.inbox.is_dir():
        raise ConfigError(f"{ctx.workspace_path}: key paths.inbox: folder {ctx.inbox} does not exist; "
                          "create it or correct the path")
    catalog = ctx.catalog
    cached = catalog.inbox_hashes()
    new, counts, hashes = discover_files(ctx.inbox, catalog.known_hashes(), cached)
    if hashes != cached:
        catalog.save_inbox_hashes(hashes)
    progress.expect("read", len(new))
    return new, counts


# --- one file -------------------------------------------------------------------

@dataclass
class FileOutcome:
    raw: RawFile
    ingested: IngestedFile | None = None
    reason: str | None = None


def read_one_file(raw: RawFile, register: LoadedRegister, layouts: LoadedLayouts) -> FileOutcome:
    """Ingest one file; a rejected file comes back with its one-line reason (never raises)."""
    from ..ingest.match import FileRejected, ingest_file

    try:
        return FileOutcome(raw, ingested=ingest_file(raw, register, layouts))
    except FileRejected as err:
        return FileOutcome(raw, reason=str(err))
    finally:
        progress.step("read", raw.name)


def quarantine_file(ctx: Context, outcome: FileOutcome) -> Path:
    """Copy a rejected file and its reason to quarantine and record it in the catalog."""
    raw = outcome.raw
    dest = ctx.paths.quarantine(raw.sha256, raw.name)
    copy_atomic(raw.path, dest)
    write_text_atomic(dest.with_name(dest.name + ".reason.txt"),
                      f"{outcome.reason}\nsha256: {raw.sha256}\noriginal path: {raw.path}\n")
    with ctx.catalog.transaction() as con:
        ctx.catalog.record_raw(con, sha256=raw.sha256, size=raw.size, original_name=raw.name,
                               original_path=str(raw.path), archived_path=str(dest), status="quarantined",
                               reason=outcome.reason)
    return dest




def group_by_deployment(files: list[IngestedFile]) -> dict[str, list[IngestedFile]]:
    """Ingested files grouped by deployment id (sorted)."""
    out: dict[str, list[IngestedFile]] = {}
    for f in files:
        out.setdefault(f.deployment, []).append(f)
    return dict(sorted(out.items()))
