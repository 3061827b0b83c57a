"""Settings for Prefect, applied before it is imported, and where its state lives.

Prefect runs in its embedded local mode unless ``PREFECT_API_URL`` is set
(then every flow runs on that server, and the embedded server's settings below have no effect):
each run starts a temporary API server with its SQLite database in the archive's
orchestrator folder (:func:`orchestrator_home`: under the user's state folder, not in the
archive, so a full or read-only archive disk cannot break the orchestrator; the command
checks that folder's free space first, :func:`check_orchestrator_space`).  The command calls this only when a run has work
(``qcpipe.pipeline.run.run_if_nothing_to_do``).  Telemetry is off (it also printed spurious
database-lock and name-resolution errors on a closed network), the start-up
timeout is long enough for a fresh database, and console logs show warnings
only.  Values already in the environment win.
"""

from __future__ import annotations

import os
from pathlib import Path

from qcpipe.errors import ArchiveError
from qcpipe.files import free_bytes, write_text_atomic

#: free space the orchestrator's folder needs before a run starts, in MB: the embedded server's SQLite
#: database and its write-ahead log took 6.3 MB after one run of the demo (measured, Prefect 3), and grow
#: with every run; below this a run would stop in the server's start-up (a 180 s time-out) or with a
#: server error, so it is refused at once
ORCHESTRATOR_MIN_FREE_MB = 64

DEFAULTS = {
    "PREFECT_SERVER_ANALYTICS_ENABLED": "false",
    "DO_NOT_TRACK": "1",
    "PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS": "180",
    "PREFECT_LOGGING_HANDLERS_CONSOLE_LEVEL": "WARNING",
    "PREFECT_LOGGING_LEVEL": "WARNING",
    "PREFECT_UI_ENABLED": "false",
    # the embedded server's own services log cancelled event flushes as ERROR when the
    # process exits; nothing is lost for qcpipe (its own catalog records every run)
    "PREFECT_SERVER_LOGGING_LEVEL": "CRITICAL",
}


#: loggers quietened in Prefect's logging configuration: the embedded server's database
#: pool logs cancelled roll-backs as ERROR when the process shuts the server down
QUIET_LOGGERS = {"sqlalchemy.pool": "CRITICAL"}


def _write_logging_config(home: Path) -> Path:
    """Prefect's own default logging configuration plus ``QUIET_LOGGERS``, in ``home``."""
    import importlib.util

    import yaml  # a dependency of Prefect

    spec = importlib.util.find_spec("prefect")   # locates the package without importing it
    default = Path(spec.origin).parent / "logging" / "logging.yml"
    config = yaml.safe_load(default.read_text())
    for name, level in QUIET_LOGGERS.items():
        config.setdefault("loggers", {})[name] = {"level": level}
    out = home / "logging.yml"
    text = yaml.safe_dump(config, sort_keys=False)
    if not out.exists() or out.read_text() != text:
        write_text_atomic(out, text)
    return out


def state_folder() -> Path:
    """qcpipe's own state folder: ``$QCPIPE_STATE_DIR``, else ``$XDG_STATE_HOME/qcpipe``, else
    ``~/.local/state/qcpipe`` (the XDG Base Directory Specification's place for state kept between runs)."""
    if os.environ.get("QCPIPE_STATE_DIR"):
        return Path(os.environ["QCPIPE_STATE_DIR"]).expanduser()
    xdg = os.environ.get("XDG_STATE_HOME", "")
    base = Path(xdg) if Path(xdg).is_absolute() else Path.home() / ".local" / "state"   # the spec ignores relative paths
    return base / "qcpipe"


def orchestrator_home(archive: str | Path) -> Path:
    """Where the embedded orchestrator keeps its state for ``archive``: ``$PREFECT_HOME`` when set, else
    ``<state folder>/archives/<archive folder's name>-<SHA-256 of its absolute path, 16 hex digits>/prefect``.

    One folder per archive (two archives never share a run history); the archive's own folder is not
    used, so a full or read-only archive disk leaves the orchestrator working long enough to say so in
    one line.  A ``.prefect`` folder that older versions kept inside the archive is no longer read:
    qcpipe's catalog records every run, so it can be deleted."""
    import hashlib

    if os.environ.get("PREFECT_HOME"):
        return Path(os.environ["PREFECT_HOME"]).expanduser()
    root = Path(archive).expanduser().resolve()
    key = hashlib.sha256(str(root).encode("utf-8", "surrogateescape")).hexdigest()[:16]
    return state_folder() / "archives" / f"{root.name or 'root'}-{key}" / "prefect"


def check_orchestrator_space(home: Path) -> None:
    """A one-line ArchiveError, before the orchestrator starts, when the disk of its folder ``home`` has less
    than ``ORCHESTRATOR_MIN_FREE_MB`` free, or the folder cannot be made."""
    try:
        home.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise ArchiveError(f"cannot make the orchestrator's folder {home} ({err.strerror}): set QCPIPE_STATE_DIR "
                           "to a writable folder (README: 'What the archive guarantees')") from None
    free = free_bytes(home)
    if free < ORCHESTRATOR_MIN_FREE_MB * 2**20:
        raise ArchiveError(f"disk full: {free / 2**20:.1f} MB free for the orchestrator's folder {home}, a run needs "
                           f"{ORCHESTRATOR_MIN_FREE_MB} MB there: free space on that disk, or set QCPIPE_STATE_DIR "
                           "to a folder on another one, and run again (nothing was started)")


def configure_prefect(home: str | Path) -> None:
    """Point Prefect's state at ``home`` and apply the quiet defaults (call before ``import prefect``)."""
    home = Path(home).expanduser()
    home.mkdir(parents=True, exist_ok=True)
    if os.environ.get("PREFECT_HOME"):       # one spelling for every reader: '~' expanded, as orchestrator_home does
        os.environ["PREFECT_HOME"] = str(Path(os.environ["PREFECT_HOME"]).expanduser())
    os.environ.setdefault("PREFECT_HOME", str(home))
    for key, value in DEFAULTS.items():
        os.environ.setdefault(key, value)
    if "PREFECT_LOGGING_SETTINGS_PATH" not in os.environ:
        os.environ["PREFECT_LOGGING_SETTINGS_PATH"] = str(_write_logging_config(home))
