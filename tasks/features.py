"""Features: build the staging and feature layers from the SQL files in warehouse/sql/, in order."""

from __future__ import annotations

from pathlib import Path

import duckdb
from prefect import task
from prefect.cache_policies import NO_CACHE

from tasks.errors import LedgerbandError
from tasks.ingest import accepted_periods
from tasks.settings import Settings
from tasks.warehouse import Period, open_warehouse, run_sql_file

# Order matters: each file reads only what the ones before it built.
LAYERS: tuple[tuple[str, str], ...] = (
    ("staging", "transactions"),
    ("staging", "customers"),
    ("features", "salary_streams"),
    ("features", "customer_salary"),
    ("features", "customer"),
)


def window_params(period: str, settings: Settings) -> dict:
    window = Period.parse(period).window(settings.features.window_months)
    return {
        "window_start": window[0].start,
        "window_end": window[-1].end,
        "large_debit_threshold": settings.features.large_debit_threshold,
    }


def check_window_loaded(con: duckdb.DuckDBPyConnection, period: str, settings: Settings) -> None:
    """Refuse to build features over a window with a month that has no accepted extract."""
    window = [str(p) for p in Period.parse(period).window(settings.features.window_months)]
    loaded = accepted_periods(con)
    missing = [p for p in window if p not in loaded]
    if missing:
        raise LedgerbandError(
            f"feature window {window[0]}..{window[-1]} has no accepted extract for {', '.join(missing)}; "
            "put those extracts and manifests in the landing folder and run again "
            "(or set features.window_months lower)"
        )
    if not con.execute(
        "select count(*) from ops.loads where dataset = 'customers' and status = 'accepted'"
    ).fetchall()[0][0]:
        raise LedgerbandError("no customer reference file has been loaded")


def build_features(con: duckdb.DuckDBPyConnection, period: str, settings: Settings) -> dict:
    """Rebuild staging and features for the window ending at `period`; returns row counts per table."""
    check_window_loaded(con, period, settings)
    params = window_params(period, settings)
    counts = {}
    for layer, name in LAYERS:
        run_sql_file(con, layer, name, params)
        counts[f"{layer}.{name}"] = con.execute(f"select count(*)::bigint from {layer}.{name}").fetchall()[0][
            0
        ]
    return counts  # the grain (one row per customer) is a rule of expectations/customer_features.json


@task(name="build-features", cache_policy=NO_CACHE)
def build_features_task(warehouse: Path, period: str, settings: Settings) -> dict:
    with open_warehouse(warehouse) as con:
        return build_features(con, period, settings)
