"""Features: build the staging, intermediate and feature layers from the SQL files, in dependency order."""

from __future__ import annotations

from dataclasses import dataclass

import duckdb
from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks import loads
from ledgerband.tasks.business_calendar import write_business_calendar, write_pay_frequencies
from ledgerband.tasks.context import RunContext
from ledgerband.tasks.errors import LedgerbandError
from ledgerband.tasks.warehouse import build_layers, open_warehouse


@dataclass(frozen=True)
class FeatureBuild:
    """Row counts of every table the layers built (the grain is a rule of the feature suite)."""

    row_counts: dict[str, int]


def check_window_loaded(con: duckdb.DuckDBPyConnection, ctx: RunContext) -> None:
    """Refuse to build features over a window with a month that has no accepted extract."""
    accepted = loads.accepted_periods(con)
    missing = [str(p) for p in ctx.load_window if p not in accepted]
    if missing:
        raise LedgerbandError(
            f"the run's months {ctx.load_window} have no accepted extract for {', '.join(missing)}; "
            "put those extracts and manifests in the landing folder and run again "
            "(or set features.window_months / payroll.lookback_months lower)"
        )
    if not loads.has_accepted_customers(con):
        raise LedgerbandError("no customer reference file has been loaded")


def build_features(con: duckdb.DuckDBPyConnection, ctx: RunContext) -> FeatureBuild:
    """Rebuild the reference tables from settings, then every layer table for the run's window."""
    check_window_loaded(con, ctx)
    write_pay_frequencies(con, ctx.settings)
    write_business_calendar(con, ctx.load_window, ctx.settings.payroll)
    return FeatureBuild(build_layers(con, ctx.layer_params()))


@task(name="build-features", task_run_name="build-features-{ctx.period}", cache_policy=NO_CACHE)
def build_features_task(ctx: RunContext) -> FeatureBuild:
    with open_warehouse(ctx.warehouse) as con:
        return build_features(con, ctx)
