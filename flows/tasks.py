"""Prefect tasks shared by the nightly and re-run flows; each calls one pipeline function.

Tasks may run in another process (a Dask worker, see ``flows/runners.py``), so
their arguments are things that pickle and stay small: the workspace path, ids,
raw-file records, ingested files (arrays of one download) and a site's tidal
context.  The loaded configuration (``pipeline.Context``) is not sent: its
register does not survive unpickling, and every task can load it again from the
workspace in a few milliseconds.  The flow sends the fingerprint of the
configuration it planned with, and a task that loads another one (a file was
edited during the run) stops with a ConfigError instead of mixing the two.
"""

from __future__ import annotations

import hashlib
import json
import sqlite3
import sys
from dataclasses import dataclass

from prefect import task
from prefect.cache_policies import NO_CACHE

from qcpipe import pipeline
from qcpipe.errors import ConfigError, is_transient

#: Attempts after the first for a task that met a transient I/O error, and the waits between them (s).
RETRIES = 3
RETRY_DELAYS_S = [1, 3, 9]


def transient_only(task, task_run, state) -> bool:
    """Prefect retry condition: try again only after a passing I/O failure (:func:`qcpipe.errors.is_transient`).

    Bad input, bad configuration, a full disk or a busy archive fail the same
    way every time, so they end the task at once."""
    exc = state.data if isinstance(state.data, BaseException) else None
    if exc is None:
        try:
            state.result(raise_on_failure=True)
        except BaseException as err:  # noqa: BLE001 - we only classify it
            exc = err
    return exc is not None and is_transient(exc)


def retrying_task(name: str):
    """A Prefect task that retries transient I/O errors a bounded number of times (every task here is
    safe to repeat: writes are atomic, merges idempotent, QC skips what its run already committed)."""
    return task(name=name, cache_policy=NO_CACHE, retries=RETRIES, retry_delay_seconds=RETRY_DELAYS_S,
                retry_condition_fn=transient_only)


def context_fingerprint(ctx: pipeline.Context) -> str:
    """SHA-256 over the content hashes of everything a run was planned with."""
    parts = {"workspace": str(ctx.workspace_path), "archive": str(ctx.paths.root), "inbox": str(ctx.inbox),
             "register": ctx.register.sha256, "layouts": ctx.layouts.sha256, "rules": ctx.rules.sha256,
             "annotations": [a.as_dict() for a in ctx.annotations.items], "keep_versions": ctx.keep_versions}
    return hashlib.sha256(json.dumps(parts, sort_keys=True).encode()).hexdigest()


@dataclass(frozen=True)
class Job:
    """What a task needs to rebuild its run's context: the workspace path and the configuration's fingerprint."""
    workspace: str
    fingerprint: str
    run_id: int | None = None

    @classmethod
    def of(cls, ctx: pipeline.Context, run_id: int | None = None) -> "Job":
        return cls(str(ctx.workspace_path), context_fingerprint(ctx), run_id)

    def context(self) -> pipeline.Context:
        """The run's context, loaded again here (ConfigError if the configuration changed since planning)."""
        ctx = pipeline.load_context(self.workspace)
        if context_fingerprint(ctx) != self.fingerprint:
            raise ConfigError(f"{self.workspace}: the workspace's configuration (register, layouts, rules, "
                              "annotations) changed while the run was going on; run it again")
        return ctx


@retrying_task("read-raw-file")
def read_raw_file(job: Job, raw) -> pipeline.FileOutcome:
    """Read, match and time-correct one raw file (rejections come back with a reason)."""
    ctx = job.context()
    return pipeline.read_one_file(raw, ctx.register, ctx.layouts)


@retrying_task("quarantine-file")
def quarantine(job: Job, outcome) -> str:
    """Copy a rejected file and its reason to quarantine."""
    return str(pipeline.quarantine_file(job.context(), outcome))


@retrying_task("merge-deployment")
def merge_deployment(job: Job, deployment_id, files) -> str:
    """Merge a deployment's new files into its pre-QC store."""
    pipeline.merge_new_files(job.context(), deployment_id, files)
    return deployment_id


@retrying_task("reread-deployment")
def reread_deployment(job: Job, deployment_id) -> list:
    """Rebuild a deployment's pre-QC store from its archived raw files (register or layout changed)."""
    return pipeline.rebuild_store(job.context(), deployment_id)[1]


@retrying_task("qc-gauge")
def qc_gauge(job: Job, deployment_id, files, tide) -> pipeline.DeploymentResult:
    """QC a water-level gauge deployment and write its dataset and tide products."""
    return pipeline.qc_deployment(job.context(), deployment_id, new_files=files, tide=tide, run_id=job.run_id)


@retrying_task("qc-barometer")
def qc_barometer(job: Job, deployment_id, files) -> pipeline.DeploymentResult:
    """QC a barometer deployment (its air pressure is subtracted by the level loggers of its site)."""
    return pipeline.qc_deployment(job.context(), deployment_id, new_files=files, run_id=job.run_id)


@retrying_task("qc-station")
def qc_station(job: Job, station_id, deployment_ids, files, tide) -> list:
    """QC one station's deployments (probe first) and write its exposure products."""
    return pipeline.qc_station(job.context(), station_id, deployment_ids, files, tide, run_id=job.run_id)


def report_run_dict(ctx: pipeline.Context, run_id: int, summary: pipeline.RunSummary) -> dict:
    """The run as the report shows it: the summary, the catalog's record of the run and what changed."""
    from qcpipe.report import run_diff, run_from_summary

    row = next(r for r in ctx.catalog.runs() if r["id"] == run_id)
    run = run_from_summary(summary, run_id=run_id, started=row["started"], ended=row["ended"],
                           outcome=row["outcome"])
    run["kind"] = row.get("kind")
    run["diff"] = run_diff(ctx.paths.root, run)
    return run


@retrying_task("write-station-report")
def write_station_report(job: Job, run: dict, station: str) -> str:
    """Write one station's page of the run report (its plots are most of the report's cost)."""
    from qcpipe.report import write_station_pages

    return str(write_station_pages(job.context().paths.root, run, [station])[0])


@retrying_task("write-run-report")
def write_report(job: Job, run: dict) -> str:
    """Write the run report's index into the archive and publish its Prefect artifacts."""
    from qcpipe.report import publish_artifacts, write_run_report

    report = write_run_report(job.context().paths.root, run, station_pages=False)
    publish_artifacts(run, report)
    return str(report)


def report_run(job: Job, run_id: int, summary: pipeline.RunSummary) -> None:
    """The report of a run that changed something, station pages in parallel on the flow's runner;
    a failure to write it is a notice, not a failed run (the data are already committed)."""
    if summary.nothing_new:
        return
    from qcpipe.report import report_stations

    try:
        ctx = job.context()
        run = report_run_dict(ctx, run_id, summary)
        pages = [write_station_report.submit(job, run, st) for st in report_stations(ctx.paths.root)]
        for page in pages:
            page.result()
        summary.report = write_report(job, run)
    except Exception as err:  # noqa: BLE001 - the run's data are safe; say what went wrong
        summary.notices.append(f"the run's report was not written: {type(err).__name__}: {err}")


def close_run(ctx, run_id: int, outcome: str, summary: pipeline.RunSummary) -> None:
    """Record the run's end in the catalog (and release its lock).

    Called from the flow's ``finally``: when an error is already stopping the
    run (a full disk, say), a failure to record the end (that same full disk)
    must not hide the first error, so it is dropped; the run then stays
    without an end in the catalog, like a run that was killed."""
    stopping = sys.exc_info()[1] is not None
    try:
        ctx.catalog.end_run(run_id, outcome, summary.as_counts())
    except (OSError, sqlite3.Error):
        if not stopping:
            raise


def run_plan(ctx, plan: pipeline.QcPlan, by_dep: dict, summary: pipeline.RunSummary,
             run_id: int | None = None) -> None:
    """Submit the plan's QC tasks in dependency order: barometers, gauges, then stations in parallel."""
    job = Job.of(ctx, run_id)
    site_of = {d.id: ctx.register.station_by_id(d.station).site for d in ctx.register.deployment}
    for fut in [qc_barometer.submit(job, d, by_dep.get(d, [])) for d in plan.barometers]:
        summary.results.append(fut.result())
    tides = {site: pipeline.site_tide(ctx, site) for site in plan.sites}
    for fut in [qc_gauge.submit(job, d, by_dep.get(d, []), tides[site_of[d]]) for d in plan.gauges]:
        summary.results.append(fut.result())
    if plan.gauges:
        tides = {site: pipeline.site_tide(ctx, site) for site in plan.sites}   # with the new gauge record
    futures = [qc_station.submit(job, st, deps, {d: by_dep.get(d, []) for d in deps}, tides[site_of[deps[0]]])
               for st, deps in plan.stations.items()]
    for fut in futures:
        summary.results.extend(fut.result())


def refresh_inputs(ctx, summary: pipeline.RunSummary, exclude=()) -> set[str]:
    """Rebuild stores whose ingest inputs changed and find deployments whose QC inputs changed."""
    job = Job.of(ctx)
    changed = pipeline.changed_ingest(ctx)
    for fut in [reread_deployment.submit(job, d) for d in changed]:
        for notice in fut.result():
            summary.notices.append(notice)
    for d in changed:
        summary.reruns.setdefault(d, []).append("register entry or logger layout changed: raw files read again")
    stale = pipeline.stale_deployments(ctx)
    for d, why in stale.items():
        if d not in exclude:
            summary.reruns.setdefault(d, []).extend(why)
    return set(changed) | set(stale)
