"""The run sequence, once, without the orchestrator: the nightly run and the re-run on a runner.

A *runner* says where each unit of work runs: :class:`InProcess` calls it at once in this
process (tests, scripts); the Prefect flows (``flows/``) pass a runner that submits each
step as a retrying Prefect task, on threads or on Dask workers.  The steps
(:data:`STEPS`) take a :class:`Job` (workspace path and configuration fingerprint), never
the loaded context, so they pickle small and run in another process; each loads the
context again and stops with a ConfigError if the configuration changed since planning.

Order of work: read every new file (parallel), quarantine rejects; merge each
deployment's new files into its store (parallel); rebuild stores whose ingest inputs
changed and find deployments whose QC inputs changed; then QC in dependency order:
barometers, water-level gauges (the site's reference level), then stations in parallel
(each probe first); then the run's report.

What a run has to do is decided by :func:`plan.pending_work`; :func:`run_if_nothing_to_do`
asks it first and, when there is nothing, records the run here at once, so the command
starts the orchestrator only for work.  This module imports the steps' modules (xarray,
pandas) only when a step runs (:func:`import_steps` imports them all at once).
"""

from __future__ import annotations

import hashlib
import json
import sqlite3
import sys
from dataclasses import dataclass
from typing import Protocol

from ..archive.lock import ArchiveLock
from ..errors import ConfigError
from ..report.model import Notice, Quarantined, RunSummary
from ..report.summary import inbox_skip_text
from .context import Context, load_context
from .inbox import clear_staging, group_by_deployment, quarantine_file, read_inbox_file
from .plan import QcPlan, Work, check_deployment_ids, pending_work, plan_qc, unchanged_since_latest


def context_fingerprint(ctx: Context) -> str:
    """SHA-256 over the content hashes of everything a run was planned with."""
    parts = {"workspace": str(ctx.workspace_path), "archive": str(ctx.paths.root), "inbox": str(ctx.inbox),
             "register": ctx.register.sha256, "layouts": ctx.layouts.sha256, "rules": ctx.rules.sha256,
             "annotations": [a.as_dict() for a in ctx.annotations.items], "keep_versions": ctx.keep_versions}
    return hashlib.sha256(json.dumps(parts, sort_keys=True).encode()).hexdigest()


@dataclass(frozen=True)
class Job:
    """What a step needs to rebuild its run's context: the workspace path and the configuration's fingerprint."""
    workspace: str
    fingerprint: str
    run_id: int | None = None

    @classmethod
    def of(cls, ctx: Context, run_id: int | None = None) -> Job:
        return cls(str(ctx.workspace_path), context_fingerprint(ctx), run_id)

    def context(self) -> Context:
        """The run's context, loaded again here (ConfigError if the configuration changed since planning)."""
        ctx = load_context(self.workspace)
        if context_fingerprint(ctx) != self.fingerprint:
            raise ConfigError(f"{self.workspace}: the workspace's configuration (register, layouts, rules, "
                              "annotations) changed while the run was going on; run it again")
        return ctx


# --- the steps: each is one unit of work a runner may run anywhere --------------------------

def read_raw_file(job: Job, raw):
    """Read, match and time-correct one raw file (rejections come back with a reason; a file that
    vanished or changed since it was listed comes back skipped)."""
    return read_inbox_file(job.context(), raw)


def quarantine(job: Job, outcome) -> str:
    """Copy a rejected file and its reason to quarantine."""
    return str(quarantine_file(job.context(), outcome, job.run_id))


def merge_deployment(job: Job, deployment_id, files) -> str:
    """Merge a deployment's new files into its pre-QC store."""
    from .store import merge_new_files

    merge_new_files(job.context(), deployment_id, files)
    return deployment_id


def reread_deployment(job: Job, deployment_id) -> list:
    """Rebuild a deployment's pre-QC store from its archived raw files (register or layout changed)."""
    from .store import rebuild_store

    return rebuild_store(job.context(), deployment_id)[1]


def qc_gauge(job: Job, deployment_id, files, tide):
    """QC a water-level gauge deployment and write its dataset and tide products."""
    from .deployment import qc_deployment

    return qc_deployment(job.context(), deployment_id, new_files=files, tide=tide, run_id=job.run_id)


def qc_barometer(job: Job, deployment_id, files):
    """QC a barometer deployment (its air pressure is subtracted by the level loggers of its site)."""
    from .deployment import qc_deployment

    return qc_deployment(job.context(), deployment_id, new_files=files, run_id=job.run_id)


def qc_station_step(job: Job, station_id, deployment_ids, files, tide) -> list:
    """QC one station's deployments (probe first) and write its exposure products."""
    from .deployment import qc_station

    return qc_station(job.context(), station_id, deployment_ids, files, tide, run_id=job.run_id)


def write_station_report(job: Job, run: dict, station: str) -> str:
    """Write one station's page of the run report (its plots are most of the report's cost)."""
    from ..report import write_station_pages

    return str(write_station_pages(job.context().paths.root, run, [station])[0])


def write_report(job: Job, run: dict) -> str:
    """Write the run report's index into the archive and publish its orchestrator artifacts."""
    from ..report import publish_artifacts, write_run_report

    report = write_run_report(job.context().paths.root, run, station_pages=False)
    publish_artifacts(run, report)
    return str(report)


#: every step by the name its orchestrator task carries
STEPS = {
    "read-raw-file": read_raw_file,
    "quarantine-file": quarantine,
    "merge-deployment": merge_deployment,
    "reread-deployment": reread_deployment,
    "qc-barometer": qc_barometer,
    "qc-gauge": qc_gauge,
    "qc-station": qc_station_step,
    "write-station-report": write_station_report,
    "write-run-report": write_report,
}


def import_steps() -> None:
    """Import every step's modules now, with xarray and dask's distributed module
    (``archive.ncio.xarray_module``): a runner that runs steps on threads calls this before it
    starts them, so no two threads import a module at once."""
    from ..archive.ncio import xarray_module
    from ..ingest import match  # noqa: F401  (the readers: pandas)
    from ..report import artifacts, html  # noqa: F401  (the report's pages and plots: jinja2, matplotlib)
    from . import deployment, references, store  # noqa: F401

    xarray_module()


class Pending(Protocol):
    def result(self): ...


class Runner(Protocol):
    """Where steps run: ``submit(step name, *args)`` returns something whose ``result()`` is the step's value."""
    def submit(self, step: str, *args) -> Pending: ...


@dataclass
class Done:
    value: object

    def result(self):
        return self.value


class InProcess:
    """Runs each step at once, in this process (no orchestrator, no retries)."""

    def submit(self, step: str, *args) -> Done:
        return Done(STEPS[step](*args))


# --- the sequence --------------------------------------------------------------------------

def run_if_nothing_to_do(ctx: Context, deployments: list[str] | None = None, *,
                         kind: str = "nightly", even_if_unchanged: bool = False) -> RunSummary | None:
    """The run (``kind`` "nightly" or "rerun"), here and at once, when it has nothing to do; None when it
    has work (then run it on the orchestrator's runner).

    Decided by :func:`plan.pending_work`, the run's own decision, and recorded in the catalog
    like any run, all under the archive's lock.  A re-run asked for deployments has work unless each
    of them is unchanged since its latest dataset (and ``even_if_unchanged`` is not given).
    When deciding fails (a missing inbox, say), the run here asks again and records its failure
    before the error goes on, as a run on the orchestrator does."""
    if deployments and even_if_unchanged:
        return None
    with ArchiveLock(ctx.paths.root):
        try:
            work = pending_work(ctx, inbox=kind == "nightly")
            if deployments:
                check_deployment_ids(ctx, deployments)
                if not all(unchanged_since_latest(ctx, d) for d in deployments):
                    return None
        except Exception:  # noqa: BLE001 - the run below meets it again and records it
            work = None
        if work is not None and not work.nothing:
            return None
        if kind == "nightly":
            return nightly_run(ctx, InProcess(), work)
        return rerun(ctx, InProcess(), deployments, work=work)


def nightly_run(ctx: Context, runner: Runner, work: Work | None = None) -> RunSummary:
    """Process everything new in the inbox once, and whatever changed configuration implies.

    ``work``: what :func:`plan.pending_work` found under the lock this run holds (default: asked here)."""
    run_id = ctx.catalog.start_run("nightly")
    clear_staging(ctx)
    job = Job.of(ctx, run_id)
    summary = RunSummary(archive=str(ctx.paths.root))
    outcome = "failed"
    try:
        work = work or pending_work(ctx)
        seen = work.inbox
        summary.files_seen, summary.files_known = seen["seen"], seen["known"]
        summary.repeated_in_inbox = seen["repeated_in_inbox"]
        summary.skipped_in_inbox = [inbox_skip_text(s) for s in seen.get("skipped", [])]
        outcomes = [p.result() for p in [runner.submit("read-raw-file", job, raw) for raw in work.new_files]]
        summary.skipped_in_inbox += [inbox_skip_text(o.skipped) for o in outcomes if o.skipped is not None]
        outcomes = [o for o in outcomes if o.skipped is None]
        for o in outcomes:
            if o.ingested is None:
                runner.submit("quarantine-file", job, o).result()
                summary.quarantined.append(Quarantined(o.raw.name, o.reason))
        by_dep = group_by_deployment([o.ingested for o in outcomes if o.ingested is not None])
        for d, files in by_dep.items():
            summary.reruns[d] = [new_data_cause(files, ctx.inbox)]
        for p in [runner.submit("merge-deployment", job, d, files) for d, files in by_dep.items()]:
            p.result()
        touched = set(by_dep) | refresh_inputs(ctx, runner, summary, work, exclude=set(by_dep))
        run_plan(ctx, runner, plan_qc(ctx, touched), by_dep, summary, run_id)
        summary.ingested = sum(len(files) for files in by_dep.values())
        outcome = "nothing new" if summary.nothing_new else "completed"
    finally:
        close_run(ctx, run_id, outcome, summary)
    report_run(ctx, runner, run_id, summary)
    return summary


def new_data_cause(files, inbox) -> str:
    """Why a deployment is QC'd in a nightly run: the raw files it received, by their paths in the inbox
    (downloads of one logger often share a file name)."""
    def shown(path):
        try:
            return path.relative_to(inbox).as_posix()
        except ValueError:
            return path.name
    return f"new raw data: {len(files)} file(s) ({', '.join(sorted(shown(f.raw.path) for f in files))})"


def rerun(ctx: Context, runner: Runner, deployments: list[str] | None = None, work: Work | None = None,
          *, even_if_unchanged: bool = False) -> RunSummary:
    """Re-QC what changed (or the given deployments and their dependents) from the archive's stored data.

    A deployment asked for whose latest dataset was made from exactly its current inputs
    (:func:`plan.unchanged_since_latest`) is not re-QC'd, unless ``even_if_unchanged``: it is listed
    in ``summary.unchanged`` instead.
    ``work``: what :func:`plan.pending_work` found under the lock this run holds (default: asked here)."""
    run_id = ctx.catalog.start_run("rerun")
    summary = RunSummary(archive=str(ctx.paths.root), kind="rerun")
    outcome = "failed"
    try:
        touched = refresh_inputs(ctx, runner, summary, work or pending_work(ctx, inbox=False))
        if deployments:
            check_deployment_ids(ctx, deployments)
            for d in deployments:
                if d in touched:
                    summary.reruns.setdefault(d, []).append("asked for")
                elif even_if_unchanged or not unchanged_since_latest(ctx, d):
                    summary.reruns.setdefault(d, []).append(
                        "asked for with --even-if-unchanged (no input changed)" if even_if_unchanged else
                        "asked for (its latest dataset file is missing or its store differs)")
                    touched.add(d)
                elif d not in summary.unchanged:
                    summary.unchanged.append(d)
        run_plan(ctx, runner, plan_qc(ctx, touched), {}, summary, run_id)
        outcome = "nothing new" if summary.nothing_new else "completed"
    finally:
        close_run(ctx, run_id, outcome, summary)
    report_run(ctx, runner, run_id, summary)
    return summary


def refresh_inputs(ctx: Context, runner: Runner, summary: RunSummary, work: Work, exclude=()) -> set[str]:
    """Rebuild stores whose ingest inputs changed and take the deployments whose QC inputs changed.

    The stale deployments were found before the run merged or rebuilt any store: neither
    changes what decides a deployment's QC (its key covers configuration and the catalog's
    datasets), and deployments whose store the run has just created are QC'd as new data."""
    job = Job.of(ctx)
    changed, stale = work.reread, work.stale
    for p in [runner.submit("reread-deployment", job, d) for d in changed]:
        summary.notices.extend(p.result())
    for d in changed:
        summary.reruns.setdefault(d, []).append("register entry or logger layout changed: raw files read again")
    for d, why in stale.items():
        if d not in exclude:
            summary.reruns.setdefault(d, []).extend(why)
    return set(changed) | set(stale)


def run_plan(ctx: Context, runner: Runner, plan: QcPlan, by_dep: dict, summary: RunSummary,
             run_id: int | None = None) -> None:
    """QC the plan in dependency order: barometers, gauges, then stations in parallel."""
    if not plan.sites:
        return                         # nothing to QC (and no tide reference to load)
    from .references import site_tide

    for d, why in plan.causes.items():
        summary.reruns.setdefault(d, []).extend(why)
    job = Job.of(ctx, run_id)
    site_of = {d.id: ctx.register.station_by_id(d.station).site for d in ctx.register.deployment}
    for p in [runner.submit("qc-barometer", job, d, by_dep.get(d, [])) for d in plan.barometers]:
        summary.results.append(p.result())
    tides = {site: site_tide(ctx, site) for site in plan.sites}
    for p in [runner.submit("qc-gauge", job, d, by_dep.get(d, []), tides[site_of[d]]) for d in plan.gauges]:
        summary.results.append(p.result())
    if plan.gauges:
        tides = {site: site_tide(ctx, site) for site in plan.sites}   # with the new gauge record
    pending = [runner.submit("qc-station", job, st, deps, {d: by_dep.get(d, []) for d in deps},
                             tides[site_of[deps[0]]]) for st, deps in plan.stations.items()]
    for p in pending:
        summary.results.extend(p.result())


def close_run(ctx: Context, run_id: int, outcome: str, summary: RunSummary) -> None:
    """Record the run's end in the catalog.

    Called from a ``finally``: when an error is already stopping the run (a full disk,
    say), a failure to record the end (that same full disk) must not hide the first
    error, so it is dropped; the run then stays without an end, like a killed run."""
    stopping = sys.exc_info()[1] is not None
    try:
        ctx.catalog.end_run(run_id, outcome, summary.as_counts())
    except (OSError, sqlite3.Error):
        if not stopping:
            raise


def report_run_dict(ctx: Context, run_id: int, summary: RunSummary) -> dict:
    """The run as the report shows it: the summary, the catalog's record of the run and what changed."""
    from ..report import run_diff, run_from_summary

    row = next(r for r in ctx.catalog.runs() if r["id"] == run_id)
    run = run_from_summary(summary, run_id=run_id, started=row["started"], ended=row["ended"],
                           outcome=row["outcome"])
    run["kind"] = row.get("kind")
    run["diff"] = run_diff(ctx.paths.root, run)
    return run


def report_run(ctx: Context, runner: Runner, run_id: int, summary: RunSummary) -> None:
    """The report of a run that changed something or found notices earlier runs did not show (killed
    or failed before their summary: ``summary.earlier``), station pages in parallel on the runner;
    a failure to write it is a notice, not a failed run (the data are already committed).  Then, when
    the report was written (or none was needed), every notice so far is recorded as shown by this run."""
    summary.earlier = [(int(n["run_id"]), Notice.from_dict(n)) for n in ctx.catalog.unreported_notices(run_id)]
    if not summary.nothing_new or summary.earlier:
        write_run_reports(ctx, runner, run_id, summary)
        if not summary.report:         # the report failed: its notices are left for the next run to show
            return
    try:
        ctx.catalog.mark_notices_reported(run_id)
    except (OSError, sqlite3.Error):
        pass          # the notices stay unshown: the next run shows them again, nothing is lost


def write_run_reports(ctx: Context, runner: Runner, run_id: int, summary: RunSummary) -> None:
    """The run's report: station pages in parallel on the runner, then the index (``summary.report``)."""
    from ..report import report_stations

    try:
        job = Job.of(ctx)
        run = report_run_dict(ctx, run_id, summary)
        for p in [runner.submit("write-station-report", job, run, st) for st in report_stations(ctx.paths.root)]:
            p.result()
        summary.report = runner.submit("write-run-report", job, run).result()
    except Exception as err:  # noqa: BLE001 - the run's data are safe; say what went wrong
        summary.notices.append(Notice("run", f"the run's report was not written: {type(err).__name__}: {err}"))
