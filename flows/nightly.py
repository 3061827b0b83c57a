"""The nightly flow: discover new downloads, ingest each file, QC gauges, then stations.

Science lives in ``qcpipe``; this module only puts pipeline functions in
order.  Files are read in parallel and merged into their deployments' stores
in parallel; then water-level gauges are QC'd (they are the reference level
of the site), then stations in parallel, each probe first (its immersion
state is attached to every other instrument of the station).  Prefect's
default thread runner; NetCDF access is serialised in ``qcpipe.archive.ncio``.
"""

from __future__ import annotations

from prefect import flow, task, unmapped
from prefect.cache_policies import NO_CACHE

from qcpipe import pipeline


@task(name="read-raw-file", cache_policy=NO_CACHE)
def read_raw_file(raw, register, layouts) -> pipeline.FileOutcome:
    """Read, match and time-correct one raw file (rejections come back with a reason)."""
    return pipeline.read_one_file(raw, register, layouts)


@task(name="quarantine-file", cache_policy=NO_CACHE, retries=2, retry_delay_seconds=1)
def quarantine(ctx, outcome) -> str:
    """Copy a rejected file and its reason to quarantine."""
    return str(pipeline.quarantine_file(ctx, outcome))


@task(name="merge-deployment", cache_policy=NO_CACHE)
def merge_deployment(ctx, deployment_id, files) -> str:
    """Merge a deployment's new files into its pre-QC store."""
    pipeline.merge_new_files(ctx, deployment_id, files)
    return deployment_id


@task(name="qc-gauge", cache_policy=NO_CACHE)
def qc_gauge(ctx, deployment_id, files, tide) -> pipeline.DeploymentResult:
    """QC a water-level gauge deployment and write its dataset and tide products."""
    return pipeline.qc_deployment(ctx, deployment_id, new_files=files, tide=tide)


@task(name="qc-station", cache_policy=NO_CACHE)
def qc_station(ctx, station_id, deployment_ids, files, tide) -> list:
    """QC one station's deployments (probe first) and write its exposure products."""
    return pipeline.qc_station(ctx, station_id, deployment_ids, files, tide)


@flow(name="qcpipe-nightly", log_prints=False)
def nightly(workspace: str) -> pipeline.RunSummary:
    """Process everything new in the workspace's inbox once."""
    ctx = pipeline.load_context(workspace)
    run_id = ctx.catalog.start_run()
    summary = pipeline.RunSummary(archive=str(ctx.paths.root))
    outcome = "failed"
    try:
        new, seen = pipeline.find_new_files(ctx)
        summary.files_seen, summary.files_known = seen["seen"], seen["known"]
        summary.repeated_in_inbox = seen["repeated_in_inbox"]
        outcomes = [f.result() for f in read_raw_file.map(new, register=unmapped(ctx.register),
                                                          layouts=unmapped(ctx.layouts))] if new else []
        for o in outcomes:
            if o.ingested is None:
                quarantine(ctx, o)
                summary.quarantined.append((o.raw.name, o.reason))
        by_dep = pipeline.group_by_deployment([o.ingested for o in outcomes if o.ingested is not None])
        for fut in [merge_deployment.submit(ctx, d, files) for d, files in by_dep.items()]:
            fut.result()
        plan = pipeline.plan_qc(ctx, set(by_dep))
        site_of = {d.id: ctx.register.station_by_id(d.station).site for d in ctx.register.deployment}
        tides = {site: pipeline.site_tide(ctx, site) for site in plan.sites}
        for fut in [qc_gauge.submit(ctx, d, by_dep.get(d, []), tides[site_of[d]]) for d in plan.gauges]:
            summary.results.append(fut.result())
        tides = {site: pipeline.site_tide(ctx, site) for site in plan.sites}   # now with the new gauge record
        futures = [qc_station.submit(ctx, st, deps, {d: by_dep.get(d, []) for d in deps}, tides[site_of[deps[0]]])
                   for st, deps in plan.stations.items()]
        for fut in futures:
            summary.results.extend(fut.result())
        summary.ingested = sum(len(files) for files in by_dep.values())
        outcome = "nothing new" if summary.nothing_new else "completed"
        return summary
    finally:
        ctx.catalog.end_run(run_id, outcome, summary.as_counts())
