"""ops.loads: the record of every file handed to the pipeline. This module is its only writer.

A load moves `loaded` → `accepted` (the quality gate passed) or `rejected`. A file is identified by the
SHA-256 of its bytes: one accepted load per file, so a rerun loads nothing twice.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass, field
from datetime import datetime
from decimal import Decimal

import duckdb

from ledgerband.tasks.core.period import Period
from ledgerband.tasks.core.queries import run_query
from ledgerband.tasks.core.warehouse import scalar

LOADED = "loaded"  # in raw.*, not yet through the quality gate
ACCEPTED = "accepted"  # passed the quality gate: staging reads it
REJECTED = "rejected"  # stopped by a check; kept for the record, never staged
RESTATED = "restated"  # replaced by a corrected file through `ledgerband restate`; kept, never staged
SKIPPED = "skipped"  # (load result only) the same bytes were accepted before
LEDGER = "ledger"
CUSTOMERS = "customers"
VERIFIED_INCOMES = "verified_incomes"
ABSENT = "absent"  # (load result only) an optional file that was not in the landing folder


@dataclass
class LoadResult:
    """What happened to one file; small enough to pass between tasks and store in ops.runs."""

    load_id: str
    source_file: str
    period: str | None
    status: str  # SKIPPED | LOADED | REJECTED | ABSENT (an optional file not handed in)
    rows_in_file: int = 0
    rows_loaded: int = 0
    rows_malformed: int = 0
    notes: list[str] = field(default_factory=list)

    @property
    def is_new_extract(self) -> bool:
        """A ledger extract loaded by this run, waiting for validation."""
        return self.status == LOADED and self.period is not None


def new_load_id() -> str:
    return datetime.now().strftime("%Y%m%dT%H%M%S") + "-" + uuid.uuid4().hex[:8]


def accepted_load(con: duckdb.DuckDBPyConnection, sha256: str, dataset: str) -> str | None:
    """The load that accepted these bytes before, if any."""
    return scalar(
        con,
        "select load_id from ops.loads where sha256 = ? and dataset = ? and status = ? order by loaded_at limit 1",
        [sha256, dataset, ACCEPTED],
    )


def accepted_with_same_name(con: duckdb.DuckDBPyConnection, period: Period, file_name: str) -> str | None:
    """An accepted extract of `period` with this file name (whatever its content)."""
    rows = run_query(
        con,
        "ingest",
        "accepted_with_same_name",
        dataset=LEDGER,
        status=ACCEPTED,
        period=str(period),
        file_name=file_name,
    ).fetchall()
    return rows[0][0] if rows else None


def seen_again(con: duckdb.DuckDBPyConnection, load_id: str) -> None:
    """A file handed in again is the latest one sent, even though its rows are not loaded twice."""
    con.execute("update ops.loads set last_seen_at = ? where load_id = ?", [datetime.now(), load_id])


def forget_unaccepted(con: duckdb.DuckDBPyConnection, sha256: str, dataset: str) -> None:
    """Drop what an earlier, unfinished or rejected attempt at the same bytes left, so a retry is clean."""
    ids = [
        r[0]
        for r in con.execute(
            "select load_id from ops.loads where sha256 = ? and dataset = ? and status <> ?",
            [sha256, dataset, ACCEPTED],
        ).fetchall()
    ]
    for load_id in ids:
        for table in (
            "raw.ledger_lines",
            "raw.customers",
            "raw.verified_incomes",
            "quarantine.ledger_lines",
            "quarantine.verified_incomes",
        ):
            con.execute(f"delete from {table} where load_id = ?", [load_id])
        con.execute("delete from ops.loads where load_id = ?", [load_id])


@dataclass(frozen=True)
class NewLoad:
    """The facts of a file just written to raw.* (one row of ops.loads)."""

    load_id: str
    dataset: str
    source_file: str
    sha256: str
    run_id: str
    rows_in_file: int
    rows_loaded: int
    rows_quarantined: int = 0
    period: Period | None = None
    manifest_row_count: int | None = None
    credit_total: Decimal | None = None
    debit_total: Decimal | None = None


def register(con: duckdb.DuckDBPyConnection, load: NewLoad, status: str, reason: str | None = None) -> None:
    """Write the load's row; a load that is not `loaded` is decided at once."""
    now = datetime.now()
    run_query(
        con,
        "ingest",
        "register_load",
        load_id=load.load_id,
        dataset=load.dataset,
        period=str(load.period) if load.period else None,
        source_file=load.source_file,
        sha256=load.sha256,
        manifest_row_count=load.manifest_row_count,
        rows_in_file=load.rows_in_file,
        rows_loaded=load.rows_loaded,
        rows_quarantined=load.rows_quarantined,
        credit_total=load.credit_total,
        debit_total=load.debit_total,
        status=status,
        reason=reason,
        run_id=load.run_id,
        loaded_at=now,
        decided_at=None if status == LOADED else now,
        last_seen_at=now,
    )


def set_quarantined(con: duckdb.DuckDBPyConnection, load_id: str, rows_quarantined: int) -> None:
    con.execute("update ops.loads set rows_quarantined = ? where load_id = ?", [rows_quarantined, load_id])


def settle(con: duckdb.DuckDBPyConnection, load_ids: list[str], accepted: bool, reason: str) -> None:
    """Accept the loads (quality gate passed) or reject them, adding the reason to their record."""
    now = datetime.now()
    for load_id in load_ids:
        con.execute(
            "update ops.loads set status = ?, reason = coalesce(reason || '; ', '') || ?, decided_at = ? "
            "where load_id = ?",
            [ACCEPTED if accepted else REJECTED, reason, now, load_id],
        )


def load_facts(con: duckdb.DuckDBPyConnection, load_id: str) -> tuple[str, Period, int, int] | None:
    """(source_file, period, rows_in_file, rows_quarantined) of a ledger load."""
    rows = con.execute(
        "select source_file, period, rows_in_file, rows_quarantined from ops.loads where load_id = ?",
        [load_id],
    ).fetchall()
    if not rows:
        return None
    source_file, period, rows_in_file, quarantined = rows[0]
    return source_file, Period.parse(period), int(rows_in_file), int(quarantined or 0)


def accepted_periods(con: duckdb.DuckDBPyConnection) -> set[Period]:
    rows = con.execute(
        "select distinct period from ops.loads where dataset = ? and status = ?", [LEDGER, ACCEPTED]
    ).fetchall()
    return {Period.parse(r[0]) for r in rows}


def has_accepted_customers(con: duckdb.DuckDBPyConnection) -> bool:
    return bool(
        scalar(con, "select count(*) from ops.loads where dataset = ? and status = ?", [CUSTOMERS, ACCEPTED])
    )


def accepted_ledger_loads(con: duckdb.DuckDBPyConnection) -> dict[str, tuple[datetime, int]]:
    """Each accepted ledger load: load_id -> (loaded_at, records quarantined now).

    What a table derived from accepted loads (staging.transactions, ops.accepted_txn_ids) compares with
    the loads it holds, to know whether it is still what its definition says.
    """
    rows = run_query(con, "ingest", "accepted_ledger_loads", dataset=LEDGER, status=ACCEPTED).fetchall()
    return {load_id: (loaded_at, int(quarantined)) for load_id, loaded_at, quarantined in rows}
