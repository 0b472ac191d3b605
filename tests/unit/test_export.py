"""Exports for readers: CSV text that a spreadsheet would run as a formula is neutralised."""

from __future__ import annotations

import csv

import duckdb
import pytest

from ledgerband.tasks.core.errors import LedgerbandError
from ledgerband.tasks.publish.export import export_period


def _published(path, customer_ids):
    con = duckdb.connect(str(path))
    con.execute("create table snapshots (run_id varchar, period varchar, published_at timestamp)")
    con.execute("insert into snapshots values ('r1', '2026-10', now())")
    con.execute(
        "create table income_bands_history (run_id varchar, period varchar, customer_id varchar, "
        "income_band varchar, annual_income_estimate decimal(18, 2))"
    )
    for i, cid in enumerate(customer_ids):
        con.execute("insert into income_bands_history values ('r1', '2026-10', ?, 'B2', ?)", [cid, -5.5 + i])
    for table in ("band_summary_history", "band_movers_history"):
        con.execute(f"create table {table} (run_id varchar, period varchar, customer_count bigint)")
    con.close()


def test_csv_cells_that_start_a_formula_are_prefixed(tmp_path):
    # OWASP "CSV Injection": cells beginning with =, +, -, @ (or tab / carriage return) are executed by
    # spreadsheets; the usual defence is a leading apostrophe. Numbers stay numbers (the -5.50 below).
    hostile = ['=HYPERLINK("http://x","y")', "+1+1", "-2+3", "@SUM(A1)", "\tTAB", "CU100001"]
    db = tmp_path / "published.duckdb"
    _published(db, hostile)
    files = export_period(db, "2026-10", "csv", tmp_path / "out")
    with files["income_bands"].open(newline="") as f:
        rows = list(csv.DictReader(f))
    assert [r["customer_id"] for r in rows] == ["'" + h for h in hostile[:5]] + ["CU100001"]
    assert rows[0]["annual_income_estimate"] == "-5.50"
    assert rows[0]["income_band"] == "B2"


def test_parquet_export_keeps_text_verbatim(tmp_path):
    db = tmp_path / "published.duckdb"
    _published(db, ["=1+1"])
    files = export_period(db, "2026-10", "parquet", tmp_path / "out")
    got = duckdb.sql(f"select customer_id from read_parquet('{files['income_bands']}')").fetchall()
    assert got == [("=1+1",)]  # Parquet is not run by spreadsheets: stored as it is


def test_an_unpublished_month_is_named(tmp_path):
    db = tmp_path / "published.duckdb"
    _published(db, ["CU1"])
    with pytest.raises(LedgerbandError, match="2026-09 has no published snapshot"):
        export_period(db, "2026-09", "csv", tmp_path / "out")
