"""warehouse/sql/queries/quality/ledger_checks.sql: the received fields and the text-hygiene helpers follow
the extract contract.

The file names the contract's fields itself (no column list is formatted into it), so these tests are
what keeps it in step with `LEDGER_COLUMNS`: a field added to the contract and not to the file, or the
fields' order changed in one place only, fails here. The helper rules themselves are held equal to GX on
the bad-input catalogue (tests/integration/test_bad_inputs.py).
"""

from __future__ import annotations

from datetime import datetime

import pytest

from ledgerband.tasks.core import queries
from ledgerband.tasks.ingest.extract_contract import LEDGER_COLUMNS
from ledgerband.tasks.quality import codelists

MAX_FIELD_LENGTH = 12


def _checks(con, records: list[dict[str, str]]):
    """The query's rows for one load of `records` (lines 2, 3, ...), as dicts."""
    con.execute(
        "insert into ops.loads (load_id, dataset, period, source_file, sha256, status, run_id, loaded_at) "
        "values ('L1', 'ledger', '2026-10', 'f.csv', 'x', 'loaded', 'R1', ?)",
        [datetime(2026, 11, 2, 6, 0)],
    )
    for line, record in enumerate(records, start=2):
        con.execute(
            f"insert into raw.ledger_lines (load_id, source_file, source_line, {', '.join(LEDGER_COLUMNS)}) "
            f"values ('L1', 'f.csv', ?, {', '.join('?' * len(LEDGER_COLUMNS))})",
            [line, *[record[c] for c in LEDGER_COLUMNS]],
        )
    con.register("code_lists", codelists.as_table())
    relation = queries.query_relation(
        con, "quality", "ledger_checks", load_id="L1", max_field_length=MAX_FIELD_LENGTH
    )
    return relation, [dict(zip(relation.columns, row, strict=True)) for row in relation.fetchall()]


def test_the_received_fields_come_in_the_contracts_order(con):
    relation, rows = _checks(con, [dict.fromkeys(LEDGER_COLUMNS, "ok")])
    assert relation.columns[0] == "source_line"
    assert relation.columns[1 : 1 + len(LEDGER_COLUMNS)] == list(LEDGER_COLUMNS)
    assert [rows[0][c] for c in LEDGER_COLUMNS] == ["ok"] * len(LEDGER_COLUMNS)


@pytest.mark.parametrize(
    ("helper", "spoil"),
    [
        ("field_with_control_character", lambda value: value + "\x07"),
        ("field_too_long", lambda value: value * MAX_FIELD_LENGTH),
    ],
)
def test_a_text_hygiene_helper_names_the_first_broken_field_in_the_contracts_order(con, helper, spoil):
    # Record k breaks field k and every field after it: the helper must name field k, for every k, so
    # each field is checked and the fields are tried in the contract's order.
    records = [
        {c: spoil("ab") if i >= k else "ab" for i, c in enumerate(LEDGER_COLUMNS)}
        for k in range(len(LEDGER_COLUMNS))
    ]
    records.append(dict.fromkeys(LEDGER_COLUMNS, "ab"))  # a clean record: no field named
    _, rows = _checks(con, records)
    assert [row[helper] for row in rows] == [*LEDGER_COLUMNS, None]


def test_run_query_binds_by_name(con):
    con.execute(
        "insert into raw.ledger_lines (load_id, source_file, source_line, amount, direction) values "
        "('L1', 'f', 2, '10.50', 'CRDT'), ('L1', 'f', 3, '4.25', 'DBIT'), ('L1', 'f', 4, 'x', 'DBIT'), "
        "('L2', 'g', 2, '99.00', 'CRDT')"
    )
    credit, debit, unreadable = queries.run_query(con, "ingest", "load_totals", load_id="L1").fetchall()[0]
    assert (float(credit), float(debit), unreadable) == (10.5, 4.25, 1)
