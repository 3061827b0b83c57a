"""Finding new raw files in an inbox by content hash (SHA-256)."""

from __future__ import annotations

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


#: a file changed this recently (ns) may still change within its time stamps' resolution (2 s on
#: FAT and some network shares): its hash is used but not cached, so the next run reads it again
SETTLE_NS = 2_000_000_000

#: a cached hash: (size in bytes, modification time ns, status-change time ns, SHA-256)
CachedHash = tuple[int, int, int, str]


def discover_files(inbox: str | Path, known: set[str], cached: dict[str, CachedHash] | None = None,
                   ) -> tuple[list[RawFile], dict[str, int | list], dict[str, CachedHash]]:
    """Files under ``inbox`` (recursively, hidden files skipped) whose content is new.

    Returns the new files, in sorted path order; counts: files seen, already
    known (same SHA-256 as a file in the catalog), and repeated copies within
    this inbox (the first path in sorted order is taken, the others listed); and
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
    paths = sorted(p for p in inbox.rglob("*")
                   if p.is_file() and not any(part.startswith(".") for part in p.relative_to(inbox).parts))
    new: list[RawFile] = []
    seen: dict[str, Path] = {}
    hashes: dict[str, CachedHash] = {}
    already = 0
    repeats: list[str] = []
    now_ns = time.time_ns()
    for p in paths:
        st = p.stat()
        stamp = (st.st_size, st.st_mtime_ns, st.st_ctime_ns)
        hit = cached.get(str(p))
        digest = hit[3] if hit is not None and tuple(hit[:3]) == stamp else sha256_of_file(p)
        if now_ns - max(st.st_mtime_ns, st.st_ctime_ns) > SETTLE_NS:
            hashes[str(p)] = (*stamp, digest)
        if digest in known:
            already += 1
        elif digest in seen:
            repeats.append(f"{p.relative_to(inbox)} (same content as {seen[digest].relative_to(inbox)})")
        else:
            seen[digest] = p
            new.append(RawFile(p, digest, st.st_size))
    return new, {"seen": len(paths), "known": already, "repeated_in_inbox": repeats}, hashes
