"""Settings for Prefect, applied before it is imported.

Prefect runs in its embedded local mode unless ``PREFECT_API_URL`` is set
(then every flow runs on that server, and the embedded server's settings below have no effect):
each run starts a temporary API server with its SQLite database under the
archive's ``.prefect`` folder.  The command calls this only when a run has work
(``qcpipe.pipeline.run.run_if_nothing_to_do``).  Telemetry is off (it also printed spurious
database-lock and name-resolution errors on a closed network), the start-up
timeout is long enough for a fresh database, and console logs show warnings
only.  Values already in the environment win.
"""

from __future__ import annotations

import os
from pathlib import Path

from qcpipe.files import write_text_atomic

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


def configure_prefect(home: str | Path) -> None:
    """Point Prefect's state at ``home`` and apply the quiet defaults (call before ``import prefect``)."""
    home = Path(home)
    home.mkdir(parents=True, exist_ok=True)
    os.environ.setdefault("PREFECT_HOME", str(home))
    for key, value in DEFAULTS.items():
        os.environ.setdefault(key, value)
    if "PREFECT_LOGGING_SETTINGS_PATH" not in os.environ:
        os.environ["PREFECT_LOGGING_SETTINGS_PATH"] = str(_write_logging_config(home))
