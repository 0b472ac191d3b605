"""Dask past one machine: Prefect's Dask task runner, and the cluster client the stages hand work to.

With `scale.runner = "dask"` each monthly run holds a Prefect Dask task runner (prefect-dask) for its
length: a temporary local cluster on 127.0.0.1, or the running scheduler at `scale.dask_address`. A flow
started with a DaskTaskRunner of its own (`monthly_run.with_options(task_runner=...)`) uses that one
instead. The stages that split their work (the per-customer SQL buckets, the models' CV splits) map
plain functions onto the cluster through the runner's client: the workers need ledgerband installed,
not a Prefect API (task runs on workers would each start a temporary Prefect API of their own).
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from typing import Any

from ledgerband.tasks.core.errors import LedgerbandError
from ledgerband.tasks.core.settings import ScaleSettings


def dask_task_runner(scale: ScaleSettings):
    """Prefect's Dask task runner for `scale`: the given scheduler, else a local cluster of processes."""
    from prefect_dask import DaskTaskRunner

    if scale.dask_address:
        return DaskTaskRunner(address=scale.dask_address)
    return DaskTaskRunner(
        cluster_kwargs={
            "n_workers": scale.dask_workers,
            "threads_per_worker": 1,
            "processes": True,
            "host": "127.0.0.1",
            "dashboard_address": None,
        }
    )


_RUN_RUNNER: ContextVar[Any] = ContextVar("ledgerband_dask_runner", default=None)


@contextmanager
def run_cluster(scale: ScaleSettings) -> Iterator[None]:
    """For scale.runner "dask": a Dask task runner held for the run (its cluster starts on first use)."""
    if scale.runner != "dask":
        yield
        return
    with dask_task_runner(scale) as runner:
        token = _RUN_RUNNER.set(runner)
        try:
            yield
        finally:
            _RUN_RUNNER.reset(token)


def cluster_client():
    """The Dask client: of the flow's own Dask task runner, else of the one the run holds."""
    from prefect.context import FlowRunContext
    from prefect_dask import DaskTaskRunner

    context = FlowRunContext.get()
    runner = context.task_runner if context else None
    if not isinstance(runner, DaskTaskRunner):
        runner = _RUN_RUNNER.get()
    if runner is None:
        raise LedgerbandError(
            'scale.runner is "dask", but no Dask task runner is running: the monthly flow starts one '
            "(ledgerband.tasks.core.cluster.run_cluster)"
        )
    return runner.client


def on_cluster(fn: Callable[[Any], Any], items: list) -> list:
    """fn over items on the flow's Dask cluster, results in the order of items."""
    client = cluster_client()
    return client.gather(client.map(fn, items, pure=False))
