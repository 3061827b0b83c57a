"""Prefect tasks shared by the nightly and re-run flows; each calls one pipeline function."""

from __future__ import annotations

from prefect import task
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


@task(name="reread-deployment", cache_policy=NO_CACHE)
def reread_deployment(ctx, deployment_id) -> list:
    """Rebuild a deployment's pre-QC store from its archived raw files (register or layout changed)."""
    return pipeline.rebuild_store(ctx, deployment_id)[1]


@task(name="qc-gauge", cache_policy=NO_CACHE)
def qc_gauge(ctx, deployment_id, files, tide) -> pipeline.DeploymentResult:
    """QC a water-level gauge deployment and write its dataset and tide products."""
    return pipeline.qc_deployment(ctx, deployment_id, new_files=files, tide=tide)


@task(name="qc-station", cache_policy=NO_CACHE)
def qc_station(ctx, station_id, deployment_ids, files, tide) -> list:
    """QC one station's deployments (probe first) and write its exposure products."""
    return pipeline.qc_station(ctx, station_id, deployment_ids, files, tide)


def run_plan(ctx, plan: pipeline.QcPlan, by_dep: dict, summary: pipeline.RunSummary) -> None:
    """Submit the plan's QC tasks in dependency order: gauges, then stations in parallel."""
    site_of = {d.id: ctx.register.station_by_id(d.station).site for d in ctx.register.deployment}
    tides = {site: pipeline.site_tide(ctx, site) for site in plan.sites}
    for fut in [qc_gauge.submit(ctx, d, by_dep.get(d, []), tides[site_of[d]]) for d in plan.gauges]:
        summary.results.append(fut.result())
    if plan.gauges:
        tides = {site: pipeline.site_tide(ctx, site) for site in plan.sites}   # with the new gauge record
    futures = [qc_station.submit(ctx, st, deps, {d: by_dep.get(d, []) for d in deps}, tides[site_of[deps[0]]])
               for st, deps in plan.stations.items()]
    for fut in futures:
        summary.results.extend(fut.result())


def refresh_inputs(ctx, summary: pipeline.RunSummary, exclude=()) -> set[str]:
    """Rebuild stores whose ingest inputs changed and find deployments whose QC inputs changed."""
    changed = pipeline.changed_ingest(ctx)
    for fut in [reread_deployment.submit(ctx, d) for d in changed]:
        for notice in fut.result():
            summary.notices.append(notice)
    for d in changed:
        summary.reruns.setdefault(d, []).append("register entry or logger layout changed: raw files read again")
    stale = pipeline.stale_deployments(ctx)
    for d, why in stale.items():
        if d not in exclude:
            summary.reruns.setdefault(d, []).extend(why)
    return set(changed) | set(stale)
