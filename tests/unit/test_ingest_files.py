import json
import shutil
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from ledgerband.tasks.core.errors import ExtractError
from ledgerband.tasks.core.period import Period
from ledgerband.tasks.ingest.extract_contract import LEDGER_COLUMNS
from ledgerband.tasks.ingest.manifest import find_manifests, read_manifest
from ledgerband.tasks.ingest.records import read_records

GOOD = Path(__file__).parents[1] / "fixtures" / "ledger_good"


def _manifest(tmp_path: Path, **changes) -> Path:
    data = json.loads((GOOD / "2026-10" / "ledger-2026-10.manifest.json").read_text())
    data.update(changes)
    for key in [k for k, v in changes.items() if v is None]:
        del data[key]
    path = tmp_path / "m.manifest.json"
    path.write_text(json.dumps(data))
    return path


@pytest.mark.parametrize(
    "changes, message",
    [
        ({"row_count": None}, "missing field\\(s\\) row_count"),
        ({"credit_total": 12.5}, "credit_total must be a decimal string"),  # a float would lose cents
        ({"debit_total": "1,234.00"}, "debit_total must be a decimal string"),  # thousands separator
        ({"sha256": "abc"}, "sha256 must be 64 hex digits"),
        ({"row_count": -1}, "row_count must be a non-negative integer"),
        ({"file": "../elsewhere.csv"}, "bare file name"),  # a manifest may not point outside its folder
    ],
)
def test_bad_manifest_names_the_file_and_the_field(tmp_path, changes, message):
    path = _manifest(tmp_path, **changes)
    with pytest.raises(ExtractError, match=message) as exc:
        read_manifest(path)
    assert str(path) in str(exc.value)


def test_manifest_in_the_wrong_period_folder_is_refused(tmp_path):
    folder = tmp_path / "2026-11"
    folder.mkdir()
    (folder / "ledger-2026-10.csv").write_text("x")
    (folder / "ledger-2026-10.manifest.json").write_text(
        (GOOD / "2026-10" / "ledger-2026-10.manifest.json").read_text()
    )
    with pytest.raises(ExtractError, match="says period 2026-10, but it lies in the folder for 2026-11"):
        find_manifests(tmp_path, Period(2026, 11))


def test_missing_period_folder_says_where_it_looked(tmp_path):
    with pytest.raises(ExtractError, match=str(tmp_path / "2026-09")):
        find_manifests(tmp_path, Period(2026, 9))


def test_csv_records_keep_their_line_numbers_and_malformed_lines_are_returned(tmp_path):
    path = tmp_path / "x.csv"
    path.write_text("a,b,c\n1,2,3\n4,5\n6,7,8\n9,10,11,12\n13,,15\n")
    rec = read_records(path)
    assert rec.table.column("source_line").to_pylist() == [2, 4, 6]
    assert rec.table.column("a").to_pylist() == ["1", "6", "13"]
    assert rec.table.column("b").to_pylist()[2] is None  # empty field = null (extract contract)
    assert [(m[0], m[1]) for m in rec.malformed] == [(3, "4,5"), (5, "9,10,11,12")]
    assert "has 2 fields, the header has 3" in rec.malformed[0][2]


def test_csv_keeps_leading_zeros_and_text_as_received(tmp_path):
    path = tmp_path / "x.csv"
    path.write_text("a,b\n0042,001.50\n")
    rec = read_records(path)
    assert rec.table.column("a").to_pylist() == ["0042"] and rec.table.column("b").to_pylist() == ["001.50"]


@pytest.mark.parametrize("parser", ["arrow", "python"])
def test_a_record_that_is_not_utf8_is_set_aside_with_its_field_and_byte(tmp_path, parser):
    # A Latin-1 byte (0xdf, sharp s) is not UTF-8 (RFC 3629): the record is returned as malformed, its
    # text kept with the byte escaped; the other records load.
    path = tmp_path / "latin.csv"
    path.write_bytes("a,b\nStra\xdfe,1\nok,2\n".encode("latin-1"))
    rec = read_records(path, parser=parser)
    assert rec.table.column("a").to_pylist() == ["ok"] and rec.table.column("source_line").to_pylist() == [3]
    [(line, text, reason, rule)] = rec.malformed
    assert (line, text, rule) == (2, "Stra\\xdfe,1", "text_invalid_utf8")
    assert reason == "field a is not UTF-8 (byte 0xdf at position 5)"


def test_a_header_that_is_not_utf8_refuses_the_file_with_its_name(tmp_path):
    path = tmp_path / "latin.csv"
    path.write_bytes("Stra\xdfe,b\n1,2\n".encode("latin-1"))
    with pytest.raises(ExtractError, match="latin.csv: line 1 \\(header\\) is not UTF-8"):
        read_records(path)


def test_parquet_records_are_numbered_and_typed_columns_become_text(tmp_path):
    path = tmp_path / "x.parquet"
    table = pa.table({"amount": pa.array(["12.50", "3.00"]).cast(pa.decimal128(18, 2)), "txn_id": ["a", "b"]})
    pq.write_table(table, path)
    rec = read_records(path)
    assert rec.table.column("source_line").to_pylist() == [1, 2]
    assert rec.table.column("amount").to_pylist() == ["12.50", "3.00"]


def test_a_cleaned_landing_folder_is_fine_once_its_month_is_accepted(tmp_path):
    from ledgerband.tasks.ingest.manifest import manifests_to_load

    landing = tmp_path / "landing"
    shutil.copytree(GOOD / "2026-10", landing / "2026-10")
    got = manifests_to_load(landing, [Period(2026, 9), Period(2026, 10)], accepted_periods={Period(2026, 9)})
    assert [p.name for p in got] == ["ledger-2026-10.manifest.json"]


def test_a_month_neither_landed_nor_accepted_is_an_error_naming_the_folder(tmp_path):
    from ledgerband.tasks.ingest.manifest import manifests_to_load

    with pytest.raises(ExtractError, match=str(tmp_path / "2026-09")):
        manifests_to_load(tmp_path, [Period(2026, 9)], accepted_periods=set())


def test_a_byte_order_mark_is_not_part_of_the_first_column_name(tmp_path):
    path = tmp_path / "bom.csv"
    path.write_bytes(b"\xef\xbb\xbftxn_id,amount\nT1,1.00\n")
    rec = read_records(path)
    assert rec.header == ["txn_id", "amount"] and rec.table.column("txn_id").to_pylist() == ["T1"]


def test_a_space_in_a_header_name_is_kept_so_the_contract_rule_can_name_it(tmp_path):
    path = tmp_path / "space.csv"
    path.write_text("txn_id, amount\nT1,1.00\n")
    rec = read_records(path)
    assert rec.header == ["txn_id", " amount"]
    assert rec.table.column(" amount").to_pylist() == ["1.00"]  # still text, not a parsed number


@pytest.mark.parametrize(
    "text", ["NA", "null", "N/A", "nan", "#N/A", "NULL"]
)  # words Arrow reads as null by default
def test_only_an_empty_field_is_null(tmp_path, text):
    path = tmp_path / "x.csv"
    path.write_text(f"a,b\n{text},\n")
    rec = read_records(path)
    assert rec.table.column("a").to_pylist() == [text] and rec.table.column("b").to_pylist() == [None]


def test_manifest_with_a_bad_period_names_the_manifest(tmp_path):
    path = _manifest(tmp_path, period="2026-1")
    with pytest.raises(ExtractError, match=f"manifest {path}: field period: period '2026-1' is not a month"):
        read_manifest(path)


def test_contract_columns_and_the_suite_header_rule_agree():
    # Two declarations of one contract (code that loads, the rule that checks): they must not drift.
    from ledgerband.tasks.quality.validate import read_suite

    [rule] = read_suite("ledger_lines").table
    assert rule["kwargs"]["column_set"] == list(LEDGER_COLUMNS)


def test_a_header_with_a_stray_carriage_return_is_refused_by_name(tmp_path):
    # Found by the loader fuzz test: a lone CR before the header made the csv module raise unhandled.
    path = tmp_path / "cr.csv"
    path.write_bytes(b"\rtxn_id,amount\nT1,1.00\n")
    with pytest.raises(ExtractError, match="cr.csv: line 1 \\(header\\) cannot be split into column names"):
        read_records(path)


@pytest.mark.parametrize("block_bytes", [64, 1000, 1 << 24])
def test_a_file_read_in_blocks_keeps_every_line_number(tmp_path, block_bytes):
    """Streamed in blocks of any size (a block holding one record, a few, or the whole file), every record
    keeps its line number and every malformed one is returned once. Reference: Python's csv module reading
    the same file line by line (the file has no quoted line breaks, so record n + 1 is on line n + 1)."""
    import csv
    import random

    from ledgerband.tasks.ingest.records import stream_records

    rng = random.Random(11)
    lines = ["a,b,c"]
    for n in range(2, 600):
        kind = rng.random()
        if kind < 0.05:
            lines.append(f"{n},short")  # wrong number of fields
        elif kind < 0.08:
            lines.append(f"{n},Stra\udcdfe,x")  # a Latin-1 byte (written as 0xdf below)
        elif kind < 0.10:
            lines.append(f"{n},a,b,extra")
        else:
            lines.append(f"{n},{'v' * rng.randint(0, 40)},z")
    path = tmp_path / "blocks.csv"
    path.write_bytes("\n".join(lines).encode("utf-8", errors="surrogateescape") + b"\n")

    stream = stream_records(path, block_bytes=block_bytes)
    table = stream.reader().read_all()
    stream.finish()
    with path.open(encoding="utf-8", errors="surrogateescape", newline="") as f:
        rows = list(csv.reader(f))[1:]
    good = [i + 2 for i, r in enumerate(rows) if len(r) == 3 and "\udcdf" not in r[1]]
    bad = [i + 2 for i, r in enumerate(rows) if i + 2 not in good]
    assert table.column("source_line").to_pylist() == good
    assert table.column("a").to_pylist() == [str(n) for n in good]  # each record's first field is its line
    assert [m[0] for m in stream.malformed] == bad
    assert stream.rows == len(good) and len(good) + len(bad) == 598


def test_a_short_record_that_is_not_utf8_is_quarantined_by_the_python_reader(tmp_path):
    """Found by the loader fuzz test: Arrow decodes a record with the wrong number of fields as UTF-8
    before calling the row handler, and fails on a Latin-1 byte (0xe9, e-acute; not UTF-8 by RFC 3629).
    The Arrow stream ends with ArrowRowHandlerError; Python's csv module reads the file: the record is
    set aside for its field count, its text kept with the byte escaped, and the other records load."""
    from ledgerband.tasks.ingest.records import ArrowRowHandlerError, stream_records

    path = tmp_path / "short.csv"
    path.write_bytes(b"a,b,c\n1,2,3\n4,\xe9,6,7\n8,9,10\n")
    stream = stream_records(path)
    stream.reader().read_all()
    with pytest.raises(
        ArrowRowHandlerError, match="short.csv: the record Arrow counts as row 3 has the wrong"
    ) as e:
        stream.finish()
    assert "\\xe9" not in str(e.value) and "6,7" not in str(e.value)  # where, never the record's values
    rec = read_records(path, parser="python")
    assert rec.table.column("source_line").to_pylist() == [2, 4]
    assert rec.table.column("c").to_pylist() == ["3", "10"]
    assert rec.malformed == [(3, "4,\\xe9,6,7", "has 4 fields, the header has 3", "record_field_count")]


@pytest.mark.parametrize("seed", [11, 12, 13])
def test_the_python_reader_finds_what_arrow_finds(tmp_path, seed):
    """Reference: Arrow's CSV reader (an independent parser) on files it can read: the same records,
    line numbers, field values (nulls included) and findings, whichever of the two reads the file."""
    import random

    rng = random.Random(seed)
    lines = ["a,b,c"]
    for n in range(2, 900):
        kind = rng.random()
        if kind < 0.05:
            lines.append(f"{n},short")
        elif kind < 0.08:
            lines.append(f"{n},Stra\udcdfe,x")  # a Latin-1 byte (written as 0xdf below)
        elif kind < 0.10:
            lines.append(f"{n},a,b,extra")
        elif kind < 0.15:
            lines.append(f'{n},"quoted, with a comma",""')  # a quoted comma; a quoted empty field
        elif kind < 0.20:
            lines.append(f"{n},,")  # empty fields
        else:
            lines.append(f"{n},{'v' * rng.randint(0, 40)},z\r")  # CRLF line ends too
    path = tmp_path / "both.csv"
    path.write_bytes("\n".join(lines).encode("utf-8", errors="surrogateescape") + b"\n")

    arrow = read_records(path)
    python = read_records(path, parser="python")
    assert python.table.equals(arrow.table)
    assert [m[0] for m in python.malformed] == [m[0] for m in arrow.malformed]
    assert [(m[2], m[3]) for m in python.malformed] == [(m[2], m[3]) for m in arrow.malformed]
    assert arrow.table.num_rows + len(arrow.malformed) == 898


def test_a_file_unreadable_part_way_ends_the_stream_with_its_error(tmp_path):
    from ledgerband.tasks.ingest.records import stream_records

    path = tmp_path / "broken.csv"
    # Quoted line breaks across block boundaries: Arrow's chunker loses sync part-way through the file.
    path.write_text("a,b\n" + '1,"two\nlines"\n' * 300)
    stream = stream_records(path, block_bytes=256)
    assert 0 < stream.reader().read_all().num_rows < 300
    with pytest.raises(ExtractError, match="broken.csv: cannot be parsed"):
        stream.finish()
