"""Reading extract files as text records, each with its line number; nothing is dropped."""

from __future__ import annotations

import csv
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from ledgerband.tasks.errors import ExtractError


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
