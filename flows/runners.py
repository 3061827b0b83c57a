"""Where a flow's tasks run: Prefect's thread runner (the default) or the workers of a Dask cluster.

``task_runner_for(None)`` is None (keep the flow's default runner, threads in
the flow's own process); ``task_runner_for("tcp://host:port")`` is a
``prefect_dask.DaskTaskRunner`` connected to an already running
``dask.distributed`` scheduler.  qcpipe never starts a cluster itself: whoever
runs it starts the scheduler and workers (``dask scheduler`` / ``dask worker``
from the same virtual environment, so the workers import ``qcpipe``, or a
``distributed.LocalCluster``), on loopback unless the machines are meant to
talk to each other.  ``flow_for(flow, address)`` is the flow with that runner
(``flow.with_options(task_runner=...)``).

What runs on a worker gets the workspace path and ids, not the loaded
configuration (see ``flows/tasks.py``), plus the ingested arrays of the files
it works on; each worker process has its own NetCDF lock (``archive/ncio``), and
all archive writes are atomic renames of per-deployment or per-station files,
and the catalog is SQLite in WAL mode with a 30 s busy timeout, so two worker
processes do not step on each other.

Prefect's API and the workers: a server is required
----------------------------------------------------

A task run on a Dask worker reports its states to a Prefect API, and it takes
the flow's settings with it (Prefect serialises its settings context with each
task).  So the flow process must have ``PREFECT_API_URL`` set to a running
server (``prefect server start --host 127.0.0.1 --no-ui --analytics-off``)
that every worker can reach; ``task_runner_for`` refuses an address without
one (ConfigError).  Measured on the 2-core development machine (Prefect 3.9.1,
distributed 2026.8.0, prefect-dask 0.3.7, LocalCluster of 2 single-thread
worker processes kept for 2-3 runs, the demo inbox: 18 files, 8 deployments):

* embedded mode, nothing done: each worker starts its own temporary API
  server on the flow's ``PREFECT_HOME`` SQLite file and keeps it for its
  lifetime, i.e. pointing at the *first* run's archive; later runs' task-run
  events failed (``EventsWorker failed to process item``, ERROR on stderr).
* embedded mode, the flow's own temporary server handed to the workers (tried,
  not kept): first run 29-50 s and all 32 task runs recorded; the next runs on
  the same cluster (16-28 s) recorded 2 of 32: a worker keeps its Prefect
  event client, which still points at the first run's server, gone with its
  process (a new random port every run).  Fine for a cluster made for one
  run, silently lossy for a cluster that lives across nights.
* a ``prefect server start`` subprocess (healthy after 9-11 s on a fresh
  home), ``PREFECT_API_URL`` for flow and workers: 32 of 32 task runs
  recorded in each of 6 runs, no errors; nightly flow 2.3-4.3 s with the
  default runner, 6.5-9.6 s with the Dask runner.  This is the setup chosen
  (``local_prefect_server`` below starts one for tests and benchmarks).
* not tried: an in-memory database per worker
  (``PREFECT_SERVER_DATABASE_CONNECTION_URL=sqlite+aiosqlite:///:memory:``):
  it still starts a server per worker, migrates a fresh database in every
  worker process (24-27 s each, measured here) and loses the records.

Cost per task: a task run through the Dask worker's Prefect engine took about
0.2 s more than the same work in a thread (60 file reads: 10.9 s of worker time
against about 0.4 s for 18 reads in threads), so Dask pays off only for
stations with much more work each than the demo's (``benchmarks/dask_speedup.py``).
A worker keeps the Prefect API it first reported to: use one cluster per
Prefect server.  Start workers with ``env_for_workers()`` (quiet logging).
"""

from __future__ import annotations

import contextlib
import os
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

from .embedded_server import free_port, is_embedded, stop_process


def task_runner_for(dask_address: str | None):
    """None for the flow's default runner; else a DaskTaskRunner connected to the scheduler at ``dask_address``."""
    if not dask_address:
        return None
    from prefect.settings import PREFECT_API_URL

    if not PREFECT_API_URL.value() or is_embedded(PREFECT_API_URL.value()):
        from qcpipe.errors import ConfigError

        raise ConfigError(f"Dask cluster {dask_address}: its workers need a Prefect server to report to, and "
                          "embedded mode has none they can share; start one ('prefect server start --host "
                          "127.0.0.1 --no-ui --analytics-off') and set PREFECT_API_URL=http://127.0.0.1:4200/api")
    from prefect_dask import DaskTaskRunner   # imports distributed (~1 s): only when asked for

    return DaskTaskRunner(address=dask_address)


def flow_for(flow, dask_address: str | None):
    """``flow`` itself (default runner) or a copy whose tasks run on the Dask cluster at ``dask_address``."""
    runner = task_runner_for(dask_address)
    return flow if runner is None else flow.with_options(task_runner=runner)


def runs_on(dask_address: str | None) -> bool:
    """Whether the current flow run's tasks go where ``dask_address`` says (None: not to a Dask cluster)."""
    from prefect.context import FlowRunContext

    runner = getattr(FlowRunContext.get(), "task_runner", None)
    address = None
    if "prefect_dask" in sys.modules:           # else no runner can be a DaskTaskRunner
        from prefect_dask import DaskTaskRunner

        if isinstance(runner, DaskTaskRunner):
            address = runner.address
    return address == (dask_address or None)


def env_for_workers(api_url: str | None = None) -> dict[str, str]:
    """Environment for Dask worker processes started for qcpipe: the quiet Prefect defaults (and the API URL)."""
    from qcpipe.flows.prefect_settings import DEFAULTS

    env = {k: os.environ.get(k, v) for k, v in DEFAULTS.items()}
    if api_url:
        env["PREFECT_API_URL"] = api_url
    return env


@contextlib.contextmanager
def local_prefect_server(home: str | Path, *, port: int | None = None, timeout_s: float = 180.0,
                         log: str | Path | None = None):
    """Run ``prefect server start`` on 127.0.0.1 (no UI, no analytics) with its own ``PREFECT_HOME``; yield its API URL.

    The server is a subprocess of this one and is stopped (SIGTERM, then SIGKILL
    after 20 s) when the block ends, also on errors.  For tests and benchmarks
    of the Dask runner; a long-running installation starts its own server
    (README, "Running it every night").
    """
    home = Path(home)
    home.mkdir(parents=True, exist_ok=True)
    port = port or free_port()
    url = f"http://127.0.0.1:{port}/api"
    env = dict(os.environ)
    env.pop("PREFECT_API_URL", None)
    env.update(env_for_workers(), PREFECT_HOME=str(home))
    prefect_cli = Path(sys.executable).with_name("prefect")
    cmd = [str(prefect_cli) if prefect_cli.exists() else "prefect", "server", "start", "--host", "127.0.0.1",
           "--port", str(port), "--no-ui", "--analytics-off"]
    out = open(log or home / "server.log", "ab")
    proc = subprocess.Popen(cmd, env=env, stdout=out, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + timeout_s
        while True:
            if proc.poll() is not None:
                raise RuntimeError(f"prefect server exited with status {proc.returncode}; see {out.name}")
            try:
                with urllib.request.urlopen(url + "/health", timeout=2) as r:
                    if r.status == 200:
                        break
            except OSError:
                pass
            if time.monotonic() > deadline:
                raise RuntimeError(f"prefect server not healthy after {timeout_s:.0f} s; see {out.name}")
            time.sleep(0.25)
        yield url
    finally:
        stop_process(proc, 20)
        out.close()
