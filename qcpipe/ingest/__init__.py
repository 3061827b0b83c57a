"""Ingest: discover raw files, read them with their layout, match and time-correct them."""

from .discover import RawFile, discover_files  # noqa: F401
from .match import FileRejected, IngestedFile, ingest_file  # noqa: F401
