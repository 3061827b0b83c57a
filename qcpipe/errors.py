"""Domain errors.  Each message names the file, the key or line, what is
wrong and how to fix it; the CLI prints it as one line (no traceback)."""

from __future__ import annotations


class QcpipeError(Exception):
    """Base of every expected failure: the CLI prints ``str(err)`` and exits 2."""


class ConfigError(QcpipeError, ValueError):
    """A station register, logger layout set, rule set or workspace file is invalid."""


class ParseError(QcpipeError, ValueError):
    """A raw file cannot be read with its logger layout."""


class MatchError(QcpipeError, LookupError):
    """A raw file matches no instrument or deployment of the station register."""


class ArchiveError(QcpipeError, OSError):
    """The archive cannot be read or written."""
