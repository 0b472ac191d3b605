"""Dask past one machine: the monthly flow's task runner, and the cluster client the stages hand work to.

With `scale.runner = "dask"` the monthly flow runs with Prefect's Dask task runner (prefect-dask): a
temporary local cluster on 127.0.0.1, or the running scheduler at `scale.dask_address`. The stages that
split their work (the per-customer SQL buckets, the models' CV splits) map plain functions onto that
cluster through the task runner's client: the workers need ledgerband installed, not a Prefect API.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from ledgerband.tasks.errors import LedgerbandError
from ledgerband.tasks.settings import ScaleSettings


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


def cluster_client():
    """The Dask client of the running flow's task runner (the flow must run with dask_task_runner)."""
    from prefect.context import FlowRunContext
    from prefect_dask import DaskTaskRunner

    context = FlowRunContext.get()
    runner = context.task_runner if context else None
    if not isinstance(runner, DaskTaskRunner):
        raise LedgerbandError(
            'scale.runner is "dask", but this run was not started with Prefect\'s Dask task runner '
            "(start it with `ledgerband run`, or give the flow ledgerband.tasks.cluster.dask_task_runner)"
        )
    return runner.client


def on_cluster(fn: Callable[[Any], Any], items: list) -> list:
    """fn over items on the flow's Dask cluster, results in the order of items."""
    client = cluster_client()
    return client.gather(client.map(fn, items, pure=False))
