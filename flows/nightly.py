"""The nightly flow: discover new downloads, ingest each file, QC barometers, gauges, then stations.

Science lives in ``qcpipe``; the run sequence is ``qcpipe.pipeline.run.nightly_run``,
which this flow runs with each step as a Prefect task.  Files are read in parallel and merged into their deployments' stores
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

from prefect import flow

from qcpipe import pipeline
from qcpipe.pipeline import run
from qcpipe.report.model import RunSummary

from .runners import flow_for, runs_on
from .tasks import TaskRunner


@flow(name="qcpipe-nightly", log_prints=False)
def nightly(workspace: str, dask_address: str | None = None) -> RunSummary:
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


def _nightly(workspace: str) -> RunSummary:
    return run.nightly_run(pipeline.load_context(workspace), TaskRunner())
