"""Rendered report figures kept by the content of what they show, so an unchanged figure is drawn once.

Every run writes a whole report (every station's page), but most datasets do not change between
runs; drawing a figure with matplotlib costs far more than reading its arrays.  A figure is
identified by the SHA-256 of:

- the source of :mod:`qcpipe.report.plots` (a change to how figures are drawn renders all anew),
- the plotting function's name,
- every argument: arrays by dtype, shape and bytes, anything else by its ``repr``.

so a stored PNG is used only for exactly the call that made it.  PNGs live in
``<archive>/reports/.figure-cache/<sha256>.png``, written by temporary file and rename (concurrent
workers drawing the same figure write the same bytes); a hit refreshes the file's modification time, and
:meth:`FigureCache.prune` removes entries not used for ``max_age_days``.  ``FigureCache(None)``
draws every figure and keeps nothing.
"""

from __future__ import annotations

import hashlib
import inspect
import os
import struct
import tempfile
import time
from functools import lru_cache
from pathlib import Path

import numpy as np

from . import plots

#: the cache's folder inside ``<archive>/reports``
CACHE_DIR_NAME = ".figure-cache"


@lru_cache(maxsize=1)
def _plots_source_digest() -> bytes:
    return hashlib.sha256(inspect.getsource(plots).encode("utf-8")).digest()


def _feed(h, value) -> None:
    if isinstance(value, np.ndarray):
        a = np.ascontiguousarray(value)
        h.update(f"ndarray {a.dtype.str} {a.shape}|".encode())
        h.update(repr(a.tolist()).encode() if a.dtype.hasobject else a.view(np.uint8).reshape(-1))
    else:
        h.update(f"{type(value).__name__} {value!r}|".encode())


def figure_key(func, args: tuple, kwargs: dict) -> str:
    """SHA-256 (hex) identifying ``func(*args, **kwargs)`` drawn by this version of the plotting code."""
    h = hashlib.sha256(_plots_source_digest())
    h.update(f"{func.__module__}.{func.__qualname__}|".encode())
    for a in args:
        _feed(h, a)
    for k in sorted(kwargs):
        h.update(f"{k}=".encode())
        _feed(h, kwargs[k])
    return h.hexdigest()


def png_size(png: bytes) -> tuple[int, int]:
    """Width and height in pixels from a PNG's IHDR chunk (PNG specification, ISO/IEC 15948, 11.2.2)."""
    if png[:8] != b"\x89PNG\r\n\x1a\n" or png[12:16] != b"IHDR":
        raise ValueError("not a PNG image")
    return struct.unpack(">II", png[16:24])


def _keep(path: Path, data: bytes) -> None:
    """Write a cache entry by temporary file and rename.  Not an archive file: no fsync and no crash point
    (a lost entry is drawn again), and a full or read-only disk costs the next report a redraw, nothing more."""
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    except OSError:
        return
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.replace(tmp, path)
    except OSError:
        pass
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


class FigureCache:
    """PNG bytes of report figures, drawn on the first request and read back afterwards."""

    def __init__(self, folder: str | Path | None):
        self.folder = Path(folder) if folder is not None else None
        self.hits = 0
        self.drawn = 0

    def png(self, func, *args, **kwargs) -> bytes:
        """The PNG of ``func(*args, **kwargs)`` (a :mod:`plots` function returning a Figure)."""
        path = self.folder / f"{figure_key(func, args, kwargs)}.png" if self.folder is not None else None
        if path is not None:
            try:
                data = path.read_bytes()
                png_size(data)                               # a damaged entry is drawn again
                os.utime(path)
                self.hits += 1
                return data
            except (OSError, ValueError, struct.error):
                pass
        data = plots.png_bytes(func(*args, **kwargs))
        self.drawn += 1
        if path is not None:
            _keep(path, data)
        return data

    def prune(self, max_age_days: float = 30.0) -> int:
        """Remove entries not used for ``max_age_days``; returns how many were removed."""
        if self.folder is None or not self.folder.is_dir():
            return 0
        limit = time.time() - max_age_days * 86400.0
        removed = 0
        for p in self.folder.glob("*.png"):
            try:
                if p.stat().st_mtime < limit:
                    p.unlink()
                    removed += 1
            except OSError:
                pass
        return removed
