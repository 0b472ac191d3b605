"""Ingest: take a period's ledger extract(s) and the customer file into raw tables, with lineage.

A file is identified by the SHA-256 of its bytes. A file already accepted is skipped, so reruns load
nothing twice. Every data record of a file ends up either in `raw.*` or, when it cannot even be split
into fields, in `quarantine.ledger_lines` with its line number and text. The manifest's row count and
amount totals are reconciled before anything downstream sees the rows.
"""

from __future__ import annotations

import csv
import json
import re
import uuid
from dataclasses import asdict, dataclass, field
from datetime import datetime
from decimal import Decimal, InvalidOperation
from pathlib import Path

import duckdb
import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
from prefect import task
from prefect.cache_policies import NO_CACHE

from tasks.contract import CUSTOMER_COLUMNS, LEDGER_COLUMNS, sha256_file
from tasks.errors import ExtractError, GateStopped, LedgerbandError
from tasks.retry import IO_RETRIES
from tasks.warehouse import Period, open_warehouse, scalar, transaction

MANIFEST_FIELDS = ("period", "institution", "file", "sha256", "row_count", "credit_total", "debit_total")
_DECIMAL_TEXT = re.compile(r"^-?\d+(\.\d+)?$")


@dataclass(frozen=True)
class Manifest:
    path: Path
    period: str
    institution: str
    file: str
    sha256: str
    row_count: int
    credit_total: Decimal
    debit_total: Decimal

    @property
    def extract_path(self) -> Path:
        return self.path.parent / self.file


@dataclass
class LoadSummary:
    """What happened to one file; small enough to pass between tasks and store in ops.runs."""

    load_id: str
    source_file: str
    period: str | None
    status: str  # 'skipped' (already accepted) | 'loaded' | 'rejected'
    rows_in_file: int = 0
    rows_loaded: int = 0
    rows_malformed: int = 0
    notes: list[str] = field(default_factory=list)

    def to_dict(self) -> dict:
        return asdict(self)


def read_manifest(path: Path) -> Manifest:
    """Parse and check one control manifest; every problem names the manifest file."""
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ExtractError(f"manifest {path}: cannot be read as JSON ({exc})") from exc
    if not isinstance(data, dict):
        raise ExtractError(f"manifest {path}: expected a JSON object")
    missing = [k for k in MANIFEST_FIELDS if k not in data]
    if missing:
        raise ExtractError(f"manifest {path}: missing field(s) {', '.join(missing)}")
    if not isinstance(data["row_count"], int) or data["row_count"] < 0:
        raise ExtractError(
            f"manifest {path}: row_count must be a non-negative integer, got {data['row_count']!r}"
        )
    totals = {}
    for key in ("credit_total", "debit_total"):
        text = data[key]
        if not isinstance(text, str) or not _DECIMAL_TEXT.match(text):
            raise ExtractError(
                f'manifest {path}: {key} must be a decimal string like "1234.56", got {text!r}'
            )
        try:
            totals[key] = Decimal(text)
        except InvalidOperation as exc:  # pragma: no cover - regex already guards
            raise ExtractError(f"manifest {path}: {key} {text!r} is not a decimal") from exc
    if not re.fullmatch(r"[0-9a-f]{64}", str(data["sha256"]).lower()):
        raise ExtractError(f"manifest {path}: sha256 must be 64 hex digits")
    try:
        Period.parse(str(data["period"]))
    except LedgerbandError as exc:
        raise ExtractError(f"manifest {path}: field period: {exc}") from exc
    if Path(data["file"]).name != data["file"]:
        raise ExtractError(
            f"manifest {path}: file must be a bare file name beside the manifest, got {data['file']!r}"
        )
    return Manifest(
        path=path,
        period=str(data["period"]),
        institution=str(data["institution"]),
        file=data["file"],
        sha256=str(data["sha256"]).lower(),
        row_count=data["row_count"],
        credit_total=totals["credit_total"],
        debit_total=totals["debit_total"],
    )


def find_manifests(landing_dir: Path, period: str) -> list[Manifest]:
    """The manifests in `<landing_dir>/<period>/`, each checked to belong to that period."""
    folder = Path(landing_dir) / period
    if not folder.is_dir():
        raise ExtractError(f"no landing folder for period {period}: expected {folder}")
    manifests = [read_manifest(p) for p in sorted(folder.glob("*.manifest.json"))]
    if not manifests:
        raise ExtractError(
            f"no manifest (*.manifest.json) in {folder}: every extract needs its control manifest"
        )
    for m in manifests:
        if m.period != period:
            raise ExtractError(
                f"manifest {m.path}: says period {m.period}, but it lies in the folder for {period}"
            )
        if not m.extract_path.is_file():
            raise ExtractError(f"manifest {m.path}: names file {m.file}, which is not in {folder}")
    return manifests


def manifests_to_load(landing_dir: Path, periods: list[str], accepted_periods: set[str]) -> list[Path]:
    """Manifests of every period in `periods` that has a landing folder.

    A period whose folder is gone is fine once it has an accepted extract (landing folders are often
    cleaned after loading); otherwise its absence is an error naming the folder looked for.
    """
    paths: list[Path] = []
    for period in periods:
        if not (Path(landing_dir) / period).is_dir() and period in accepted_periods:
            continue
        paths.extend(m.path for m in find_manifests(landing_dir, period))
    return paths


def accepted_periods(con: duckdb.DuckDBPyConnection) -> set[str]:
    rows = con.execute(
        "select distinct period from ops.loads where dataset = 'ledger' and status = 'accepted'"
    )
    return {r[0] for r in rows.fetchall()}


@dataclass(frozen=True)
class Records:
    """A file's data records as text columns, with line numbers, plus records that could not be split."""

    table: pa.Table  # source_line + one string column per header field
    header: list[str]
    malformed: list[tuple[int, str, str]]  # (line, text, reason)


def read_records(path: Path) -> Records:
    """Read a CSV or Parquet file as text, keeping each record's line number (header = line 1).

    CSV is parsed single-threaded because only then does Arrow report the line number of a record
    with the wrong number of fields; such records are returned in `malformed`, never dropped.
    """
    if path.suffix.lower() == ".parquet":
        return _read_parquet(path)
    if path.suffix.lower() != ".csv":
        raise ExtractError(f"{path}: unsupported file type {path.suffix!r} (expected .csv or .parquet)")
    header = _csv_header(path)
    malformed: list[tuple[int, str, str]] = []

    def on_invalid(row: pacsv.InvalidRow) -> str:
        reason = f"has {row.actual_columns} fields, the header has {row.expected_columns}"
        malformed.append((int(row.number) if row.number is not None else -1, row.text, reason))
        return "skip"

    try:
        table = pacsv.read_csv(
            path,
            # One parser names the columns (ours, which allows a byte-order mark); Arrow skips the header.
            read_options=pacsv.ReadOptions(
                use_threads=False, block_size=1 << 24, column_names=header, skip_rows=1
            ),
            parse_options=pacsv.ParseOptions(invalid_row_handler=on_invalid),
            convert_options=pacsv.ConvertOptions(
                column_types={c: pa.string() for c in header},
                # Only an empty field is null (the contract); Arrow would also read "NA", "null", "nan" … as null.
                null_values=[""],
                strings_can_be_null=True,
                quoted_strings_can_be_null=True,
            ),
        )
    except pa.ArrowInvalid as exc:
        raise ExtractError(f"{path}: cannot be parsed as UTF-8 CSV ({exc})") from exc
    total = table.num_rows + len(malformed)
    bad_lines = np.array(sorted(m[0] for m in malformed), dtype=np.int64)
    # Lines 2..total+1 hold records; those not reported malformed are the table's rows, in order.
    lines = np.setdiff1d(np.arange(2, total + 2, dtype=np.int64), bad_lines, assume_unique=True)
    if len(lines) != table.num_rows:  # a quoted field spanning lines breaks the line arithmetic
        lines = np.arange(2, table.num_rows + 2, dtype=np.int64)
    table = table.add_column(0, "source_line", pa.array(lines))
    return Records(table=table, header=header, malformed=malformed)


def _csv_header(path: Path) -> list[str]:
    """Column names exactly as written (a byte-order mark is allowed; spaces are kept, so they show)."""
    try:
        with path.open("r", encoding="utf-8-sig", newline="") as f:
            header = next(csv.reader([f.readline()]), [])
    except UnicodeDecodeError as exc:
        raise ExtractError(f"{path}: line 1 (header) is not UTF-8 ({exc})") from exc
    if not header or header == [""]:
        raise ExtractError(f"{path}: empty file, expected a header row on line 1")
    dupes = sorted({h for h in header if header.count(h) > 1})
    if dupes:
        raise ExtractError(f"{path}: line 1 (header) repeats column(s) {', '.join(dupes)}")
    return header


def _read_parquet(path: Path) -> Records:
    try:
        table = pq.read_table(path)
    except (pa.ArrowInvalid, OSError) as exc:
        raise ExtractError(f"{path}: cannot be read as Parquet ({exc})") from exc
    cols = []
    for name in table.column_names:
        col = table[name]
        cols.append(col if pa.types.is_string(col.type) else col.cast(pa.string()))
    text = pa.table(cols, names=table.column_names)
    text = text.add_column(0, "source_line", pa.array(np.arange(1, text.num_rows + 1, dtype=np.int64)))
    # Parquet has no text lines: source_line is the record number (1-based).
    return Records(table=text, header=list(table.column_names), malformed=[])


def _check_header(path: Path, header: list[str], expected: tuple[str, ...], suite: str | None) -> None:
    if suite is not None:
        from tasks.validate import check_table_columns

        check_table_columns(suite, header, source=str(path))
        return
    missing = [c for c in expected if c not in header]
    unexpected = [c for c in header if c not in expected]
    if missing or unexpected:
        raise ExtractError(
            f"{path}: line 1 (header) does not match the contract: missing {missing or 'none'}, "
            f"unexpected {unexpected or 'none'}"
        )


def _insert_records(
    con: duckdb.DuckDBPyConnection,
    target: str,
    records: Records,
    columns: tuple[str, ...],
    load_id: str,
    path: Path,
) -> None:
    con.register("incoming_records", records.table)
    cols = ", ".join(columns)
    con.execute(
        f"insert into {target} (load_id, source_file, source_line, {cols}) "
        f"select ?, ?, source_line, {cols} from incoming_records",
        [load_id, str(path)],
    )
    con.unregister(
        "incoming_records"
    )  # (after a failed insert the name stays; the next register replaces it)


def _seen_again(con: duckdb.DuckDBPyConnection, load_id: str) -> None:
    """A file handed in again is the latest one sent, even though its rows are not loaded twice."""
    con.execute("update ops.loads set last_seen_at = ? where load_id = ?", [datetime.now(), load_id])


def _new_load_id() -> str:
    return datetime.now().strftime("%Y%m%dT%H%M%S") + "-" + uuid.uuid4().hex[:8]


def _forget_unaccepted(con: duckdb.DuckDBPyConnection, sha: str, dataset: str) -> None:
    """Drop what an earlier, unfinished or rejected attempt at the same bytes left, so a retry is clean."""
    ids = [
        r[0]
        for r in con.execute(
            "select load_id from ops.loads where sha256 = ? and dataset = ? and status <> 'accepted'",
            [sha, dataset],
        ).fetchall()
    ]
    for load_id in ids:
        for table in ("raw.ledger_lines", "raw.customers", "quarantine.ledger_lines"):
            con.execute(f"delete from {table} where load_id = ?", [load_id])
        con.execute("delete from ops.loads where load_id = ?", [load_id])


def load_extract(con: duckdb.DuckDBPyConnection, manifest: Manifest, run_id: str) -> LoadSummary:
    """Load one ledger extract into raw.ledger_lines and reconcile it with its manifest.

    Raises:
        ExtractError: the file does not match its manifest's checksum, or replaces an accepted file.
        GateStopped: row count or amount totals disagree with the manifest (quality gate).
    """
    path = manifest.extract_path
    sha = sha256_file(path)
    if sha != manifest.sha256:
        raise ExtractError(
            f"{path}: SHA-256 {sha} differs from {manifest.sha256} in manifest {manifest.path.name}; "
            "the file was changed or truncated after the manifest was written"
        )
    accepted = con.execute(
        "select load_id from ops.loads where sha256 = ? and dataset = 'ledger' and status = 'accepted'", [sha]
    ).fetchall()
    if accepted:
        _seen_again(con, accepted[0][0])
        return LoadSummary(
            accepted[0][0],
            str(path),
            manifest.period,
            "skipped",
            notes=[f"already accepted as load {accepted[0][0]}; not loaded again"],
        )
    clash = con.execute(
        "select load_id, sha256 from ops.loads where dataset = 'ledger' and status = 'accepted' "
        "and period = ? and parse_filename(source_file) = ?",
        [manifest.period, path.name],
    ).fetchall()
    if clash:
        raise ExtractError(
            f"{path}: period {manifest.period} already has an accepted {path.name} (load {clash[0][0]}) with other "
            "content; replacing an accepted extract is not supported — ask the sender for a new file name"
        )
    records = read_records(path)
    _check_header(path, records.header, LEDGER_COLUMNS, suite="ledger_lines")

    load_id = _new_load_id()
    now = datetime.now()
    with transaction(con):
        _forget_unaccepted(con, sha, "ledger")
        _insert_records(con, "raw.ledger_lines", records, LEDGER_COLUMNS, load_id, path)
        for line, text, reason in records.malformed:
            con.execute(
                "insert into quarantine.ledger_lines values (?, ?, ?, ['record_field_count'], ?, ?, ?)",
                [load_id, str(path), line, f"line {line} {reason}", text, now],
            )
        totals = con.execute(
            """
            select
                coalesce(sum(try_cast(amount as decimal(18, 2))) filter (where direction = 'CRDT'), 0),
                coalesce(sum(try_cast(amount as decimal(18, 2))) filter (where direction = 'DBIT'), 0),
                count(*) filter (where try_cast(amount as decimal(18, 2)) is null
                                 or direction is null or direction not in ('CRDT', 'DBIT'))
            from raw.ledger_lines where load_id = ?
            """,
            [load_id],
        ).fetchall()[0]
        credit, debit, unreadable = Decimal(totals[0]), Decimal(totals[1]), int(totals[2])
        rows_loaded = records.table.num_rows
        rows_in_file = rows_loaded + len(records.malformed)
        problems, notes = _reconcile(
            manifest, rows_in_file, credit, debit, unreadable + len(records.malformed)
        )
        status = "rejected" if problems else "loaded"
        con.execute(
            """
            insert into ops.loads (load_id, dataset, period, source_file, sha256, manifest_row_count, rows_in_file,
                rows_loaded, rows_quarantined, credit_total, debit_total, status, reason, run_id, loaded_at, decided_at,
                last_seen_at)
            values (?, 'ledger', ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)
            """,
            [
                load_id,
                manifest.period,
                str(path),
                sha,
                manifest.row_count,
                rows_in_file,
                rows_loaded,
                len(records.malformed),
                credit,
                debit,
                status,
                "; ".join(problems + notes) or None,
                run_id,
                now,
                now if problems else None,
                now,
            ],
        )
    if problems:
        raise GateStopped("quality", f"{path}: " + "; ".join(problems))
    return LoadSummary(
        load_id,
        str(path),
        manifest.period,
        "loaded",
        rows_in_file,
        rows_loaded,
        len(records.malformed),
        notes,
    )


def _reconcile(
    manifest: Manifest, rows_in_file: int, credit: Decimal, debit: Decimal, unreadable: int
) -> tuple[list[str], list[str]]:
    """Compare the file with its control totals. Returns (problems that stop the run, notes)."""
    problems, notes = [], []
    if rows_in_file != manifest.row_count:
        problems.append(
            f"rule manifest_row_count: file has {rows_in_file} data records, manifest {manifest.path.name} says "
            f"{manifest.row_count}"
        )
    if unreadable:
        # Records without a readable amount or direction cannot be summed; they are quarantined by
        # validation and bounded by the quarantine-share gate, so the totals cannot be checked exactly.
        notes.append(
            f"control totals not verifiable: {unreadable} record(s) lack a readable amount or direction"
        )
    else:
        for name, got, want in (
            ("credit_total", credit, manifest.credit_total),
            ("debit_total", debit, manifest.debit_total),
        ):
            if got != want:
                problems.append(
                    f"rule manifest_{name}: file sums to {got}, manifest {manifest.path.name} says {want}"
                )
    return problems, notes


def load_customers(con: duckdb.DuckDBPyConnection, path: Path, run_id: str) -> LoadSummary:
    """Load the customer reference file into raw.customers (skipped when the same bytes are accepted)."""
    if not path.is_file():
        raise ExtractError(f"customer reference file not found: {path}")
    sha = sha256_file(path)
    accepted = scalar(
        con,
        "select load_id from ops.loads where sha256 = ? and dataset = 'customers' and status = 'accepted'",
        [sha],
    )
    if accepted:
        _seen_again(con, accepted)
        return LoadSummary(
            accepted,
            str(path),
            None,
            "skipped",
            notes=["same customer file already loaded; it is current again"],
        )
    records = read_records(path)
    _check_header(path, records.header, CUSTOMER_COLUMNS, suite=None)
    if records.malformed:
        line, _, reason = records.malformed[0]
        raise ExtractError(
            f"{path}: line {line} {reason} ({len(records.malformed)} malformed record(s) in all)"
        )
    load_id = _new_load_id()
    now = datetime.now()
    with transaction(con):
        _forget_unaccepted(con, sha, "customers")
        _insert_records(con, "raw.customers", records, CUSTOMER_COLUMNS, load_id, path)
        con.execute(
            """
            insert into ops.loads (load_id, dataset, source_file, sha256, rows_in_file, rows_loaded,
                rows_quarantined, status, run_id, loaded_at, decided_at, last_seen_at)
            values (?, 'customers', ?, ?, ?, ?, 0, 'accepted', ?, ?, ?, ?)
            """,
            [load_id, str(path), sha, records.table.num_rows, records.table.num_rows, run_id, now, now, now],
        )
    return LoadSummary(load_id, str(path), None, "loaded", records.table.num_rows, records.table.num_rows)


@task(name="find-extracts", cache_policy=NO_CACHE, **IO_RETRIES)
def find_extracts_task(warehouse: Path, landing_dir: Path, periods: list[str]) -> list[Path]:
    with open_warehouse(warehouse) as con:
        accepted = accepted_periods(con)
    return manifests_to_load(Path(landing_dir), periods, accepted)


@task(name="ingest-extract", cache_policy=NO_CACHE, **IO_RETRIES)
def ingest_extract_task(warehouse: Path, manifest_path: Path, run_id: str) -> dict:
    """Load one extract named by its manifest (one file = one retryable unit)."""
    manifest = read_manifest(Path(manifest_path))
    with open_warehouse(warehouse) as con:
        return load_extract(con, manifest, run_id).to_dict()


@task(name="ingest-customers", cache_policy=NO_CACHE, **IO_RETRIES)
def ingest_customers_task(warehouse: Path, customers_path: Path, run_id: str) -> dict:
    with open_warehouse(warehouse) as con:
        return load_customers(con, Path(customers_path), run_id).to_dict()
