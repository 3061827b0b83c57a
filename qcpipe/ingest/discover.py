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


def discover_files(inbox: str | Path, known: set[str]) -> tuple[list[RawFile], dict[str, int | list]]:
    """Files under ``inbox`` (recursively, hidden files skipped) whose content is new.

    Returns the new files, in sorted path order, and counts: files seen, already
    known (same SHA-256 as a file in the catalog), and repeated copies within
    this inbox (the first path in sorted order is taken, the others listed).
    """
    inbox = Path(inbox)
    paths = sorted(p for p in inbox.rglob("*")
                   if p.is_file() and not any(part.startswith(".") for part in p.relative_to(inbox).parts))
    new: list[RawFile] = []
    seen: dict[str, Path] = {}
    already = 0
    repeats: list[str] = []
    for p in paths:
        digest = sha256_of_file(p)
        if digest in known:
            already += 1
        elif digest in seen:
            repeats.append(f"{p.relative_to(inbox)} (same content as {seen[digest].relative_to(inbox)})")
        else:
            seen[digest] = p
            new.append(RawFile(p, digest, p.stat().st_size))
    return new, {"seen": len(paths), "known": already, "repeated_in_inbox": repeats}
