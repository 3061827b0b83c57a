"""Settings for Prefect, applied before it is imported.

Prefect runs in its embedded local mode unless ``PREFECT_API_URL`` is set:
each run starts a temporary API server with its SQLite database under the
archive's ``.prefect`` folder.  Telemetry is off (it also printed spurious
database-lock and name-resolution errors on a closed network), the start-up
timeout is long enough for a fresh database, and console logs show warnings
only.  Values already in the environment win.
"""

from __future__ import annotations

import os
from pathlib import Path

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


def configure_prefect(home: str | Path) -> None:
    """Point Prefect's state at ``home`` and apply the quiet defaults (call before ``import prefect``)."""
    home = Path(home)
    home.mkdir(parents=True, exist_ok=True)
    os.environ.setdefault("PREFECT_HOME", str(home))
    for key, value in DEFAULTS.items():
        os.environ.setdefault(key, value)
