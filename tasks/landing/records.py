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
    malformed: list[tuple[int, str, str, str]]  # (line, text, reason, rule)


# Rules a record can break while the file is read (before the expectation suite sees it): such a record
# never reaches raw.*; it is quarantined with its text at ingest.
FIELD_COUNT_RULE = "record_field_count"
UTF8_RULE = "text_invalid_utf8"
INGEST_RULES = (FIELD_COUNT_RULE, UTF8_RULE)


def read_records(path: Path) -> Records:
    """Read a CSV or Parquet file as text, keeping each record's line number (header = line 1).

    CSV is parsed single-threaded because only then does Arrow report the line number of a record
    with the wrong number of fields; such records are returned in `malformed`, never dropped. Fields
    are read as bytes and then checked as UTF-8 in one vectorised cast; a record holding bytes that are
    not UTF-8 (a Latin-1 export, a damaged block) is returned in `malformed` too, its text kept with the
    bad bytes escaped.
    """
    if path.suffix.lower() == ".parquet":
        return _read_parquet(path)
    if path.suffix.lower() != ".csv":
        raise ExtractError(f"{path}: unsupported file type {path.suffix!r} (expected .csv or .parquet)")
    header = _csv_header(path)
    malformed: list[tuple[int, str, str, str]] = []

    def on_invalid(row: pacsv.InvalidRow) -> str:
        reason = f"has {row.actual_columns} fields, the header has {row.expected_columns}"
        malformed.append(
            (int(row.number) if row.number is not None else -1, row.text, reason, FIELD_COUNT_RULE)
        )
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
                column_types={c: pa.binary() for c in header},
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
    table, not_utf8 = _as_text(table, header)
    malformed = sorted(malformed + not_utf8)
    return Records(table=table, header=header, malformed=malformed)


def _as_text(table: pa.Table, header: list[str]) -> tuple[pa.Table, list[tuple[int, str, str, str]]]:
    """The byte columns cast to UTF-8 text; records whose bytes are not UTF-8 are taken out and returned."""
    text_schema = pa.schema([table.schema.field("source_line")] + [pa.field(c, pa.string()) for c in header])
    try:
        return table.cast(text_schema), []
    except (pa.ArrowInvalid, UnicodeDecodeError):
        pass
    bad: dict[int, tuple[str, UnicodeDecodeError]] = {}  # row index -> first bad field
    for name in header:
        for i, value in enumerate(table[name].to_pylist()):
            if value is None or i in bad:
                continue
            try:
                value.decode("utf-8")
            except UnicodeDecodeError as exc:
                bad[i] = (name, exc)
    lines = table["source_line"].to_pylist()
    found = []
    for i, (name, exc) in sorted(bad.items()):
        fields = [b"" if table[c][i].as_py() is None else table[c][i].as_py() for c in header]
        text = ",".join(f.decode("utf-8", errors="backslashreplace") for f in fields)
        reason = f"field {name} is not UTF-8 (byte 0x{exc.object[exc.start]:02x} at position {exc.start + 1})"
        found.append((int(lines[i]), text, reason, UTF8_RULE))
    keep = pa.array([i not in bad for i in range(table.num_rows)])
    return table.filter(keep).cast(text_schema), found


# A header longer than this, or with more columns, is refused before anything is parsed (a file of
# 100k columns, or of no line breaks at all, must not exhaust memory). Generous: our contract has 13.
MAX_HEADER_BYTES = 64 * 1024
MAX_COLUMNS = 256


def _csv_header(path: Path) -> list[str]:
    """Column names exactly as written (a byte-order mark is allowed; spaces are kept, so they show)."""
    try:
        # Only line 1 is decoded here (a text-mode reader would decode ahead into the records, whose bytes
        # are checked record by record), and at most MAX_HEADER_BYTES of it.
        with path.open("rb") as f:
            raw = f.readline(MAX_HEADER_BYTES + 1)
        if len(raw) > MAX_HEADER_BYTES:
            raise ExtractError(
                f"{path}: line 1 (header) is longer than {MAX_HEADER_BYTES} bytes; refused before reading further"
            )
        first = raw.decode("utf-8-sig")
        header = next(csv.reader([first.rstrip("\r\n")]), [])
    except UnicodeDecodeError as exc:
        raise ExtractError(f"{path}: line 1 (header) is not UTF-8 ({exc})") from exc
    except csv.Error as exc:  # e.g. a carriage return alone inside the header line
        raise ExtractError(f"{path}: line 1 (header) cannot be split into column names ({exc})") from exc
    if not header or header == [""]:
        raise ExtractError(f"{path}: empty file, expected a header row on line 1")
    if len(header) > MAX_COLUMNS:
        raise ExtractError(
            f"{path}: line 1 (header) has {len(header)} columns, more than {MAX_COLUMNS}; refused before reading further"
        )
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
