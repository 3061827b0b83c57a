"""Ingest: discover raw files, read them with their layout, match and time-correct them.

Names are imported from their modules on first use (:mod:`qcpipe.lazy`): discovering new
files does not load the readers' libraries.
"""

from ..lazy import exports

_WHERE = {"RawFile": ".discover", "discover_files": ".discover",
          "FileRejected": ".match", "IngestedFile": ".match", "ingest_file": ".match"}
__all__ = sorted(_WHERE)
__getattr__, __dir__ = exports(__name__, _WHERE)
