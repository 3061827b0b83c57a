"""A run report made portable: its pages and every archive file they link, copied to another folder.

The pages link datasets, derived products and conflicts files by paths relative to
``<archive>/reports/run-<id>/`` (``../../datasets/...``), so they work only in place.
:func:`export_report` copies the run's pages to ``<out>/reports/run-<id>/`` and each linked
file to the same path under ``<out>`` as under the archive, so every link works unchanged
from the copy.  Files are copied atomically (``files.copy_atomic``); a link that points
outside the archive is not followed.
"""

from __future__ import annotations

import html
import re
from pathlib import Path
from urllib.parse import unquote

from ..errors import ArchiveError
from ..files import copy_atomic, sha256_of_file

_HREF = re.compile(r'href="([^"]+)"')


def linked_files(page: Path, archive_root: Path) -> list[Path]:
    """The archive files a report page links to (relative links only, resolved; those outside the archive dropped)."""
    root = Path(archive_root).resolve()
    out = []
    for href in _HREF.findall(page.read_text(encoding="utf-8")):
        target = unquote(html.unescape(href)).split("#", 1)[0]
        if not target or ":" in target or target.startswith("/"):
            continue                                   # a fragment, a URL or an absolute path: not a file we copy
        path = (page.parent / target).resolve()
        if path.is_file() and path.is_relative_to(root) and path not in out:
            out.append(path)
    return out


def latest_report(archive_root: Path) -> Path:
    """The folder of the archive's newest run report (ArchiveError when it has none)."""
    runs = [p for p in (Path(archive_root) / "reports").glob("run-*") if (p / "index.html").is_file()]
    if not runs:
        raise ArchiveError(f"{archive_root}: the archive holds no run report; run 'qcpipe process' first")
    return max(runs, key=lambda p: (p / "index.html").stat().st_mtime_ns)


def export_report(archive_root: Path, out: Path, run_id: int | None = None) -> tuple[Path, list[Path]]:
    """Copy a run's report pages (``run_id``, default the newest) and the files they link into ``out``.

    Returns the copy's index page and the copies written (files already there with the same
    content are not copied again).  ``out`` must be outside the archive."""
    root = Path(archive_root).resolve()
    out = Path(out).resolve()
    if out == root or out.is_relative_to(root):
        raise ArchiveError(f"{out}: the export folder is inside the archive {root}; choose a folder outside it")
    folder = latest_report(root) if run_id is None else root / "reports" / f"run-{run_id}"
    if not (folder / "index.html").is_file():
        raise ArchiveError(f"{folder}: no report of run {run_id} in the archive; 'qcpipe holdings --what runs' "
                           "lists the runs")
    written = []
    for page in sorted(folder.glob("*.html")):
        for src in [page, *linked_files(page, root)]:
            dest = out / src.relative_to(root)
            if dest.is_file() and sha256_of_file(dest) == sha256_of_file(src):
                continue
            copy_atomic(src, dest)
            written.append(dest)
    return out / folder.relative_to(root) / "index.html", written
