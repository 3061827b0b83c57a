"""The nightly flow: discover new downloads, ingest each file, QC and write each station.

Science lives in ``qcpipe``; this module only puts pipeline functions in
order.  Files are read in parallel, stations are updated in parallel
(Prefect's default thread runner; NetCDF access is serialised inside
``qcpipe.archive.ncio``).
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
    """Move a rejected file's copy and reason to quarantine."""
    return str(pipeline.quarantine_file(ctx, outcome))


@task(name="update-station", cache_policy=NO_CACHE)
def update_station(ctx, station_id, files) -> list:
    """Merge, convert, QC and write every touched deployment of one station."""
    return pipeline.update_station(ctx, station_id, files)


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
        outcomes = [f.result() for f in read_raw_file.map(new, register=unmapped(ctx.register), layouts=unmapped(ctx.layouts))] \
            if new else []
        rejected = [o for o in outcomes if o.ingested is None]
        for o in rejected:
            quarantine(ctx, o)
            summary.quarantined.append((o.raw.name, o.reason))
        by_station = pipeline.group_by_station([o.ingested for o in outcomes if o.ingested is not None])
        futures = [update_station.submit(ctx, st, files) for st, files in by_station.items()]
        for fut in futures:
            summary.results.extend(fut.result())
        summary.ingested = sum(len(files) for files in by_station.values())
        outcome = "nothing new" if summary.nothing_new else "completed"
        return summary
    finally:
        ctx.catalog.end_run(run_id, outcome, summary.as_counts())
