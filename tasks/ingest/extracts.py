"""Ingest: take the window's ledger extracts and the customer file into raw tables, with lineage.

A file is identified by the SHA-256 of its bytes. A file already accepted is skipped, so reruns load
nothing twice. Every data record of a file ends up either in `raw.*` or, when it cannot even be split
into fields, in `quarantine.ledger_lines` with its line number and text. The manifest's row count and
amount totals are reconciled (a quality-gate check) before anything downstream sees the rows.
"""

from __future__ import annotations

from datetime import datetime
from decimal import Decimal
from pathlib import Path

import duckdb
import pyarrow as pa
from prefect import task
from prefect.cache_policies import NO_CACHE

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.errors import ExtractError
from ledgerband.tasks.core.queries import run_query
from ledgerband.tasks.core.task_policy import IO_RETRIES
from ledgerband.tasks.core.warehouse import open_warehouse, transaction
from ledgerband.tasks.gates import enforce
from ledgerband.tasks.gates.reconciliation import FileCounts, reconcile
from ledgerband.tasks.ingest import loads
from ledgerband.tasks.ingest.extract_contract import CUSTOMER_COLUMNS, LEDGER_COLUMNS, sha256_file
from ledgerband.tasks.ingest.manifest import Manifest, confined, manifests_to_load, read_manifest
from ledgerband.tasks.ingest.records import ArrowRowHandlerError, RecordStream, read_records, stream_records
from ledgerband.tasks.ops.faults import checkpoint
from ledgerband.tasks.quality.validate import extract_contract_decision


def _insert_records(
    con: duckdb.DuckDBPyConnection,
    target: str,
    records: pa.Table | pa.RecordBatchReader,
    columns: tuple[str, ...],
    load_id: str,
    path: Path,
) -> None:
    con.register("incoming_records", records)
    cols = ", ".join(columns)
    # Every record carries its source_line, so the rows need not be stored in the file's order. Kept in
    # order, the stream's blocks end in partly filled row groups that the next checkpoint rewrites: at
    # 100k customers a month's 3.3M records took 3.3 s to insert and 2.4 s more to checkpoint; in any
    # order they fill whole row groups, and the checkpoint has nothing to rewrite.
    [(kept,)] = con.execute("select current_setting('preserve_insertion_order')").fetchall()
    con.execute("set preserve_insertion_order = false")
    try:
        con.execute(
            f"insert into {target} (load_id, source_file, source_line, {cols}) "
            f"select ?, ?, source_line, {cols} from incoming_records",
            [load_id, str(path)],
        )
    finally:
        con.execute("set preserve_insertion_order = true" if kept else "set preserve_insertion_order = false")
    con.unregister(
        "incoming_records"
    )  # (after a failed insert the name stays; the next register replaces it)


SLOW_READ_NOTE = (
    "read with Python's csv module: a record has the wrong number of fields and bytes that are not UTF-8, "
    "which Arrow's reader cannot hand over"
)


def _stream_ledger(
    con: duckdb.DuckDBPyConnection, records: RecordStream, load_id: str, path: Path
) -> tuple[RecordStream, bool]:
    """Stream the extract into raw.ledger_lines (inside the caller's transaction); the stream, finished, and
    whether the file had to be read again by Python's csv module (ArrowRowHandlerError): the rows Arrow
    inserted before it stopped are deleted and the whole file is read again, so no record is counted twice."""
    _insert_records(con, "raw.ledger_lines", records.reader(), LEDGER_COLUMNS, load_id, path)
    try:
        records.finish()
        return records, False
    except ArrowRowHandlerError:
        con.execute("delete from raw.ledger_lines where load_id = ?", [load_id])
    records = stream_records(path, parser="python")
    _insert_records(con, "raw.ledger_lines", records.reader(), LEDGER_COLUMNS, load_id, path)
    records.finish()
    return records, True


def _check_customer_header(path: Path, header: list[str]) -> None:
    missing = [c for c in CUSTOMER_COLUMNS if c not in header]
    unexpected = [c for c in header if c not in CUSTOMER_COLUMNS]
    if missing or unexpected:
        raise ExtractError(
            f"{path}: line 1 (header) does not match the contract: missing {missing or 'none'}, "
            f"unexpected {unexpected or 'none'}"
        )


def _check_size(path: Path, manifest: Manifest, max_field_length: int) -> None:
    """Refuse a file far larger than its manifest allows before reading it (it would only be read to fail).

    The most a record can take: every field at the longest allowed text, 4 bytes a character (UTF-8),
    quoted, plus separators; anything larger than row_count such records (and a header) is not this extract.
    """
    most_per_record = len(LEDGER_COLUMNS) * (4 * max_field_length + 3) + 2
    limit = (manifest.row_count + 1) * most_per_record + 64 * 1024
    size = path.stat().st_size
    if size > limit:
        raise ExtractError(
            f"{path}: {size:,} bytes, more than {manifest.row_count:,} records can take ({limit:,} bytes at most, "
            f"manifest {manifest.path.name}); refused before reading it"
        )


def load_extract(con: duckdb.DuckDBPyConnection, ctx: RunContext, manifest: Manifest) -> loads.LoadResult:
    """Load one ledger extract into raw.ledger_lines and reconcile it with its manifest.

    Raises:
        ExtractError: the file does not match its manifest's checksum, or replaces an accepted file.
        GateStopped: the header breaks the contract, or row count or totals disagree with the manifest.
    """
    path = manifest.extract_path
    _check_size(path, manifest, ctx.settings.quality.max_field_length)
    sha = sha256_file(path)
    if sha != manifest.sha256:
        raise ExtractError(
            f"{path}: SHA-256 {sha} differs from {manifest.sha256} in manifest {manifest.path.name}; "
            "the file was changed or truncated after the manifest was written"
        )
    accepted = loads.accepted_load(con, sha, loads.LEDGER)
    if accepted:
        loads.seen_again(con, accepted)
        return loads.LoadResult(
            accepted,
            str(path),
            str(manifest.period),
            loads.SKIPPED,
            notes=[f"already accepted as load {accepted}; not loaded again"],
        )
    clash = loads.accepted_with_same_name(con, manifest.period, path.name)
    if clash:
        raise ExtractError(
            f"{path}: period {manifest.period} already has an accepted {path.name} (load {clash}) with other "
            f"content; an accepted extract is replaced only on purpose: `ledgerband restate --period "
            f"{manifest.period} --reason ...` (or ask the sender for a new file name)"
        )
    records = stream_records(path)
    enforce(
        con,
        ctx,
        extract_contract_decision(records.header, source=path, engine=ctx.settings.quality.engine),
    )
    load_id = loads.new_load_id()
    now = datetime.now()
    with transaction(con):
        loads.forget_unaccepted(con, sha, loads.LEDGER)
        # The file streams into the table block by block; its malformed records are known at the end.
        records, read_again = _stream_ledger(con, records, load_id, path)
        if records.rows + len(records.malformed) == 0:
            raise ExtractError(
                f"{path}: rule extract_has_records: no data records after line 1 (header); a month's ledger "
                "extract always holds postings, so an empty one is a failed export (manifest "
                f"{manifest.path.name} says {manifest.row_count})"
            )
        checkpoint("mid_load")
        for line, text, reason, rule in records.malformed:
            con.execute(
                "insert into quarantine.ledger_lines values (?, ?, ?, [?], ?, ?, ?)",
                [load_id, str(path), line, rule, f"line {line}: {rule} ({reason})", text, now],
            )
        credit, debit, unreadable = run_query(con, "ingest", "load_totals", load_id=load_id).fetchall()[0]
        counts = FileCounts(
            rows_in_file=records.rows + len(records.malformed),
            credit_total=Decimal(credit),
            debit_total=Decimal(debit),
            unreadable=int(unreadable) + len(records.malformed),
        )
        decision = reconcile(manifest, counts)
        notes = list(decision.figures["notes"]) + ([SLOW_READ_NOTE] if read_again else [])
        loads.register(
            con,
            loads.NewLoad(
                load_id=load_id,
                dataset=loads.LEDGER,
                source_file=str(path),
                sha256=sha,
                run_id=ctx.run_id,
                rows_in_file=counts.rows_in_file,
                rows_loaded=records.rows,
                rows_quarantined=len(records.malformed),
                period=manifest.period,
                manifest_row_count=manifest.row_count,
                credit_total=counts.credit_total,
                debit_total=counts.debit_total,
            ),
            status=loads.LOADED if decision.passed else loads.REJECTED,
            reason="; ".join(decision.figures["problems"] + notes) or None,
        )
    enforce(con, ctx, decision)
    return loads.LoadResult(
        load_id,
        str(path),
        str(manifest.period),
        loads.LOADED,
        counts.rows_in_file,
        records.rows,
        len(records.malformed),
        notes,
    )


def load_customers(con: duckdb.DuckDBPyConnection, ctx: RunContext, path: Path) -> loads.LoadResult:
    """Load the customer reference file into raw.customers (skipped when the same bytes are accepted)."""
    if not path.is_file():
        raise ExtractError(f"customer reference file not found: {path}")
    confined(path.parent, path)  # the landing folder holds it; a link out of it is refused
    sha = sha256_file(path)
    accepted = loads.accepted_load(con, sha, loads.CUSTOMERS)
    if accepted:
        loads.seen_again(con, accepted)
        return loads.LoadResult(
            accepted,
            str(path),
            None,
            loads.SKIPPED,
            notes=["same customer file already loaded; it is current again"],
        )
    try:
        records = read_records(path)
    except ArrowRowHandlerError:  # a short record that is not UTF-8: Python's reader names it below
        records = read_records(path, parser="python")
    _check_customer_header(path, records.header)
    if records.malformed:
        line, _, reason, _ = records.malformed[0]
        raise ExtractError(
            f"{path}: line {line} {reason} ({len(records.malformed)} malformed record(s) in all)"
        )
    load_id = loads.new_load_id()
    rows = records.table.num_rows
    with transaction(con):
        loads.forget_unaccepted(con, sha, loads.CUSTOMERS)
        _insert_records(con, "raw.customers", records.table, CUSTOMER_COLUMNS, load_id, path)
        loads.register(
            con,
            loads.NewLoad(
                load_id, loads.CUSTOMERS, str(path), sha, ctx.run_id, rows_in_file=rows, rows_loaded=rows
            ),
            status=loads.ACCEPTED,
        )
    return loads.LoadResult(load_id, str(path), None, loads.LOADED, rows, rows)


@task(name="find-extracts", task_run_name="find-extracts-{ctx.period}", cache_policy=NO_CACHE, **IO_RETRIES)
def find_extracts_task(ctx: RunContext) -> list[Path]:
    """Manifests of every month the run needs that is not yet accepted (a landing folder may be cleaned
    once its month is accepted)."""
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        accepted = loads.accepted_periods(con)
    return manifests_to_load(
        ctx.landing_dir, ctx.load_window, accepted, ctx.settings.quality.expected_sources
    )


@task(name="ingest-extract", task_run_name="ingest-{manifest_path.name}", cache_policy=NO_CACHE, **IO_RETRIES)
def ingest_extract_task(ctx: RunContext, manifest_path: Path) -> loads.LoadResult:
    """Load one extract named by its manifest (one file = one retryable unit)."""
    manifest = read_manifest(Path(manifest_path))
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        return load_extract(con, ctx, manifest)


@task(
    name="ingest-customers",
    task_run_name="ingest-customers-{ctx.period}",
    cache_policy=NO_CACHE,
    **IO_RETRIES,
)
def ingest_customers_task(ctx: RunContext) -> loads.LoadResult:
    with open_warehouse(ctx.warehouse, ctx.settings.scale) as con:
        return load_customers(con, ctx, ctx.customers_file)
