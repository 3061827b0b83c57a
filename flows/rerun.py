"""The re-run flow: re-QC from the stored pre-QC level, without new downloads.

By default it re-processes exactly the deployments whose inputs changed (rules,
register, layouts, annotations, harmonic constants: compared by content hash
with what made their latest dataset) and their dependents; given deployment ids
it re-QCs those (and their dependents) whatever the hashes say.
"""

from __future__ import annotations

from prefect import flow

from qcpipe import pipeline

from .tasks import refresh_inputs, run_plan


@flow(name="qcpipe-rerun", log_prints=False)
def rerun(workspace: str, deployments: list[str] | None = None) -> pipeline.RunSummary:
    """Re-QC what changed (or the given deployments) from the archive's stored data."""
    ctx = pipeline.load_context(workspace)
    run_id = ctx.catalog.start_run("rerun")
    summary = pipeline.RunSummary(archive=str(ctx.paths.root))
    outcome = "failed"
    try:
        touched = refresh_inputs(ctx, summary)
        if deployments:
            pipeline.check_deployment_ids(ctx, deployments)
            for d in deployments:
                summary.reruns.setdefault(d, []).append("asked for")
            touched |= set(deployments)
        run_plan(ctx, pipeline.plan_qc(ctx, touched), {}, summary)
        outcome = "nothing new" if summary.nothing_new else "completed"
        return summary
    finally:
        ctx.catalog.end_run(run_id, outcome, summary.as_counts())
