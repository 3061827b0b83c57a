"""The orchestrator's embedded API server of one run, tied to the run's process.

In embedded mode (no ``PREFECT_API_URL``) Prefect starts a temporary API server
subprocess itself (``prefect.server.api.server.SubprocessASGIServer``: ``python -m
uvicorn ... prefect.server.api.server:create_app``) and stops it at the interpreter's
exit.  A run killed with SIGKILL never reaches that exit, so the server (about 250 MB,
still busy) was left behind for minutes.  qcpipe therefore starts that same server
itself, before the flow, as a child it owns, and points ``PREFECT_API_URL`` at it:

* the child runs :func:`main` (``python -m qcpipe.flows.embedded_server PARENT_PID
  uvicorn-arguments``), which asks Linux to send it SIGTERM when the thread that
  started it ends (``prctl(PR_SET_PDEATHSIG)``; the signal follows the *thread*, so the
  server is started from the main thread only, else the flag is not set), checks that
  its parent is still the one it was started by (it may have died before the flag was
  set), and watches its parent id every ``WATCH_INTERVAL_S`` in a thread: when the parent
  is gone it sends itself SIGTERM, and SIGKILL ``GRACE_S`` later if still running.  The
  watch covers systems without ``prctl`` and a start from another thread;
* the server has the environment Prefect gives its own (``PREFECT__SERVER_EPHEMERAL=1``:
  the same reduced set of services, no UI), the same start-up timeout
  (``PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS``) and its own output in
  ``server.log`` under ``PREFECT_HOME``;
* the run's process stops it at exit (SIGTERM, then SIGKILL after 5 s, as Prefect does).

``QCPIPE_EMBEDDED_API_URL`` names the server so started: ``runners.task_runner_for``
still refuses Dask workers without a server of the user's own.  A ``PREFECT_API_URL``
set by the user wins: then nothing is started.
"""

from __future__ import annotations

import atexit
import os
import signal
import socket
import subprocess
import sys
import threading
import time
import urllib.request
from pathlib import Path

from ..errors import QcpipeError

#: names the API server this process started for its run (not a server of the user's own)
EMBEDDED_URL_VAR = "QCPIPE_EMBEDDED_API_URL"
#: how often the server checks that the run's process still lives, and how long it then has to stop
WATCH_INTERVAL_S = 0.5
GRACE_S = 3.0
#: uvicorn's exit status when its port is taken (Prefect starts again on another port then)
PORT_TAKEN_STATUS = 3
#: Linux prctl option: signal sent to this process when its parent thread ends (linux/prctl.h)
PR_SET_PDEATHSIG = 1

_started: list[subprocess.Popen] = []


def is_embedded(url: str | None) -> bool:
    """Whether ``url`` is the API server qcpipe started for this run (embedded mode)."""
    return bool(url) and url == os.environ.get(EMBEDDED_URL_VAR)


def uvicorn_args(port: int) -> list[str]:
    """The arguments Prefect's own embedded server is started with (Prefect 3.9).  Prefect is not imported
    here: it reads its settings when imported, so ``PREFECT_API_URL`` must be set first."""
    import importlib.util

    package = Path(importlib.util.find_spec("prefect").origin).parent
    return ["--app-dir", str(package.parent), "--factory",
            "prefect.server.api.server:create_app", "--host", "127.0.0.1", "--port", str(port),
            "--log-level", "error", "--lifespan", "on"]


def start_embedded_server(home: str | Path) -> str | None:
    """Start the run's embedded API server (tied to this process) and point ``PREFECT_API_URL`` at it.

    Returns its API URL; None (nothing started) when ``PREFECT_API_URL`` is already set.  Call after
    ``prefect_settings.configure_prefect``, before Prefect is imported, from the main thread."""
    if os.environ.get("PREFECT_API_URL"):
        return None
    if "prefect" in sys.modules:
        raise RuntimeError("the embedded server must start before Prefect is imported (Prefect reads "
                           "PREFECT_API_URL once, at import)")
    home = Path(home)
    timeout_s = float(os.environ.get("PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS", "180"))
    log_path = home / "server.log"
    env = {**os.environ, "PREFECT_UI_ENABLED": "0", "PREFECT__SERVER_EPHEMERAL": "1", "PREFECT__SERVER_FINAL": "1"}
    deadline = time.monotonic() + timeout_s
    home.mkdir(parents=True, exist_ok=True)
    with open(log_path, "ab") as log:
        while True:
            log.flush()
            log_start = log_path.stat().st_size
            port = free_port()
            url = f"http://127.0.0.1:{port}/api"
            guard = ["--pdeathsig"] if threading.current_thread() is threading.main_thread() else []
            proc = subprocess.Popen([sys.executable, "-m", "qcpipe.flows.embedded_server", str(os.getpid()),
                                     *guard, *uvicorn_args(port)], env=env, stdin=subprocess.DEVNULL,
                                    stdout=log, stderr=subprocess.STDOUT)
            _started.append(proc)
            if len(_started) == 1:
                atexit.register(stop_embedded_servers)
            status = _wait_healthy(proc, url, deadline)
            if status is None:
                break
            said = _log_since(log_path, log_start)
            # uvicorn exits with 3 for a taken port, but also when the app cannot be imported or its start-up
            # fails (a broken or locked database, a full disk): only a taken port is worth another try
            if status != PORT_TAKEN_STATUS or "address already in use" not in said.lower():
                last = next((ln.strip() for ln in reversed(said.splitlines()) if ln.strip()), "no output")
                raise OrchestratorStartError(f"the orchestrator's embedded server did not start (exit status "
                                             f"{status}: {last[:200]}); see {log_path}")
    os.environ["PREFECT_API_URL"] = url
    os.environ[EMBEDDED_URL_VAR] = url
    return url


class OrchestratorStartError(QcpipeError, RuntimeError):
    """The run's embedded server could not be started: the command says so in one line."""


def _log_since(path: Path, start: int) -> str:
    """What the server wrote to its log after byte ``start`` (the last 64 kB of it)."""
    try:
        with open(path, "rb") as f:
            f.seek(max(start, path.stat().st_size - 65536))
            return f.read().decode("utf-8", "replace")
    except OSError:
        return ""


def _wait_healthy(proc: subprocess.Popen, url: str, deadline: float) -> int | None:
    """None once the server answers on ``url``; its exit status if it ended first (RuntimeError at the deadline)."""
    while True:
        if proc.poll() is not None:
            return proc.returncode
        try:
            with urllib.request.urlopen(url + "/health", timeout=2) as r:
                if r.status == 200:
                    return None
        except OSError:
            pass
        if time.monotonic() > deadline:
            stop_embedded_servers()
            raise OrchestratorStartError(f"the orchestrator's embedded server did not answer on {url} in time; "
                                         "on a slow or busy machine raise "
                                         "PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS (seconds)")
        time.sleep(0.1)


def stop_embedded_servers() -> None:
    """Stop the servers this process started: SIGTERM, then SIGKILL after 5 s."""
    while _started:
        stop_process(_started.pop(), 5)


def stop_process(proc: subprocess.Popen, wait_s: float) -> None:
    """Stop a child: SIGTERM, then SIGKILL if it is still running ``wait_s`` later; reaped."""
    if proc.poll() is None:
        proc.terminate()
        try:
            proc.wait(wait_s)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(10)


def free_port(host: str = "127.0.0.1") -> int:
    """A TCP port that was free on ``host`` a moment ago."""
    with socket.socket() as s:
        s.bind((host, 0))
        return s.getsockname()[1]


# --- in the server's process -----------------------------------------------------------------

def set_parent_death_signal(sig: int) -> bool:
    """Ask Linux to send ``sig`` to this process when the thread that started it ends; False where unsupported."""
    if not sys.platform.startswith("linux"):
        return False
    import ctypes

    try:
        libc = ctypes.CDLL(None, use_errno=True)
        return libc.prctl(PR_SET_PDEATHSIG, int(sig), 0, 0, 0) == 0
    except (OSError, AttributeError):
        return False


def watch_parent(parent_pid: int, interval_s: float = WATCH_INTERVAL_S, grace_s: float = GRACE_S) -> None:
    """Stop this process once ``parent_pid`` is no longer its parent: SIGTERM, then SIGKILL ``grace_s`` later."""
    while os.getppid() == parent_pid:
        time.sleep(interval_s)
    os.kill(os.getpid(), signal.SIGTERM)
    time.sleep(grace_s)
    os.kill(os.getpid(), signal.SIGKILL)


def main(argv: list[str]) -> None:
    """``PARENT_PID [--pdeathsig] UVICORN_ARGS...``: guard this process's life to the run's, then serve."""
    parent_pid, rest = int(argv[0]), argv[1:]
    if rest[:1] == ["--pdeathsig"]:
        set_parent_death_signal(signal.SIGTERM)
        rest = rest[1:]
    if os.getppid() != parent_pid:          # the run ended before the guard was set
        sys.exit(1)
    threading.Thread(target=watch_parent, args=(parent_pid,), name="qcpipe-parent-watch", daemon=True).start()
    import runpy

    sys.argv = ["uvicorn", *rest]
    runpy.run_module("uvicorn", run_name="__main__", alter_sys=True)


if __name__ == "__main__":
    main(sys.argv[1:])
