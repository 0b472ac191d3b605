"""warehouse/sql/staging/transactions.sql: only accepted, unquarantined, first-seen records."""

from datetime import date, datetime

from ledgerband.tasks.core.warehouse import run_sql_file
from tests.sql.sqlkit import WINDOW


def test_quarantined_records_do_not_reach_staging(con, ledger):
    ledger.add("C1", date(2026, 10, 1), 10.0)
    ledger.add("C1", date(2026, 10, 2), 20.0)
    ledger.load()
    con.execute(
        "insert into quarantine.ledger_lines values ('L1', 'f.csv', 3, ['amount_format'], 'x', null, ?)",
        [datetime.now()],
    )
    run_sql_file(con, "staging", "transactions")
    assert con.execute("select txn_id from staging.transactions").fetchall() == [("T00001",)]


def test_records_of_a_load_not_yet_accepted_are_invisible(con, ledger):
    ledger.add("C1", date(2026, 10, 1), 10.0)
    ledger.load(status="loaded")
    assert con.execute("select count(*) from staging.transactions").fetchall()[0][0] == 0


def test_a_txn_id_twice_in_one_load_never_doubles_in_staging(con, ledger):
    # Validation quarantines both copies; staging still never holds a txn_id twice (belt and braces).
    ledger.add("C1", date(2026, 10, 1), 10.0, txn_id="DUP")
    ledger.add("C1", date(2026, 10, 2), 99.0, txn_id="DUP")
    ledger.load()
    assert con.execute("select amount::double, source_line from staging.transactions").fetchall() == [
        (10.0, 2)
    ]


def test_payroll_is_recognised_by_purpose_or_sub_family(con, ledger):
    """warehouse/sql/intermediate/payroll_credits.sql: which credits count as payroll by their codes."""
    # ISO 20022: purpose code SALA, or bank transaction code sub-family SALA (PMNT/RCDT/SALA).
    ledger.add("C1", date(2026, 10, 1), 1.0, "CRDT", purpose_code="SALA", bank_txn_code="PMNT/RCDT/DMCT")
    ledger.add("C1", date(2026, 10, 2), 2.0, "CRDT", bank_txn_code="PMNT/RCDT/SALA")
    ledger.add("C1", date(2026, 10, 3), 3.0, "CRDT", purpose_code="PENS", bank_txn_code="PMNT/RCDT/DMCT")
    ledger.add(
        "C1", date(2026, 10, 4), 4.0, "DBIT", purpose_code="SALA", bank_txn_code="PMNT/ICDT/SALA"
    )  # paying staff
    ledger.add("C1", date(2026, 10, 5), 5.0, "CRDT", bank_txn_code="PMNT/RCDT/DMCT")  # no purpose code
    ledger.load()
    params = {
        **WINDOW,
        "salary_window_start": WINDOW["window_start"],
        "min_payer_customers": 3,
        "pensions_observed": True,
    }
    for name in ("received_credits", "payers", "payroll_credits"):
        run_sql_file(con, "intermediate", name, params)
    got = con.execute(
        "select amount::double, income_kind from intermediate.payroll_credits order by amount"
    ).fetchall()
    assert got == [(1.0, "salary"), (2.0, "salary"), (3.0, "pension")]  # PENS: a pension, never pay


def test_a_txn_id_in_a_later_accepted_load_keeps_the_earlier_booking(con, ledger):
    from ledgerband.tasks.ingest.extract_contract import LEDGER_COLUMNS

    ledger.add("C1", date(2026, 10, 1), 10.0, txn_id="DUP")
    ledger.load()  # load L1, loaded 2026-11-02 06:00
    con.execute(
        "insert into ops.loads (load_id, dataset, period, source_file, sha256, status, loaded_at) "
        "values ('L0', 'ledger', '2026-10', 'g.csv', 'z', 'accepted', ?)",
        [datetime(2026, 11, 3)],
    )
    values = {**ledger.lines[0], "amount": "99.00"}
    con.execute(
        f"insert into raw.ledger_lines (load_id, source_file, source_line, {', '.join(LEDGER_COLUMNS)}) "
        f"values ('L0', 'g.csv', 2, {', '.join('?' * len(LEDGER_COLUMNS))})",
        [values[c] for c in LEDGER_COLUMNS],
    )
    run_sql_file(con, "staging", "transactions")
    assert con.execute("select amount::double, load_id from staging.transactions").fetchall() == [
        (10.0, "L1")
    ]
