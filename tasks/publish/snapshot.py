"""Publish: a new snapshot of the band tables, switched in atomically, plus a reader copy.

Inside one transaction the snapshot's rows are written, checked (one row per customer, every
customer banded, summary totals equal to the band rows) and made current. Any error rolls the whole
thing back and the previous snapshot stays current. Readers never open the working warehouse (DuckDB
lets no other process open a file one process writes): they open a separate published file, rebuilt
beside the old one and moved over it in one rename.
"""

from __future__ import annotations

import contextlib
import json
import os
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path

import duckdb
from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.errors import LedgerbandError, PublishWriteError
from ledgerband.tasks.core.task_policy import IO_RETRIES
from ledgerband.tasks.core.warehouse import open_warehouse, scalar, sql_literal, sql_model, transaction
from ledgerband.tasks.modeling.bands import write_band_table
from ledgerband.tasks.modeling.train import TrainSummary
from ledgerband.tasks.ops.faults import checkpoint
from ledgerband.tasks.publish.readers_contract import HISTORY, apply_comments

# Readers never see a suppressed cell's count.
_SUPPRESS = "h.* replace (case when h.suppressed then null else h.customer_count end as customer_count)"
_PUBLISHED = "inner join published.snapshots as s using (run_id)"
READER_TABLES = {
    "income_bands": "select * from published.income_bands",
    "band_summary": f"select {_SUPPRESS} from published.band_summary as h",
    "band_movers": f"select {_SUPPRESS} from published.band_movers as h",
    "income_band_scheme": "select * from ref.income_bands",
    "snapshots": "select * from published.snapshots",
    "decisions": "select * from published.decisions",
    "income_bands_history": f"select h.* from published.income_bands_history as h {_PUBLISHED}",
    "band_summary_history": f"select {_SUPPRESS} from published.band_summary_history as h {_PUBLISHED}",
    "band_movers_history": f"select {_SUPPRESS} from published.band_movers_history as h {_PUBLISHED}",
}
# Tables delivered as Parquet by period (what a BI tool reads), from the same reader queries.
PARQUET_TABLES = {current: history for history, current in HISTORY.items()}


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
        "currency": settings.bands.currency,
        "min_cell_customers": settings.readers.min_cell_customers,
    }
    with transaction(con):
        write_band_table(con, settings.bands.edges, settings.bands.currency)
        for table in (*HISTORY_TABLES, "snapshots"):
            con.execute(f"delete from published.{table} where run_id = ?", [run_id])
        insert_from_file(con, "published.income_bands_history", "income_bands", params)
        insert_from_file(con, "published.band_summary_history", "band_summary", params)
        insert_from_file(con, "published.band_movers_history", "band_movers", params)
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
        replace_identical_crashed_snapshots(con, run_id, period)
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


HISTORY_TABLES = tuple(HISTORY)  # the readers' contract names them once
# Columns that name the run (or its model) that wrote a row, or when: not part of a snapshot's content.
RUN_NAMING_COLUMNS = frozenset({"run_id", "model_version", "published_at"})


def replace_identical_crashed_snapshots(
    con: duckdb.DuckDBPyConnection, run_id: str, period: str
) -> list[str]:
    """Remove the month's snapshots written by runs that crashed after their publish committed, when the
    snapshot `run_id` is writing holds the same rows; returns their run ids.

    A run killed after its publish transaction committed left a whole snapshot but never finished (no
    report, maybe no readers' copy). Its rerun computes the same answer; keeping both would leave the
    month twice in every history table, which no clean run produces. A crashed run's snapshot that
    differs (new files arrived, settings changed) is a different answer and stays, as any rerun's does.
    The crashed run's decisions stay in published.decisions: they are its record. Called inside the
    publish transaction, after the new snapshot's rows are written.
    """
    from ledgerband.tasks.ops.runlog import CRASHED

    crashed = [
        r
        for (r,) in con.execute(
            "select s.run_id from published.snapshots as s inner join ops.runs as r using (run_id) "
            "where s.period = ? and r.status = ? and s.run_id <> ?",
            [period, CRASHED, run_id],
        ).fetchall()
    ]
    replaced = [r for r in crashed if _same_snapshot(con, r, run_id)]
    for old in replaced:
        for table in (*HISTORY_TABLES, "snapshots"):
            con.execute(f"delete from published.{table} where run_id = ?", [old])
        con.execute(
            "update ops.runs set error = coalesce(error || '; ', '') || ? where run_id = ?",
            [
                f"its snapshot, committed before it ended, held the same rows as run {run_id}'s and was replaced by it",
                old,
            ],
        )
    return replaced


def _same_snapshot(con: duckdb.DuckDBPyConnection, a: str, b: str) -> bool:
    """Do runs `a` and `b` hold the same rows in every history table (run-naming columns aside)?"""
    for table in HISTORY_TABLES:
        # Column names read from the catalogue, never from input.
        columns = ", ".join(
            f'"{c}"'
            for (c,) in con.execute(
                "select column_name from information_schema.columns "
                "where table_schema = 'published' and table_name = ? order by ordinal_position",
                [table],
            ).fetchall()
            if c not in RUN_NAMING_COLUMNS
        )
        differing = con.execute(
            f"select count(*) from ("
            f"(select {columns} from published.{table} where run_id = $a "
            f"except all select {columns} from published.{table} where run_id = $b) "
            f"union all (select {columns} from published.{table} where run_id = $b "
            f"except all select {columns} from published.{table} where run_id = $a))",
            {"a": a, "b": b},
        ).fetchall()[0][0]
        if differing:
            return False
    return True


def export_reader_copy(con: duckdb.DuckDBPyConnection, target: Path) -> Path:
    """Rebuild the readers' DuckDB file beside the old one, then move it over in one rename."""
    tmp = target.with_name(target.name + ".incoming")
    leftovers = (tmp, tmp.with_name(tmp.name + ".wal"))
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        for path in leftovers:
            if path.exists():
                path.unlink()
        con.execute(f"attach {sql_literal(tmp)} as reader_copy")
        try:
            for name, query in READER_TABLES.items():
                con.execute(f"create table reader_copy.{name} as {query}")
            apply_comments(con, "reader_copy")
        finally:
            con.execute("detach reader_copy")
        checkpoint("mid_publish")
        os.replace(tmp, target)
    except (OSError, duckdb.Error) as exc:
        # Disk full, a read-only folder: the half-written copy goes, the readers' copy stays as it was.
        for path in leftovers:
            with contextlib.suppress(OSError):  # a read-only folder refuses even this; nothing was written
                if path.exists():
                    path.unlink()
        raise PublishWriteError(
            f"could not write the readers' copy {target}: {exc}; the previous copy is unchanged and readers "
            "still see the snapshot it holds"
        ) from exc
    return target


def write_parquet(con: duckdb.DuckDBPyConnection, root: Path, period: str) -> dict[str, int]:
    """Write the period's published snapshot of each reader table as Parquet, hive-partitioned by period.

    Each table's partition is written to a temporary folder, read back and checked against the warehouse
    (rows and the sum of its amount or count), then renamed into place; a reader never sees half a
    partition. Returns rows per table.
    """
    [(run_id,)] = con.execute(
        "select run_id from published.snapshots where period = ? order by published_at desc limit 1", [period]
    ).fetchall()
    rows = {}
    for name, history in PARQUET_TABLES.items():
        try:
            rows[name] = _write_parquet_table(con, root, period, run_id, name, history)
        except (OSError, duckdb.Error) as exc:
            raise PublishWriteError(
                f"could not write Parquet {name} for {period} under {root}: {exc}; that table's earlier "
                "partition for the month (if any) is unchanged"
            ) from exc
    return rows


def _write_parquet_table(con, root: Path, period: str, run_id: str, name: str, history: str) -> int:
    import shutil
    import uuid

    # The snapshot's rows in a temporary table (run id bound, never written into the SQL text).
    con.execute(
        f"create or replace temp table parquet_rows as select * from ({READER_TABLES[history]}) where run_id = ?",
        [run_id],
    )
    measure = "annual_income_estimate" if name == "income_bands" else "customer_count"
    expected = con.execute(f"select count(*), sum({measure}) from parquet_rows").fetchall()[0]
    staging = root / f".incoming-{uuid.uuid4().hex[:8]}"
    staging.mkdir(parents=True)
    try:
        con.execute(
            f"copy parquet_rows to {sql_literal(staging / name)} (format parquet, partition_by (period))"
        )
        part = staging / name / f"period={period}"
        got = (
            con.execute(
                f"select count(*), sum({measure}) from read_parquet({sql_literal(f'{part}/*.parquet')})"
            ).fetchall()[0]
            if part.exists()
            else (0, None)
        )
        if tuple(got) != tuple(expected):
            raise LedgerbandError(f"Parquet {name} for {period}: wrote {got}, the warehouse holds {expected}")
        final = root / name / f"period={period}"
        final.parent.mkdir(parents=True, exist_ok=True)
        old = final.with_name(final.name + ".old")
        shutil.rmtree(old, ignore_errors=True)
        if final.exists():
            final.rename(old)
        if part.exists():
            part.rename(final)
        shutil.rmtree(old, ignore_errors=True)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
        con.execute("drop table if exists parquet_rows")
    return int(expected[0])


@task(
    name="publish-snapshot",
    task_run_name="publish-snapshot-{ctx.period}",
    cache_policy=NO_CACHE,
    **IO_RETRIES,
)
def publish_task(ctx: RunContext, train: TrainSummary) -> PublishResult:
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        return publish_snapshot(con, ctx, train.model_version)


@task(name="write-parquet", task_run_name="write-parquet-{ctx.period}", cache_policy=NO_CACHE, **IO_RETRIES)
def parquet_task(ctx: RunContext) -> dict[str, int]:
    """The published month as Parquet by period (readers.parquet)."""
    if not ctx.settings.readers.parquet:
        return {}
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        return write_parquet(con, ctx.settings.parquet_dir, str(ctx.period))


@task(
    name="refresh-reader-copy",
    task_run_name="refresh-reader-copy-{ctx.period}",
    cache_policy=NO_CACHE,
    **IO_RETRIES,
)
def refresh_reader_copy_task(ctx: RunContext) -> Path:
    """After every run that reached a decision: readers see the current snapshot and every decision,
    including a month that was withheld or stopped."""
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        return export_reader_copy(con, ctx.settings.published_path)
