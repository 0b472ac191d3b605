"""Reading extract files as text records, each with its line number; nothing is dropped."""

from __future__ import annotations

import csv
import io
import re
import sys
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from ledgerband.tasks.core.errors import ExtractError


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
BLOCK_BYTES = 1 << 24  # Arrow reads a CSV in blocks of this size: the most of a file held at once
PYTHON_BATCH_ROWS = 1 << 16  # records per batch when Python's csv module reads the file


class ArrowRowHandlerError(ExtractError):
    """Arrow could not hand a record to our row handler: it has the wrong number of fields *and* bytes
    that are not UTF-8 (Arrow decodes the record's text before calling the handler, and fails). The
    file is readable; `stream_records(path, parser="python")` reads it, record by record."""


@dataclass
class RecordStream:
    """A file's records read block by block, for a reader (DuckDB) to consume once.

    `header` is known at once. `rows` and `malformed` are complete only when the stream is exhausted;
    a file that turns out unreadable part-way ends the stream early and leaves its ExtractError in
    `error` (a consumer such as DuckDB cannot pass a Python exception through): call `finish()` after
    consuming, which raises it.
    """

    path: Path
    header: list[str]
    schema: pa.Schema
    batches: Iterator[pa.RecordBatch]
    rows: int = 0
    malformed: list[tuple[int, str, str, str]] = field(default_factory=list)
    error: ExtractError | None = None

    def reader(self) -> pa.RecordBatchReader:
        return pa.RecordBatchReader.from_batches(self.schema, self._counted())

    def _counted(self) -> Iterator[pa.RecordBatch]:
        try:
            for batch in self.batches:
                self.rows += batch.num_rows
                yield batch
        except ExtractError as exc:
            self.error = exc

    def finish(self) -> None:
        if self.error is not None:
            raise self.error
        self.malformed.sort()


def read_records(path: Path, parser: str = "arrow") -> Records:
    """The whole file at once (`stream_records`, collected): for small files and tests."""
    stream = stream_records(path, parser=parser)
    table = stream.reader().read_all()
    stream.finish()
    return Records(table=table, header=stream.header, malformed=stream.malformed)


def stream_records(path: Path, block_bytes: int = BLOCK_BYTES, parser: str = "arrow") -> RecordStream:
    """Read a CSV or Parquet file as text, block by block, keeping each record's line number (header = line 1).

    CSV is parsed single-threaded because only then does Arrow report the line number of a record
    with the wrong number of fields; such records are returned in `malformed`, never dropped. Fields
    are read as bytes and then checked as UTF-8 in one vectorised cast per block; a record holding bytes
    that are not UTF-8 (a Latin-1 export, a damaged block) is returned in `malformed` too, its text kept
    with the bad bytes escaped. Memory is a few blocks, whatever the file's size.

    One kind of record stops Arrow: the wrong number of fields and bytes that are not UTF-8 together.
    The stream then ends with ArrowRowHandlerError, and `parser="python"` reads the same file with
    Python's csv module (same records, line numbers and findings; about ten times slower), so that
    record is quarantined like any other instead of the file being refused.
    """
    if path.suffix.lower() == ".parquet":
        return _stream_parquet(path)
    if path.suffix.lower() != ".csv":
        raise ExtractError(f"{path}: unsupported file type {path.suffix!r} (expected .csv or .parquet)")
    header = _csv_header(path)
    schema = pa.schema([pa.field("source_line", pa.int64())] + [pa.field(c, pa.string()) for c in header])
    if parser == "python":
        malformed_py: list[tuple[int, str, str, str]] = []
        return RecordStream(
            path, header, schema, _python_batches(path, header, schema, malformed_py), malformed=malformed_py
        )
    if parser != "arrow":
        raise ValueError(f"unknown parser {parser!r} (expected 'arrow' or 'python')")
    malformed: list[tuple[int, str, str, str]] = []
    reported: list[int] = []  # lines of records with the wrong number of fields, as Arrow reports them

    def on_invalid(row: pacsv.InvalidRow) -> str:
        line = int(row.number) if row.number is not None else -1
        reason = f"has {row.actual_columns} fields, the header has {row.expected_columns}"
        malformed.append((line, row.text, reason, FIELD_COUNT_RULE))
        reported.append(line)
        return "skip"

    def batches() -> Iterator[pa.RecordBatch]:
        try:
            reader = pacsv.open_csv(
                path,
                # One parser names the columns (ours, which allows a byte-order mark); Arrow skips the header.
                read_options=pacsv.ReadOptions(
                    use_threads=False, block_size=block_bytes, column_names=header, skip_rows=1
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
            next_line = 2  # the line the next good record can be on (line 1 is the header)
            passed = 0  # reported lines before next_line (Arrow reports them in file order)
            for batch in reader:
                # A block's malformed records are reported while it is parsed, so before its batch
                # arrives (perhaps with some of the next block's): the batch's records are the first
                # lines from next_line on that are not reported malformed.
                while passed < len(reported) and reported[passed] < next_line:
                    passed += 1
                pending = reported[passed:]
                lines = np.arange(next_line, next_line + batch.num_rows + len(pending), dtype=np.int64)
                lines = lines[~np.isin(lines, pending)][: batch.num_rows]
                if batch.num_rows:
                    next_line = int(lines[-1]) + 1
                table = pa.Table.from_batches([batch]).add_column(0, "source_line", pa.array(lines))
                text, not_utf8 = _as_text(table, header)
                malformed.extend(not_utf8)
                yield from text.to_batches()
        except pa.ArrowInvalid as exc:
            # Our handler returns "skip" for every record it is given, so a field-count error reaching
            # here is a record the handler was never given (its text is not UTF-8).
            if found := _HANDLER_NOT_CALLED.search(str(exc)):
                # Arrow's message quotes the record; ours names its place only (values stay in the file).
                raise ArrowRowHandlerError(
                    f"{path}: the record Arrow counts as row {found['row']} has the wrong number of fields "
                    "and bytes that are not UTF-8; Arrow's reader cannot hand it over (read the file with "
                    "parser='python')"
                ) from exc
            raise ExtractError(f"{path}: cannot be parsed as UTF-8 CSV ({exc})") from exc

    return RecordStream(path, header, schema, batches(), malformed=malformed)


_HANDLER_NOT_CALLED = re.compile(r"Row #(?P<row>\d+): Expected \d+ columns, got \d+")


def _quiet_handler_decode_errors(unraisable, _previous=sys.unraisablehook) -> None:
    """Arrow's failed decode before our row handler is reported as an "exception ignored" traceback on
    stderr; the stream raises ArrowRowHandlerError for it and ingest reads the file again, so that one
    report is dropped. Everything else goes to the hook that was there before."""
    handler = getattr(unraisable.object, "__qualname__", "")
    if isinstance(unraisable.exc_value, UnicodeDecodeError) and handler.endswith(
        "stream_records.<locals>.on_invalid"
    ):
        return
    _previous(unraisable)


sys.unraisablehook = _quiet_handler_decode_errors


def _escaped(text: str) -> str:
    """Text read with surrogateescape, its undecodable bytes written as \\xNN (as _as_text writes them)."""
    return text.encode("utf-8", "surrogateescape").decode("utf-8", "backslashreplace")


def _not_utf8(value: str) -> UnicodeDecodeError | None:
    try:
        value.encode("utf-8", "surrogateescape").decode("utf-8")
    except UnicodeDecodeError as exc:
        return exc
    return None


def _python_batches(
    path: Path, header: list[str], schema: pa.Schema, malformed: list[tuple[int, str, str, str]]
) -> Iterator[pa.RecordBatch]:
    """The file's records read by Python's csv module, PYTHON_BATCH_ROWS at a time, with the Arrow path's
    findings: a record with the wrong number of fields, or with a field that is not UTF-8, goes to
    `malformed` with its text (bad bytes escaped); every other record is yielded with its line number
    (the line it starts on). Bytes that are not UTF-8 are carried through as surrogates
    (surrogateescape), so no record stops the reader. Blank lines hold no record, as for Arrow."""
    width = len(header)
    lines: list[int] = []
    columns: list[list[str | None]] = [[] for _ in header]

    def batch() -> pa.RecordBatch:
        arrays = [pa.array(lines, pa.int64())] + [pa.array(c, pa.string()) for c in columns]
        out = pa.RecordBatch.from_arrays(arrays, schema=schema)
        lines.clear()
        for c in columns:
            c.clear()
        return out

    with path.open("rb") as raw:
        text = io.TextIOWrapper(raw, encoding="utf-8", errors="surrogateescape", newline="")
        reader = csv.reader(text)
        try:
            next(reader, None)  # the header, read by _csv_header
            last = reader.line_num
            for fields in reader:
                line, last = last + 1, reader.line_num
                if not fields:
                    continue
                if len(fields) != width:
                    record = io.StringIO()
                    csv.writer(record, lineterminator="").writerow(fields)
                    reason = f"has {len(fields)} fields, the header has {width}"
                    malformed.append((line, _escaped(record.getvalue()), reason, FIELD_COUNT_RULE))
                    continue
                try:
                    "".join(fields).encode("utf-8")  # fails on the surrogates that stand for bad bytes
                except UnicodeEncodeError:
                    name, exc = next(
                        (n, e) for n, v in zip(header, fields, strict=True) if (e := _not_utf8(v))
                    )
                    reason = f"field {name} is not UTF-8 (byte 0x{exc.object[exc.start]:02x} at position {exc.start + 1})"
                    malformed.append((line, _escaped(",".join(fields)), reason, UTF8_RULE))
                    continue
                lines.append(line)
                for column, value in zip(columns, fields, strict=True):
                    column.append(value or None)  # only an empty field is null (the contract)
                if len(lines) >= PYTHON_BATCH_ROWS:
                    yield batch()
        except csv.Error as exc:
            raise ExtractError(f"{path}: line {reader.line_num}: cannot be parsed as CSV ({exc})") from exc
    if lines:
        yield batch()


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


def _stream_parquet(path: Path, batch_rows: int = 1 << 17) -> RecordStream:
    try:
        file = pq.ParquetFile(path)
        names = file.schema_arrow.names
    except (pa.ArrowInvalid, OSError) as exc:
        raise ExtractError(f"{path}: cannot be read as Parquet ({exc})") from exc
    schema = pa.schema([pa.field("source_line", pa.int64())] + [pa.field(c, pa.string()) for c in names])

    def batches() -> Iterator[pa.RecordBatch]:
        # Parquet has no text lines: source_line is the record number (1-based).
        first = 1
        try:
            for batch in file.iter_batches(batch_size=batch_rows):
                cols = [pa.array(np.arange(first, first + batch.num_rows, dtype=np.int64))]
                for col in batch.columns:
                    cols.append(col if pa.types.is_string(col.type) else col.cast(pa.string()))
                first += batch.num_rows
                yield pa.RecordBatch.from_arrays(cols, schema=schema)
        except (pa.ArrowInvalid, OSError) as exc:
            raise ExtractError(f"{path}: cannot be read as Parquet ({exc})") from exc

    return RecordStream(path, list(names), schema, batches())
