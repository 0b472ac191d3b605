"""warehouse/sql/features/customer.sql on hand-made ledgers."""

from datetime import date

import pytest
from dateutil.relativedelta import relativedelta

from ledgerband.tasks.core.warehouse import run_sql_file
from tests.sql.sqlkit import WINDOW


def _features(con):
    run_sql_file(con, "features", "customer", WINDOW)
    cur = con.execute("select * from features.customer order by customer_id")
    names = [d[0] for d in cur.description]
    return {r[0]: dict(zip(names, r, strict=True)) for r in cur.fetchall()}


def test_behaviour_features_from_a_small_ledger(con, ledger):
    ledger.add("C1", date(2026, 8, 3), 40.0, merchant_region="North Reach", balance_after=900.0)
    ledger.add("C1", date(2026, 8, 3), 150.0, merchant_region="South Reach", balance_after=750.0)
    ledger.add(
        "C1", date(2026, 9, 10), 100.0, merchant_region="South Reach", balance_after=650.0
    )  # not > 100
    ledger.add("C1", date(2026, 10, 1), 60.0, "CRDT", bank_txn_code="PMNT/RCDT/DMCT", balance_after=710.0)
    ledger.pay("C1", [date(2026, 8, 28), date(2026, 9, 28)], 3000.0, balance_after=3710.0)
    ledger.load()
    f = _features(con)["C1"]
    assert f["debit_count"] == 3  # credits, payroll or not, are no spending
    assert f["debits_per_week"] == pytest.approx(3 / (92 / 7))  # 92 days from 1 Aug to 31 Oct
    assert f["days_with_debit"] == 2
    assert f["largest_debit"] == 150.0
    assert f["count_large_debits"] == 1
    assert f["total_debit_amount"] == 290.0
    assert f["mean_debit_amount"] == pytest.approx(290 / 3)
    # Median of every posting's balance: 650, 710, 750, 900, 3710, 3710.
    assert f["median_balance"] == pytest.approx((750 + 900) / 2)
    assert f["top_merchant_region"] == "South Reach"


def test_credits_never_reach_the_spending_features(con, ledger):
    """Income must not leak: payroll is the label, other credits are income of the unlabelled."""
    ledger.add("C1", date(2026, 8, 3), 40.0)
    ledger.add("C2", date(2026, 8, 3), 40.0)
    ledger.pay("C2", [date(2026, 8, 28)], 3000.0)
    ledger.add("C2", date(2026, 9, 1), 1200.0, "CRDT", bank_txn_code="PMNT/RCDT/DMCT")
    ledger.load()
    f = _features(con)
    keys = [
        "debit_count",
        "mean_debit_amount",
        "largest_debit",
        "total_debit_amount",
        "days_with_debit",
        "count_large_debits",
        "debits_per_week",
    ]
    assert [f["C1"][k] for k in keys] == [f["C2"][k] for k in keys]


def test_merchant_region_tie_goes_to_the_alphabetically_first(con, ledger):
    ledger.add("C1", date(2026, 8, 3), 10.0, merchant_region="South Reach")
    ledger.add("C1", date(2026, 8, 4), 10.0, merchant_region="North Reach")
    ledger.load()
    assert _features(con)["C1"]["top_merchant_region"] == "North Reach"


def test_customer_without_transactions_gets_zero_counts(con, ledger):
    ledger.add("C1", date(2026, 8, 3), 10.0)
    ledger.load(customers=[("C1", "1980-01-01", "North Reach"), ("C9", "1990-05-05", "South Reach")])
    f = _features(con)["C9"]
    assert (f["debit_count"], f["count_large_debits"], f["top_merchant_region"]) == (0, 0, "none")
    assert f["largest_debit"] is None


@pytest.mark.parametrize(
    "birth",
    [
        "1980-10-31",
        "1980-11-01",
        "2000-02-29",
        "1966-01-01",
    ],  # birthday on, a day after the window end, leap day, plain
)
def test_age_at_window_end_matches_dateutil(con, ledger, birth):
    # Reference: dateutil.relativedelta gives completed years between two dates.
    ledger.add("C1", date(2026, 8, 3), 10.0)
    ledger.load(customers=[("C1", birth, "North Reach")])
    expected = relativedelta(date(2026, 10, 31), date.fromisoformat(birth)).years
    assert _features(con)["C1"]["age_years"] == expected


def test_median_balance_equals_numpy_median_for_odd_and_even_counts(con, ledger):
    """Reference: numpy.median (the mean of the middle two values for an even count).

    Balances in cents chosen at random, so middle pairs often differ by an odd number of cents and the
    median falls on a half cent (DuckDB's median() on DECIMAL rounds that to a cent; ours must not).
    """
    import numpy as np

    rng = np.random.default_rng(20261203)
    expected = {}
    for i, n in enumerate([1, 2, 3, 4, 7, 10, 25, 26]):
        customer = f"C{i}"
        cents = rng.integers(-50_000, 500_000, size=n)
        for k, c in enumerate(cents):
            ledger.add(customer, date(2026, 8, 1) + relativedelta(days=int(k)), 10.0, balance_after=c / 100)
        expected[customer] = float(np.median(cents / 100))
    ledger.load()
    f = _features(con)
    assert {c: f[c]["median_balance"] for c in expected} == pytest.approx(expected, abs=1e-9)
    assert any(round(v * 100) != v * 100 for v in expected.values())  # a half cent is among the cases
