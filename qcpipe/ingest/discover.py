"""Finding new raw files in an inbox by content hash (SHA-256).

Symbolic links in the inbox are followed only where they lead inside the inbox: a link to a
file there is listed under the link's name (usually a repeated copy of its target); a link to
a folder is not walked (its files are listed where they are).  A link leading out of the
inbox, or nowhere, is not read and comes back in the listing's ``links_out`` (the pipeline
refuses the run when one leads into the archive, and reports the others).
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

from ..files import sha256_of_file


@dataclass(frozen=True)
class RawFile:
    path: Path
    sha256: str
    size: int

    @property
    def name(self) -> str:
        return self.path.name


@dataclass(frozen=True)
class InboxSkip:
    """An inbox file not used this run, and why: ``why`` is "vanished" (gone after it was listed),
    "changed" (size, time stamps or content moved between listing, hashing and reading),
    "unreadable" (``detail``: the system's words) or "link_out" (``detail``: where the link leads,
    empty when nowhere)."""
    path: str                 # relative to the inbox
    why: str
    detail: str = ""


def _inside(path: Path, folder: Path) -> bool:
    return path == folder or folder in path.parents


def list_inbox(inbox: str | Path) -> tuple[list[Path], list[tuple[Path, Path | None]]]:
    """Files under ``inbox`` in sorted order (hidden files and folders skipped), links followed only
    within the inbox; and the links not followed: (link, resolved target, None when it leads nowhere)."""
    inbox = Path(inbox)
    root = inbox.resolve()
    files: list[Path] = []
    out: list[tuple[Path, Path | None]] = []
    for folder, dirs, names in os.walk(inbox, followlinks=False):
        here = Path(folder)
        dirs[:] = sorted(d for d in dirs if not d.startswith("."))
        for d in dirs:
            if (here / d).is_symlink() and not _inside((here / d).resolve(), root):
                out.append((here / d, (here / d).resolve()))
        for n in sorted(names):
            p = here / n
            if n.startswith("."):
                continue
            if p.is_symlink():
                target = p.resolve()
                if not target.exists():
                    out.append((p, None))
                    continue
                if not _inside(target, root):
                    out.append((p, target))
                    continue
            if p.is_file():
                files.append(p)
    return sorted(files), sorted(out, key=lambda x: x[0])


#: a file changed this recently (ns) may still change within its time stamps' resolution (2 s on
#: FAT and some network shares): its hash is used but not cached, so the next run reads it again
SETTLE_NS = 2_000_000_000

#: a cached hash: (size in bytes, modification time ns, status-change time ns, SHA-256)
CachedHash = tuple[int, int, int, str]


def discover_files(inbox: str | Path, known: set[str], cached: dict[str, CachedHash] | None = None,
                   ) -> tuple[list[RawFile], dict[str, int | list], dict[str, CachedHash]]:
    """Files under ``inbox`` (:func:`list_inbox`) whose content is new.

    Returns the new files, in sorted path order; counts: files seen, already
    known (same SHA-256 as a file in the catalog), repeated copies within
    this inbox (the first path in sorted order is taken, the others listed),
    files skipped this run (``skipped``: :class:`InboxSkip`, a file that vanished, changed
    while it was hashed or could not be read) and links not followed (``links_out``); and
    the hashes to cache for the next call.

    ``cached`` maps a path to what an earlier call found: a file whose size,
    modification time and status-change time are unchanged is not read again
    (the status-change time also moves when a copy keeps the old modification
    time, and cannot be set by a program); any other file is read and hashed.
    Files changed within the last ``SETTLE_NS`` are left out of the returned
    cache.
    """
    import time

    inbox = Path(inbox)
    cached = cached or {}
    paths, links = list_inbox(inbox)
    new: list[RawFile] = []
    seen: dict[str, Path] = {}
    hashes: dict[str, CachedHash] = {}
    already = 0
    repeats: list[str] = []
    skipped: list[InboxSkip] = []
    now_ns = time.time_ns()
    for p in paths:
        rel = str(p.relative_to(inbox))
        try:
            st = p.stat()
            stamp = (st.st_size, st.st_mtime_ns, st.st_ctime_ns)
            hit = cached.get(str(p))
            if hit is not None and tuple(hit[:3]) == stamp:
                digest = hit[3]
            else:
                digest = sha256_of_file(p)
                after = p.stat()
                if (after.st_size, after.st_mtime_ns, after.st_ctime_ns) != stamp:
                    skipped.append(InboxSkip(rel, "changed", f"{st.st_size} -> {after.st_size} bytes"))
                    continue
        except FileNotFoundError:
            skipped.append(InboxSkip(rel, "vanished"))
            continue
        except OSError as err:
            skipped.append(InboxSkip(rel, "unreadable", err.strerror or type(err).__name__))
            continue
        if now_ns - max(st.st_mtime_ns, st.st_ctime_ns) > SETTLE_NS:
            hashes[str(p)] = (*stamp, digest)
        if digest in known:
            already += 1
        elif digest in seen:
            repeats.append(f"{p.relative_to(inbox)} (same content as {seen[digest].relative_to(inbox)})")
        else:
            seen[digest] = p
            new.append(RawFile(p, digest, st.st_size))
    skipped += [InboxSkip(str(p.relative_to(inbox)), "link_out", str(t) if t else "") for p, t in links]
    return new, {"seen": len(paths), "known": already, "repeated_in_inbox": repeats, "skipped": skipped,
                 "links_out": links}, hashes
