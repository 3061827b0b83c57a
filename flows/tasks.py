"""Prefect tasks: each step of the run sequence (``qcpipe.pipeline.run.STEPS``) as a retrying task.

Tasks may run in another process (a Dask worker, see ``flows/runners.py``), so their
arguments are things that pickle and stay small: a ``Job`` (the workspace path and the
fingerprint of the configuration the run was planned with), ids, raw-file records,
ingested files and a site's tide reference; every task loads the context again.
"""

from __future__ import annotations

from prefect import task
from prefect.cache_policies import NO_CACHE

from qcpipe.errors import is_transient
from qcpipe.pipeline.run import STEPS, Job, import_steps  # noqa: F401  (Job: what every task receives)

import_steps()     # here, in the importing thread, before any task thread starts

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


#: every step of the run sequence as a retrying Prefect task, by its name
TASKS = {name: retrying_task(name)(fn) for name, fn in STEPS.items()}


class TaskRunner:
    """The run sequence's runner inside a flow: each step is submitted as its Prefect task
    (on the flow's task runner: threads, or the workers of a Dask cluster)."""

    def submit(self, step: str, *args):
        return TASKS[step].submit(*args)
