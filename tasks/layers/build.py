"""Features: build the staging, intermediate and feature layers from the SQL files, in dependency order."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import duckdb
from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks.core.cluster import on_cluster
from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.errors import LedgerbandError
from ledgerband.tasks.core.warehouse import build_layers, open_warehouse
from ledgerband.tasks.ingest import loads
from ledgerband.tasks.layers.buckets import bucket_count, build_per_customer, run_here
from ledgerband.tasks.layers.business_calendar import write_business_calendar, write_pay_frequencies
from ledgerband.tasks.layers.transactions import TABLE as TRANSACTIONS
from ledgerband.tasks.layers.transactions import refresh_transactions


@dataclass(frozen=True)
class FeatureBuild:
    """Row counts of every table the layers built (the grain is a rule of the feature suite)."""

    row_counts: dict[str, int]
    staged: str = "rebuilt"  # what staging.transactions needed: "appended N", "unchanged" or "rebuilt: <why>"
    buckets: int = 1  # per-customer files built on this many buckets of customers
    slowest_bucket_seconds: float | None = None


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
    """Rebuild the reference tables from settings, then every layer table for the run's window.

    staging.transactions gets the new loads appended, or is rebuilt when the history changed
    (ledgerband.tasks.layers.transactions). The files built for all customers at once run in the warehouse. The
    per-customer files do too when the bank fits one bucket (scale.bucket_customers) and the runner is
    local; else they run per bucket (ledgerband.tasks.layers.buckets), one after another or on the run's Dask
    cluster.
    """
    check_window_loaded(con, ctx)
    write_pay_frequencies(con, ctx.settings)
    write_business_calendar(con, ctx.load_window, ctx.settings.payroll)
    params, scale = ctx.layer_params(), ctx.settings.scale
    staged = refresh_transactions(con)
    counts = build_layers(con, params, per_customer=False, kept=frozenset({TRANSACTIONS}))
    n = bucket_count(con, scale)
    if scale.runner == "local" and n == 1:
        counts |= build_layers(con, params, per_customer=True)
        return FeatureBuild(counts, staged=staged)
    root = Path(scale.shared_folder) if scale.shared_folder else ctx.settings.home / "buckets"
    mapper = on_cluster if scale.runner == "dask" else run_here
    built, results = build_per_customer(con, params, scale, root, ctx.run_id, n, mapper)
    slowest = max(r.seconds for r in results)
    return FeatureBuild(counts | built, staged=staged, buckets=n, slowest_bucket_seconds=slowest)


@task(name="build-features", task_run_name="build-features-{ctx.period}", cache_policy=NO_CACHE)
def build_features_task(ctx: RunContext) -> FeatureBuild:
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        return build_features(con, ctx)
