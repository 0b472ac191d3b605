"""Ingest the optional verified incomes file (`verified_incomes.csv`, beside `customers.csv`) into raw.verified_incomes.

Incomes the bank's lending side documented (payslips, tax statements in credit and mortgage applications):
personal data, read into the warehouse and never published. The file is read the way the customer reference
file is: whole, every record or none. A file that cannot be read as a whole (not UTF-8, a record with the
wrong number of fields, a header that breaks the contract, no records) is refused with an ExtractError that
names the file, the line and the rule. A file that is not there is no error: the run records that it had
none and goes on (0 verified incomes).

A file is identified by its SHA-256: the same bytes are loaded once and read again by later runs. Every run
records in ops.verified_income_runs which load it read (or none); tasks/quality/verified.py then judges
its records for that run's period.
"""

from __future__ import annotations

from pathlib import Path

import duckdb
from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.errors import ExtractError
from ledgerband.tasks.core.task_policy import IO_RETRIES
from ledgerband.tasks.core.warehouse import open_warehouse, scalar, transaction
from ledgerband.tasks.ingest import loads
from ledgerband.tasks.ingest.extract_contract import VERIFIED_INCOME_COLUMNS, sha256_file
from ledgerband.tasks.ingest.extracts import _insert_records
from ledgerband.tasks.ingest.manifest import confined
from ledgerband.tasks.ingest.records import ArrowRowHandlerError, read_records
from ledgerband.tasks.quality.validate import extract_contract_decision

SUITE = "verified_incomes"
REFUSED = "the optional verified incomes file is refused as a whole (no verified income is read this run)"
HAS_RECORDS_RULE = "file_has_records"


def record_run(
    con: duckdb.DuckDBPyConnection, ctx: RunContext, load_id: str | None, path: Path | None, rows: int
) -> None:
    """Which verified incomes load this run reads (None: the run had no file); checked later."""
    con.execute(
        "insert or replace into ops.verified_income_runs "
        "(run_id, period, load_id, source_file, rows_in_file) values (?, ?, ?, ?, ?)",
        [ctx.run_id, str(ctx.period), load_id, str(path) if path else None, rows],
    )


def _refuse_unreadable(path: Path, header: list[str], malformed: list, engine: str) -> None:
    """Raise ExtractError when the header breaks the suite's table rules or a record cannot be split."""
    decision = extract_contract_decision(header, source=path, suite_name=SUITE, engine=engine)
    if not decision.passed:
        raise ExtractError(f"{decision.reason}; {REFUSED}")
    if malformed:
        line, _, reason, rule = malformed[0]
        raise ExtractError(
            f"{path}: line {line} {reason} (rule {rule}; {len(malformed)} malformed record(s) in all); {REFUSED}"
        )


def load_verified_incomes(
    con: duckdb.DuckDBPyConnection, ctx: RunContext, path: Path | None = None
) -> loads.LoadResult:
    """Load the verified incomes file into raw.verified_incomes, or note that the run has none.

    Raises:
        ExtractError: the file cannot be read as a whole (names the file, the line and the rule).
    """
    path = Path(path) if path is not None else ctx.verified_incomes_file
    if not path.exists():
        with transaction(con):
            record_run(con, ctx, None, None, 0)
        return loads.LoadResult(
            "",
            str(path),
            None,
            loads.ABSENT,
            notes=[
                f"no {path.name} in the landing folder: 0 verified incomes this run (the file is optional)"
            ],
        )
    if not path.is_file():
        raise ExtractError(f"{path}: is not a file; {REFUSED}")
    confined(path.parent, path)  # the landing folder holds it; a link out of it is refused
    sha = sha256_file(path)
    accepted = loads.accepted_load(con, sha, loads.VERIFIED_INCOMES)
    if accepted:
        rows = int(scalar(con, "select count(*) from raw.verified_incomes where load_id = ?", [accepted]))
        with transaction(con):
            loads.seen_again(con, accepted)
            record_run(con, ctx, accepted, path, rows)
        return loads.LoadResult(
            accepted,
            str(path),
            None,
            loads.SKIPPED,
            rows,
            rows,
            notes=["same verified incomes file already loaded; read again for this run's period"],
        )
    try:
        records = read_records(path)
    except ArrowRowHandlerError:  # a short record that is not UTF-8: Python's reader names it below
        records = read_records(path, parser="python")
    _refuse_unreadable(path, records.header, records.malformed, ctx.settings.quality.engine)
    rows = records.table.num_rows
    if rows == 0:
        raise ExtractError(
            f"{path}: rule {HAS_RECORDS_RULE}: no data records after line 1 (header); send the file with "
            f"its records, or no file at all when there are none; {REFUSED}"
        )
    load_id = loads.new_load_id()
    with transaction(con):
        loads.forget_unaccepted(con, sha, loads.VERIFIED_INCOMES)
        _insert_records(con, "raw.verified_incomes", records.table, VERIFIED_INCOME_COLUMNS, load_id, path)
        loads.register(
            con,
            loads.NewLoad(
                load_id,
                loads.VERIFIED_INCOMES,
                str(path),
                sha,
                ctx.run_id,
                rows_in_file=rows,
                rows_loaded=rows,
            ),
            status=loads.ACCEPTED,
        )
        record_run(con, ctx, load_id, path, rows)
    return loads.LoadResult(load_id, str(path), None, loads.LOADED, rows, rows)


@task(
    name="ingest-verified-incomes",
    task_run_name="ingest-verified-incomes-{ctx.period}",
    cache_policy=NO_CACHE,
    **IO_RETRIES,
)
def ingest_verified_incomes_task(ctx: RunContext) -> loads.LoadResult:
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        return load_verified_incomes(con, ctx)
