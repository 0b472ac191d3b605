"""Publish: a new snapshot of the band tables, switched in atomically, plus a reader copy.

Inside one transaction the snapshot's rows are written, checked (one row per customer, every
customer banded, summary totals equal to the band rows) and made current. Any error rolls the whole
thing back and the previous snapshot stays current. Readers never open the working warehouse (DuckDB
lets no other process open a file one process writes): they open a separate published file, rebuilt
beside the old one and moved over it in one rename.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

import duckdb
from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks.bands import write_band_table
from ledgerband.tasks.context import RunContext
from ledgerband.tasks.errors import LedgerbandError
from ledgerband.tasks.retry import IO_RETRIES
from ledgerband.tasks.train import TrainSummary
from ledgerband.tasks.warehouse import open_warehouse, scalar, sql_model, transaction

READER_TABLES = {
    "income_bands": "select * from published.income_bands",
    "band_summary": "select * from published.band_summary",
    "income_band_scheme": "select * from ref.income_bands",
    "snapshots": "select * from published.snapshots",
    "decisions": "select * from published.decisions",
}


@dataclass(frozen=True)
class PublishResult:
    run_id: str
    customers: int
    published_at: str
    is_current: bool  # false for a month older than the current snapshot (a backfill)


def insert_from_file(con: duckdb.DuckDBPyConnection, table: str, name: str, params: dict) -> None:
    """Append the rows of `warehouse/sql/published/<name>.sql` to `table` (parameters bound)."""
    model = sql_model("published", name)
    con.execute(f"insert into {table} by name\n{model.query}", model.params(params))


def publish_snapshot(con: duckdb.DuckDBPyConnection, ctx: RunContext, model_version: str) -> PublishResult:
    """Write a new snapshot and switch to it — unless it is for a month older than the current snapshot's:
    a backfill adds a historical snapshot and never moves readers back in time. Returns its row counts."""
    settings, run_id, period = ctx.settings, ctx.run_id, str(ctx.period)
    published_at = datetime.now()
    params = {
        "run_id": run_id,
        "period": period,
        "model_version": model_version,
        "published_at": published_at,
    }
    with transaction(con):
        write_band_table(con, settings.bands.edges, settings.bands.currency)
        for table in ("income_bands_history", "band_summary_history", "snapshots"):
            con.execute(f"delete from published.{table} where run_id = ?", [run_id])
        insert_from_file(con, "published.income_bands_history", "income_bands", params)
        insert_from_file(con, "published.band_summary_history", "band_summary", params)
        band_rows, distinct_customers = con.execute(
            "select count(*)::bigint, count(distinct customer_id)::bigint "
            "from published.income_bands_history where run_id = ?",
            [run_id],
        ).fetchall()[0]
        customers = con.execute("select count(*)::bigint from features.customer").fetchall()[0][0]
        summary_total = con.execute(
            "select coalesce(sum(customer_count), 0)::bigint from published.band_summary_history where run_id = ?",
            [run_id],
        ).fetchall()[0][0]
        if not (band_rows == distinct_customers == customers == summary_total):
            raise LedgerbandError(
                f"snapshot check failed: {band_rows} band rows, {distinct_customers} distinct customers, "
                f"{customers} customers in features.customer, {summary_total} in the summary; nothing published"
            )
        newest = scalar(con, "select max(period) from published.snapshots where is_current")
        is_current = newest is None or period >= newest  # YYYY-MM sorts as time does
        if is_current:
            con.execute("update published.snapshots set is_current = false where is_current")
        con.execute(
            "insert into published.snapshots values (?, ?, ?, ?, ?, ?, ?)",
            [
                run_id,
                period,
                model_version,
                json.dumps(list(settings.bands.edges)),
                band_rows,
                is_current,
                published_at,
            ],
        )
    return PublishResult(run_id, int(band_rows), published_at.isoformat(timespec="seconds"), is_current)


def export_reader_copy(con: duckdb.DuckDBPyConnection, target: Path) -> Path:
    """Rebuild the readers' DuckDB file beside the old one, then move it over in one rename."""
    target.parent.mkdir(parents=True, exist_ok=True)
    tmp = target.with_name(target.name + ".incoming")
    tmp.unlink(missing_ok=True)
    con.execute(f"attach '{_sql_path(tmp)}' as reader_copy")
    try:
        for name, query in READER_TABLES.items():
            con.execute(f"create table reader_copy.{name} as {query}")
    finally:
        con.execute("detach reader_copy")
    os.replace(tmp, target)
    return target


def _sql_path(path: Path) -> str:
    return str(path).replace("'", "''")


@task(
    name="publish-snapshot",
    task_run_name="publish-snapshot-{ctx.period}",
    cache_policy=NO_CACHE,
    **IO_RETRIES,
)
def publish_task(ctx: RunContext, train: TrainSummary) -> PublishResult:
    with open_warehouse(ctx.warehouse) as con:
        return publish_snapshot(con, ctx, train.model_version)


@task(
    name="refresh-reader-copy",
    task_run_name="refresh-reader-copy-{ctx.period}",
    cache_policy=NO_CACHE,
    **IO_RETRIES,
)
def refresh_reader_copy_task(ctx: RunContext) -> Path:
    """After every run that reached a decision: readers see the current snapshot and every decision,
    including a month that was withheld or stopped."""
    with open_warehouse(ctx.warehouse) as con:
        return export_reader_copy(con, ctx.settings.published_path)
