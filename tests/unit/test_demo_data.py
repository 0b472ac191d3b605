import csv
import hashlib
import json
import re
from decimal import Decimal

import numpy as np
import pandas as pd
import pytest

from ledgerband.tasks.demo.generator import generate
from ledgerband.tasks.ingest.extract_contract import LEDGER_COLUMNS


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    root = tmp_path_factory.mktemp("demo")
    return generate(
        root / "landing",
        root / "answers" / "true_income.csv",
        customers=200,
        months=2,
        end_period="2026-10",
        seed=3,
    )


def test_same_seed_gives_byte_identical_extracts(demo, tmp_path):
    again = generate(
        tmp_path / "landing", tmp_path / "answers.csv", customers=200, months=2, end_period="2026-10", seed=3
    )
    for a, b in zip(demo.extracts, again.extracts, strict=True):
        assert a.read_bytes() == b.read_bytes()


def test_manifest_matches_the_file_it_describes(demo):
    # Recomputed independently with the standard library (csv + Decimal), not with the generator's code.
    for extract, manifest_path in zip(demo.extracts, demo.manifests, strict=True):
        manifest = json.loads(manifest_path.read_text())
        assert manifest["sha256"] == hashlib.sha256(extract.read_bytes()).hexdigest()
        with extract.open(newline="") as f:
            rows = list(csv.DictReader(f))
        assert list(rows[0].keys()) == list(LEDGER_COLUMNS)
        assert manifest["row_count"] == len(rows)
        for direction, key in (("CRDT", "credit_total"), ("DBIT", "debit_total")):
            assert Decimal(manifest[key]) == sum(
                Decimal(r["amount"]) for r in rows if r["direction"] == direction
            )


def test_payroll_never_lands_on_a_weekend(demo):
    # Reference: numpy.is_busday with the default Monday-Friday week.
    frames = [pd.read_csv(p, dtype=str) for p in demo.extracts]
    pay = pd.concat(frames).query("purpose_code == 'SALA'")
    assert len(pay) > 0
    assert np.is_busday(pay["booking_date"].to_numpy(dtype="datetime64[D]")).all()


def test_about_fifteen_percent_have_no_payroll(demo):
    answers = pd.read_csv(demo.answers)
    share = (answers["income_kind"] != "payroll").mean()
    assert 0.08 <= share <= 0.22  # 15% drawn at random for 200 customers: ±~5 points is 2 standard errors


def test_balances_chain_within_each_account(demo):
    # Within an account, in file order, each balance differs from the previous one by the signed amount.
    tx = pd.concat([pd.read_csv(p, dtype=str) for p in demo.extracts], ignore_index=True)
    cents = (tx["amount"].astype(float) * 100).round().astype(int)
    balance = (tx["balance_after"].astype(float) * 100).round().astype(int)
    signed = pd.Series(np.where(tx["direction"] == "CRDT", cents, -cents))
    step = balance.groupby(tx["account_id"]).diff()
    moved = step.notna()
    assert moved.sum() > 0
    assert (step[moved] == signed[moved]).all()


def test_no_names_or_protected_data_in_the_ledger(demo):
    header = demo.extracts[0].read_text().splitlines()[0].split(",")
    assert not {"name", "sex", "birth_date", "age"} & set(header)


def test_same_seed_gives_the_same_verified_incomes_file(demo, tmp_path):
    again = generate(
        tmp_path / "landing", tmp_path / "answers.csv", customers=200, months=2, end_period="2026-10", seed=3
    )
    assert demo.verified_incomes.read_bytes() == again.verified_incomes.read_bytes()
    other = generate(
        tmp_path / "other", tmp_path / "other.csv", customers=200, months=2, end_period="2026-10", seed=4
    )
    assert other.verified_incomes.read_bytes() != demo.verified_incomes.read_bytes()


def test_the_verified_incomes_file_follows_its_contract_and_the_answers_mark_its_customers(demo):
    from ledgerband.tasks.ingest.extract_contract import VERIFIED_INCOME_COLUMNS

    assert demo.verified_incomes.parent == demo.customers.parent  # beside customers.csv
    with demo.verified_incomes.open(newline="") as f:
        rows = list(csv.DictReader(f))
    assert rows and list(rows[0]) == list(VERIFIED_INCOME_COLUMNS)
    answers = pd.read_csv(demo.answers, dtype={"customer_id": str})
    assert answers["verified"].dtype == bool
    assert set(answers.loc[answers["verified"], "customer_id"]) == {r["customer_id"] for r in rows}
    assert len({r["customer_id"] for r in rows}) == len(rows)  # one record per customer
    truth = answers.set_index("customer_id")["true_annual_income"]
    ratios = np.array([float(r["annual_net_income"]) / truth[r["customer_id"]] for r in rows])
    # noise sd 2%: every ratio within 5 sd, and the mean within 4 standard errors of 1
    assert np.all(np.abs(ratios - 1) < 0.10)
    assert abs(ratios.mean() - 1) < 4 * 0.02 / np.sqrt(len(ratios))
    for r in rows:
        assert re.fullmatch(r"[0-9]+\.[0-9]{2}", r["annual_net_income"])  # cents
        assert r["currency"] == "EUR"
        # verified_on: 0-11 months before the last period's end (2026-10-31)
        assert "2025-12-01" <= r["verified_on"] <= "2026-10-31"


def test_verified_customers_are_drawn_at_the_stated_rates(tmp_path):
    """Counts against the rates the demo states (45% not payroll, 8% payroll; x1.3 aged 25-60, x0.6 outside;
    our choice of a lending book), with scipy's exact binomial test as the reference."""
    from scipy.stats import binomtest

    answers = pd.read_csv(
        generate(
            tmp_path / "landing",
            tmp_path / "answers.csv",
            customers=3000,
            months=1,
            end_period="2026-10",
            seed=11,
        ).answers
    )
    inside = answers["age"].between(25, 60)
    for payroll, base in ((True, 0.08), (False, 0.45)):
        for working_age, factor in ((True, 1.3), (False, 0.6)):
            group = answers[((answers["income_kind"] == "payroll") == payroll) & (inside == working_age)]
            if len(group) < 30:
                continue
            p = min(base * factor, 1.0)
            test = binomtest(int(group["verified"].sum()), len(group), p)
            assert test.pvalue > 0.001, (payroll, working_age, group["verified"].mean(), p)
