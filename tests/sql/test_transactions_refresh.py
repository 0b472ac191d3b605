"""tasks/layers/transactions.py: staging.transactions appended or rebuilt, always equal to what its SQL file defines."""

from __future__ import annotations

from datetime import date, datetime, timedelta

from ledgerband.tasks.core.warehouse import sql_model
from ledgerband.tasks.ingest.extract_contract import LEDGER_COLUMNS
from ledgerband.tasks.layers.transactions import refresh_transactions

T0 = datetime(2026, 9, 2, 6, 0)


def _load(
    con, load_id: str, at: datetime, records: list[tuple[str, float]], status: str = "accepted"
) -> None:
    """One ledger load: (txn_id, amount) records of customer C1, lines 2, 3, …"""
    con.execute(
        "insert into ops.loads (load_id, dataset, period, source_file, sha256, status, loaded_at) "
        "values (?, 'ledger', '2026-10', ?, ?, ?, ?)",
        [load_id, f"{load_id}.csv", load_id, status, at],
    )
    for line, (txn_id, amount) in enumerate(records, start=2):
        values = {c: None for c in LEDGER_COLUMNS}
        values.update(
            txn_id=txn_id,
            account_id="A1",
            customer_id="C1",
            booking_date=str(date(2026, 10, 1) + timedelta(days=line)),
            amount=f"{amount:.2f}",
            direction="DBIT",
            currency="EUR",
            balance_after="100.00",
            bank_txn_code="PMNT/ICDT/DMCT",
        )
        con.execute(
            f"insert into raw.ledger_lines (load_id, source_file, source_line, {', '.join(LEDGER_COLUMNS)}) "
            f"values (?, ?, ?, {', '.join('?' * len(LEDGER_COLUMNS))})",
            [load_id, f"{load_id}.csv", line, *[values[c] for c in LEDGER_COLUMNS]],
        )


def _held(con) -> list[tuple]:
    return con.execute("select * from staging.transactions order by all").fetchall()


def _defined(con) -> list[tuple]:
    """What the SQL file defines from the same tables (the reference the kept table must equal)."""
    query = sql_model("staging", "transactions").query
    return con.execute(f"select * from ({query}) order by all").fetchall()


def test_appending_and_rebuilding_both_give_what_the_file_defines(con):
    _load(con, "L1", T0, [("T1", 10), ("T2", 20)])
    assert refresh_transactions(con) == "rebuilt: no table yet"
    assert _held(con) == _defined(con) and len(_held(con)) == 2

    # A later month: one new booking, and T2 again (validation quarantines a repeat; staging is the guard).
    _load(con, "L2", T0 + timedelta(days=30), [("T3", 30), ("T2", 99)])
    assert refresh_transactions(con) == "appended 1"
    assert _held(con) == _defined(con)
    assert sorted(float(r[4]) for r in _held(con)) == [10.0, 20.0, 30.0]  # T2 keeps its first booking

    assert refresh_transactions(con) == "unchanged"
    assert _held(con) == _defined(con)

    # A record of a held load quarantined afterwards: the table is rebuilt without it.
    con.execute(
        "insert into quarantine.ledger_lines values ('L1', 'L1.csv', 2, ['some_rule'], 'x', null, ?)", [T0]
    )
    assert refresh_transactions(con) == "rebuilt: held load L1 has 1 records quarantined, 0 when staged"
    assert _held(con) == _defined(con) and "T1" not in [r[0] for r in _held(con)]

    # The first month restated: its load is no longer accepted, so L2's T2 is now the first booking.
    con.execute("update ops.loads set status = 'restated' where load_id = 'L1'")
    _load(con, "L1R", T0 + timedelta(days=40), [("T1", 11)])
    assert refresh_transactions(con) == "rebuilt: held load L1 is no longer accepted"
    assert _held(con) == _defined(con)
    assert sorted((r[0], float(r[4])) for r in _held(con)) == [("T1", 11.0), ("T2", 99.0), ("T3", 30.0)]

    # A new load older than one held (out of order): rebuilt, so first booking stays by load time.
    _load(con, "L0", T0 - timedelta(days=30), [("T3", 3)])
    assert refresh_transactions(con) == "rebuilt: new load L0 is older than a held one"
    assert _held(con) == _defined(con)
    assert ("T3", 3.0) in [(r[0], float(r[4])) for r in _held(con)]


def test_a_load_not_yet_accepted_is_not_appended(con):
    _load(con, "L1", T0, [("T1", 10)])
    refresh_transactions(con)
    _load(con, "L2", T0 + timedelta(days=30), [("T2", 20)], status="loaded")
    assert refresh_transactions(con) == "unchanged"
    assert [r[0] for r in _held(con)] == ["T1"]
    con.execute("update ops.loads set status = 'accepted' where load_id = 'L2'")
    assert refresh_transactions(con) == "appended 1"
    assert _held(con) == _defined(con)


def test_a_txn_id_repeated_among_new_loads_keeps_its_first_booking_when_appended(con):
    _load(con, "L1", T0, [("T1", 10), ("T2", 20)])
    refresh_transactions(con)
    # Two new loads at once: T5 twice in L2 and again in L3, T2 (held) again in L3, T6 only in L3.
    _load(con, "L2", T0 + timedelta(days=30), [("T5", 50), ("T5", 51), ("T4", 40)])
    _load(con, "L3", T0 + timedelta(days=31), [("T5", 52), ("T2", 21), ("T6", 60)])
    assert refresh_transactions(con) == "appended 2"
    assert _held(con) == _defined(con)
    assert sorted((r[0], float(r[4])) for r in _held(con)) == [
        ("T1", 10.0),
        ("T2", 20.0),
        ("T4", 40.0),
        ("T5", 50.0),
        ("T6", 60.0),
    ]
