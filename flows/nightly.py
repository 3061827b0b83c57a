"""The nightly flow: discover new downloads, ingest each file, QC barometers, gauges, then stations.

Science lives in ``qcpipe``; this module only puts pipeline functions in
order.  Files are read in parallel and merged into their deployments' stores
in parallel; deployments whose register entry, layout, rules or annotations
changed since their latest dataset are re-processed too (by content hash);
then barometers are QC'd (the level loggers of their site subtract their air
pressure), then water-level gauges (they are the site's reference level), then
stations in parallel, each probe first (its immersion state is attached to
every other instrument of the station).  Prefect's default thread runner
(NetCDF access is serialised in ``qcpipe.archive.ncio``), or the workers of a
Dask cluster: ``nightly_flow_for(address)(workspace, dask_address=address)``
(see ``flows/runners.py``).
"""

from __future__ import annotations

from prefect import flow, unmapped

from qcpipe import pipeline

from .runners import flow_for, runs_on
from .tasks import Job, close_run, merge_deployment, quarantine, read_raw_file, refresh_inputs, report_run, run_plan


@flow(name="qcpipe-nightly", log_prints=False)
def nightly(workspace: str, dask_address: str | None = None) -> pipeline.RunSummary:
    """Process everything new in the workspace's inbox once, and whatever changed configuration implies.

    ``dask_address``: run the tasks on the Dask cluster with this scheduler
    address (``tcp://host:port``); called on a flow with another runner, the
    run continues as a sub-flow that has the Dask runner.
    """
    if not runs_on(dask_address):
        return nightly_flow_for(dask_address)(workspace, dask_address=dask_address)
    return _nightly(workspace)


def nightly_flow_for(dask_address: str | None = None):
    """The nightly flow with its tasks on the Dask cluster at ``dask_address`` (None: the default runner)."""
    return flow_for(nightly, dask_address)


def _nightly(workspace: str) -> pipeline.RunSummary:
    ctx = pipeline.load_context(workspace)
    job = Job.of(ctx)
    run_id = ctx.catalog.start_run("nightly")
    summary = pipeline.RunSummary(archive=str(ctx.paths.root))
    outcome = "failed"
    try:
        new, seen = pipeline.find_new_files(ctx)
        summary.files_seen, summary.files_known = seen["seen"], seen["known"]
        summary.repeated_in_inbox = seen["repeated_in_inbox"]
        outcomes = [f.result() for f in read_raw_file.map(unmapped(job), new)] if new else []
        for o in outcomes:
            if o.ingested is None:
                quarantine(job, o)
                summary.quarantined.append((o.raw.name, o.reason))
        by_dep = pipeline.group_by_deployment([o.ingested for o in outcomes if o.ingested is not None])
        for fut in [merge_deployment.submit(job, d, files) for d, files in by_dep.items()]:
            fut.result()
        touched = set(by_dep) | refresh_inputs(ctx, summary, exclude=set(by_dep))
        run_plan(ctx, pipeline.plan_qc(ctx, touched), by_dep, summary, run_id)
        summary.ingested = sum(len(files) for files in by_dep.values())
        outcome = "nothing new" if summary.nothing_new else "completed"
    finally:
        close_run(ctx, run_id, outcome, summary)
    report_run(Job.of(ctx), run_id, summary)
    return summary
