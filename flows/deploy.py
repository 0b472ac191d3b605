"""The monthly schedule as a Prefect deployment: registered on a server (`ledgerband deploy`, run by a
process worker) or served from this process (`ledgerband serve`, no work pool needed).

The deployment carries no period: each scheduled run reads the last complete month before its scheduled
time (ledgerband.tasks.ops.schedule). It allows one run at a time (concurrency limit 1), on top of the state
folder's own run lock. The worker runs the installed package (a module-path entrypoint: no checkout,
no image) with this state folder and settings file in its environment.
"""

from __future__ import annotations

import os
from uuid import UUID

from ledgerband.flows.monthly import monthly_run
from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.ops.schedule import cron_schedule

DESCRIPTION = (
    "ledgerband monthly run: ingest, quality, labels, models, accuracy and drift gates, publish. "
    "Each scheduled run reads the last complete month before its scheduled time."
)


def _job_env(settings: Settings) -> dict[str, str]:
    env = {"LEDGERBAND_HOME": str(settings.home)}
    if os.environ.get("LEDGERBAND_CONFIG"):
        env["LEDGERBAND_CONFIG"] = os.path.abspath(os.environ["LEDGERBAND_CONFIG"])
    return env


def monthly_deployment(settings: Settings):
    """The RunnerDeployment of the monthly flow, on the configured cron and time zone."""
    from prefect.types.entrypoint import EntrypointType

    s = settings.schedule
    return monthly_run.to_deployment(
        name=s.deployment_name,
        schedule=cron_schedule(settings),
        concurrency_limit=1,
        description=DESCRIPTION,
        tags=["ledgerband"],
        entrypoint_type=EntrypointType.MODULE_PATH,
        job_variables={"env": _job_env(settings)},
    )


def deploy(settings: Settings, work_pool: str | None = None) -> UUID:
    """Create the process work pool if missing and register (or update) the deployment on it."""
    from prefect.client.orchestration import get_client
    from prefect.client.schemas.actions import WorkPoolCreate
    from prefect.exceptions import ObjectNotFound

    pool = work_pool or settings.schedule.work_pool
    with get_client(sync_client=True) as client:
        try:
            client.read_work_pool(pool)
        except ObjectNotFound:
            client.create_work_pool(WorkPoolCreate(name=pool, type="process"))
    return monthly_deployment(settings).apply(work_pool_name=pool)


def serve(settings: Settings) -> None:  # pragma: no cover - blocks until stopped; see README
    """Serve the schedule from this process: it must keep running (a supervised service)."""
    s = settings.schedule
    os.environ.update(_job_env(settings))
    monthly_run.serve(
        name=s.deployment_name,
        schedule=cron_schedule(settings),
        description=DESCRIPTION,
        tags=["ledgerband"],
        limit=1,
    )
