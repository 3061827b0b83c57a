"""The page's re-run: ``pipeline.run.rerun`` on the in-process runner, in one background thread.

One at a time: a second request while one is going on, or while another qcpipe run holds the
archive's lock, is refused with a sentence (:class:`Busy`).  The archive's lock is taken in the
request (so the refusal is immediate) and released by the thread when the run ends.  Progress
comes from :mod:`qcpipe.progress` (the pipeline's step counters), shown by the page.
"""

from __future__ import annotations

import datetime as dt
import threading

from .. import progress
from ..archive.lock import ArchiveBusy, ArchiveLock
from ..pipeline import load_context
from ..pipeline.run import InProcess, rerun


class Busy(RuntimeError):
    """A re-run is already going on (HTTP 409)."""


class _Counts:
    """A progress reporter keeping the counts for the page (stage -> done, total; the last step's name)."""

    def __init__(self, state: dict):
        self.state = state

    def expect(self, stage: str, total: int) -> None:
        p = self.state["progress"].setdefault(stage, {"done": 0, "total": 0})
        p["total"] += total

    def step(self, stage: str, what: str) -> None:
        p = self.state["progress"].setdefault(stage, {"done": 0, "total": 0})
        p["done"] += 1
        self.state["last_step"] = what

    def close(self) -> None:
        pass


class RerunWorker:
    """At most one re-run of one workspace at a time, in a background thread."""

    def __init__(self, workspace, view_factory):
        self.workspace = workspace
        self.view_factory = view_factory          # ctx -> ArchiveView (for the differences)
        self._lock = threading.Lock()
        self.thread: threading.Thread | None = None
        self.state: dict = {"state": "idle"}

    def running(self) -> bool:
        return self.thread is not None and self.thread.is_alive()

    def start(self, deployments: list[str]) -> dict:
        """Start re-running ``deployments`` (and what depends on them or changed); Busy if one is going on."""
        with self._lock:
            if self.running():
                raise Busy(f"a re-run is already going on (started {self.state['started']}, "
                           f"{', '.join(self.state['deployments'])}); wait for it to finish, then try again")
            ctx = load_context(self.workspace)                 # the annotations as saved now
            lock = ArchiveLock(ctx.paths.root)
            try:
                lock.acquire(0.0)
            except ArchiveBusy as err:
                raise Busy(str(err)) from None
            self.state = {"state": "running", "deployments": list(deployments), "progress": {}, "last_step": "",
                          "started": dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")}
            self.thread = threading.Thread(target=self._run, args=(ctx, lock, list(deployments)),
                                           name="qcpipe-review-rerun", daemon=True)
            self.thread.start()
            return dict(self.state)

    def _run(self, ctx, lock, deployments) -> None:
        state = self.state
        progress.install_reporter(_Counts(state))
        try:
            summary = rerun(ctx, InProcess(), deployments)
            view = self.view_factory(load_context(self.workspace))
            written = [{"station": r.station, "deployment": r.deployment, "version": int(r.version)}
                       for r in summary.results]
            diffs = [view.diff(w["deployment"]) for w in written if w["version"] > 1]
            state.update(state="done", written=written, diffs=diffs, report=str(summary.report or ""),
                         nothing_new=bool(summary.nothing_new))
        except Exception as err:  # noqa: BLE001 - the page shows what went wrong; the run's own record is in the catalog
            state.update(state="failed", error=f"{type(err).__name__}: {err}")
        finally:
            progress.uninstall()
            lock.release()
            state["ended"] = dt.datetime.now(dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")

    def status(self) -> dict:
        return dict(self.state)
