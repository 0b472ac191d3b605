import csv
import hashlib
import json
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
