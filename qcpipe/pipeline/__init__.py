"""The steps of a run, without the orchestrator: every function runs and tests without Prefect.

context     the workspace's configuration and the archive's paths, loaded once
inbox       new raw files, each read on its own, rejected ones quarantined
store       a deployment's pre-QC store (merged downloads, UTC, raw units)
references  a deployment's site barometer, tide reference and station immersion state
deployment  QC of one deployment into a new dataset version, in named steps
plan        which deployments a run QCs, in dependency order
run         the run sequence (nightly, re-run) on a runner: directly, or as Prefect tasks
clock_fix   a confirmed clock correction: planned from the verdict, written to the register, re-run

Nothing is dropped silently: every file ends archived or quarantined with a reason, and
every count lands in the run's summary (:class:`qcpipe.report.model.RunSummary`).
"""

from ..report.model import RunSummary
from .context import Context, load_context
from .deployment import DeploymentResult, prune_versions, qc_deployment, qc_station
from .inbox import FileOutcome, find_new_files, group_by_deployment, quarantine_file, read_one_file
from .plan import QcPlan, check_deployment_ids, plan_qc, stale_deployments
from .references import site_barometer, site_tide, station_immersion
from .store import Store, changed_ingest, load_store, merge_new_files, rebuild_store

__all__ = ["Context", "DeploymentResult", "FileOutcome", "QcPlan", "RunSummary", "Store", "changed_ingest",
           "check_deployment_ids", "find_new_files", "group_by_deployment", "load_context", "load_store",
           "merge_new_files", "plan_qc", "prune_versions", "qc_deployment", "qc_station", "quarantine_file",
           "read_one_file", "rebuild_store", "site_barometer", "site_tide", "stale_deployments",
           "station_immersion"]
