"""The re-run flow: re-QC from the stored pre-QC level, without new downloads.

By default it re-processes exactly the deployments whose inputs changed (rules,
register, layouts, annotations, harmonic constants: compared by content hash
with what made their latest dataset) and their dependents; given deployment ids
it re-QCs those (and their dependents) when anything they are made from changed, or whatever
the hashes say with ``even_if_unchanged``.  Tasks run on
Prefect's default thread runner, or on the workers of a Dask cluster:
``rerun_flow_for(address)(workspace, deployments, dask_address=address)``
(see ``flows/runners.py``).
"""

from __future__ import annotations

from prefect import flow

from qcpipe import pipeline
from qcpipe.pipeline import run
from qcpipe.report.model import RunSummary

from .runners import flow_for, runs_on
from .tasks import TaskRunner


@flow(name="qcpipe-rerun", log_prints=False)
def rerun(workspace: str, deployments: list[str] | None = None,
          dask_address: str | None = None, even_if_unchanged: bool = False) -> RunSummary:
    """Re-QC what changed (or the given deployments) from the archive's stored data.

    ``dask_address``: run the tasks on the Dask cluster with this scheduler
    address; called on a flow with another runner, the run continues as a
    sub-flow that has the Dask runner.  ``even_if_unchanged``: write new versions of the given
    deployments even when nothing they are made from changed.
    """
    if not runs_on(dask_address):
        return rerun_flow_for(dask_address)(workspace, deployments, dask_address=dask_address,
                                            even_if_unchanged=even_if_unchanged)
    return _rerun(workspace, deployments, even_if_unchanged)


def rerun_flow_for(dask_address: str | None = None):
    """The re-run flow with its tasks on the Dask cluster at ``dask_address`` (None: the default runner)."""
    return flow_for(rerun, dask_address)


def _rerun(workspace: str, deployments: list[str] | None, even_if_unchanged: bool = False) -> RunSummary:
    return run.rerun(pipeline.load_context(workspace), TaskRunner(), deployments,
                     even_if_unchanged=even_if_unchanged)
