"""The steps of a run, without the orchestrator: every function runs and tests without Prefect.

context     the workspace's configuration and the archive's paths, loaded once
inbox       new raw files, each read on its own, rejected ones quarantined
store       a deployment's pre-QC store (merged downloads, UTC, raw units)
references  a deployment's site barometer, tide reference and station immersion state
deployment  QC of one deployment into a new dataset version, in named steps
plan        which deployments a run QCs, in dependency order; what a run has to do
run         the run sequence (nightly, re-run) on a runner: directly, or as Prefect tasks
clock_fix   a confirmed clock correction: planned from the verdict, written to the register, re-run

Nothing is dropped silently: every file ends archived or quarantined with a reason, and
every count lands in the run's summary (:class:`qcpipe.report.model.RunSummary`).
Names are imported from their modules on first use (:mod:`qcpipe.lazy`), so deciding
whether a run has anything to do does not load the QC's libraries.
"""

from ..lazy import exports

_WHERE = {
    "RunSummary": "..report.model",
    "Context": ".context", "load_context": ".context",
    "DeploymentResult": ".deployment", "prune_versions": ".deployment", "qc_deployment": ".deployment",
    "qc_station": ".deployment",
    "FileOutcome": ".inbox", "find_new_files": ".inbox", "group_by_deployment": ".inbox",
    "quarantine_file": ".inbox", "read_one_file": ".inbox",
    "QcPlan": ".plan", "Work": ".plan", "changed_ingest": ".plan", "check_deployment_ids": ".plan",
    "pending_work": ".plan", "plan_qc": ".plan", "stale_deployments": ".plan",
    "site_barometer": ".references", "site_tide": ".references", "station_immersion": ".references",
    "Store": ".store", "load_store": ".store", "merge_new_files": ".store", "rebuild_store": ".store",
}
__all__ = sorted(_WHERE)
__getattr__, __dir__ = exports(__name__, _WHERE)
