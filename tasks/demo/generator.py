"""Synthetic demo data for a fictional institution: monthly ledger extracts, manifests, customers.

Everything here is invented: Corrandale Mutual Savings, its regions and its customers do not exist.
Incomes are drawn from a skewed (log-normal) distribution that depends on age, region and a latent
occupation group; spending, balances and merchant-category mix depend on income with noise. Payroll
arrives weekly, fortnightly, four-weekly or monthly, moved to the previous business day when it falls
on a weekend; about 15% of customers have no payroll credits here. Each customer's true income goes to
an answer file the pipeline never reads.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from datetime import date, timedelta
from decimal import Decimal
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
from ledgerband.tasks.errors import LedgerbandError
from ledgerband.tasks.landing.contract import CUSTOMER_COLUMNS, sha256_file
from ledgerband.tasks.period import Period

REGIONS = (
    "Corrandale Central",
    "Velmora Coast",
    "Quellbrook",
    "Hathervane Hills",
    "Silvermarsh",
    "Oakhollow",
)
REGION_PAY_FACTOR = np.array([1.15, 1.05, 0.95, 0.90, 0.85, 1.00])

# Latent occupation groups (not in the customer file): median net annual pay, share of customers.
OCCUPATIONS = ("care_and_service", "trades", "office", "professional", "senior_specialist")
OCC_MEDIAN = np.array([24_000, 33_000, 39_000, 56_000, 85_000.0])
OCC_SHARE = np.array([0.25, 0.22, 0.25, 0.20, 0.08])

# ISO 18245 merchant category codes used for card payments, with a basic and a discretionary weight.
MCC = np.array(["5411", "5541", "5912", "4111", "5311", "5812", "5732", "7011", "4511", "5999"])
MCC_BASIC = np.array([0.40, 0.14, 0.08, 0.10, 0.08, 0.08, 0.03, 0.01, 0.01, 0.07])
MCC_DISCRETIONARY = np.array([0.18, 0.08, 0.05, 0.04, 0.12, 0.22, 0.10, 0.08, 0.07, 0.06])

# ISO 20022 bank transaction codes (Domain/Family/SubFamily) and external purpose codes.
BTC_SALARY = "PMNT/RCDT/SALA"
BTC_TRANSFER_IN = "PMNT/RCDT/DMCT"
BTC_TRANSFER_OUT = "PMNT/ICDT/DMCT"
BTC_DIRECT_DEBIT = "PMNT/RDDT/ESDD"
BTC_CARD = "PMNT/CCRD/POSD"
BTC_CASH = "PMNT/CCRD/CWDL"

FREQUENCIES = ("weekly", "fortnightly", "four_weekly", "monthly")
FREQUENCY_SHARE = np.array([0.10, 0.20, 0.15, 0.55])
PERIODS_PER_YEAR = {
    "weekly": 365.25 / 7,
    "fortnightly": 365.25 / 14,
    "four_weekly": 365.25 / 28,
    "monthly": 12.0,
}


@dataclass(frozen=True)
class DemoFiles:
    landing_dir: Path
    periods: list[str]
    extracts: list[Path]
    manifests: list[Path]
    customers: Path
    answers: Path
    rows: int


def _previous_business_day(d: date) -> date:
    while d.weekday() >= 5:  # Saturday=5, Sunday=6
        d -= timedelta(days=1)
    return d


def _pay_dates(freq: str, anchor: date, start: date, end: date, pay_day: int) -> list[date]:
    """Scheduled pay dates in [start, end], each moved to the previous business day."""
    out: list[date] = []
    if freq == "monthly":
        p = Period(start.year, start.month)
        while p.start <= end:
            nominal = date(p.year, p.month, min(pay_day, p.end.day))
            out.append(_previous_business_day(nominal))
            p = p.shift(1)
    else:
        step = {"weekly": 7, "fortnightly": 14, "four_weekly": 28}[freq]
        d = anchor
        while d <= end:
            if d >= start:
                out.append(_previous_business_day(d))
            d += timedelta(days=step)
    return [d for d in out if start <= d <= end]


def _customers(rng: np.random.Generator, n: int, end: date) -> pd.DataFrame:
    age = np.clip(rng.normal(44, 14, n), 19, 84).round().astype(int)
    region_idx = rng.choice(len(REGIONS), n, p=[0.26, 0.18, 0.16, 0.14, 0.12, 0.14])
    occ_idx = rng.choice(len(OCCUPATIONS), n, p=OCC_SHARE)
    # Older customers a little more often in senior roles; the very young rarely.
    occ_idx = np.where((age < 25) & (occ_idx == 4), 2, occ_idx)
    age_factor = np.exp(-(((age - 50) / 22.0) ** 2) * 0.45) * 0.45 + 0.62
    income = OCC_MEDIAN[occ_idx] * REGION_PAY_FACTOR[region_idx] * age_factor * rng.lognormal(0, 0.22, n)
    income = np.round(income, -1)
    birth = [end - timedelta(days=int(a * 365.25 + rng.integers(0, 365))) for a in age]
    opened = [end - timedelta(days=int(rng.integers(200, 365 * 15))) for _ in range(n)]
    return pd.DataFrame(
        {
            "customer_id": [f"CU{100000 + i:06d}" for i in range(n)],
            "account_id": [f"AC{5000000 + i * 7:07d}" for i in range(n)],
            "birth_date": birth,
            "sex": rng.choice(["F", "M"], n),
            "home_region_idx": region_idx,
            "home_region": np.array(REGIONS)[region_idx],
            "opened_date": opened,
            "age": age,
            "occupation": np.array(OCCUPATIONS)[occ_idx],
            "income": income,
        }
    )


def _income_credits(
    rng: np.random.Generator, cust: pd.DataFrame, start: date, end: date
) -> tuple[list, pd.DataFrame]:
    """Payroll and other income credits; returns (rows, per-customer pay facts for the answer file)."""
    rows: list[tuple] = []
    facts = []
    n = len(cust)
    kind = rng.choice(
        ["payroll", "self_employed", "pension_or_benefit", "paid_elsewhere"], n, p=[0.85, 0.07, 0.04, 0.04]
    )
    for i, c in enumerate(cust.itertuples(index=False)):
        if kind[i] == "payroll":
            jobs = 2 if rng.random() < 0.06 else 1
            shares = [1.0] if jobs == 1 else [0.7, 0.3]
            freqs = []
            for j in range(jobs):
                freq = str(rng.choice(FREQUENCIES, p=FREQUENCY_SHARE))
                freqs.append(freq)
                employer = f"EMP-{int(rng.integers(1, 400)):04d}"
                amount = round(c.income * shares[j] / PERIODS_PER_YEAR[freq], 2)
                anchor = start - timedelta(days=int(rng.integers(0, 28)))
                anchor = anchor - timedelta(days=(anchor.weekday() - 4) % 7)  # a Friday
                pay_day = int(rng.choice([1, 15, 20, 25, 28, 31]))
                # Most employers also send the salary sub-family code; all send purpose SALA (payroll
                # without any code needs recurrence-based detection, which comes later).
                salary_subfamily = rng.random() < 0.7
                for d in _pay_dates(freq, anchor, start, end, pay_day):
                    rows.append(
                        (
                            c.customer_id,
                            c.account_id,
                            d,
                            amount,
                            "CRDT",
                            BTC_SALARY if salary_subfamily else BTC_TRANSFER_IN,
                            "SALA",
                            employer,
                            None,
                            None,
                        )
                    )
            facts.append((c.customer_id, c.income, "payroll", "+".join(freqs)))
        elif kind[i] == "pension_or_benefit":
            amount = round(c.income / 12, 2)
            for d in _pay_dates("monthly", start, start, end, 10):
                rows.append(
                    (
                        c.customer_id,
                        c.account_id,
                        d,
                        amount,
                        "CRDT",
                        BTC_TRANSFER_IN,
                        "PENS",
                        "GOV-0001",
                        None,
                        None,
                    )
                )
            facts.append((c.customer_id, c.income, kind[i], None))
        else:
            # Irregular credits from several payers (clients, or the customer's own account elsewhere).
            days = (end - start).days + 1
            k = max(2, int(rng.poisson(2.5 * days / 30)))
            parts = rng.dirichlet(np.ones(k)) * c.income * days / 365.25
            payer_pool = [f"CP-{int(rng.integers(1, 90_000)):05d}" for _ in range(3)]
            for part in parts:
                d = _previous_business_day(start + timedelta(days=int(rng.integers(0, days))))
                rows.append(
                    (
                        c.customer_id,
                        c.account_id,
                        d,
                        round(float(part), 2),
                        "CRDT",
                        BTC_TRANSFER_IN,
                        None,
                        str(rng.choice(payer_pool)),
                        None,
                        None,
                    )
                )
            facts.append((c.customer_id, c.income, kind[i], None))
    answers = pd.DataFrame(
        facts, columns=["customer_id", "true_annual_income", "income_kind", "pay_frequency"]
    )
    return rows, answers


def _spending(rng: np.random.Generator, cust: pd.DataFrame, start: date, end: date) -> list[tuple]:
    rows: list[tuple] = []
    days = (end - start).days + 1
    months = days / 30.4375
    region_names = np.array(REGIONS)
    for c in cust.itertuples(index=False):
        rel = c.income / 45_000
        spend_ratio = float(np.clip(rng.normal(0.78 - 0.12 * np.log(rel), 0.20), 0.30, 1.30))
        monthly_spend = c.income / 12 * spend_ratio
        housing = monthly_spend * float(rng.uniform(0.20, 0.50))
        utilities = monthly_spend * float(rng.uniform(0.05, 0.09))
        card_budget = monthly_spend - housing - utilities
        # Direct debits: housing on a fixed day, two utilities.
        p = Period(start.year, start.month)
        landlord = f"MER-{int(rng.integers(1, 99_999)):05d}"
        util = [f"MER-{int(rng.integers(1, 99_999)):05d}" for _ in range(2)]
        housing_day, util_day = int(rng.integers(1, 6)), int(rng.integers(8, 20))
        while p.start <= end:
            rows.append(
                (
                    c.customer_id,
                    c.account_id,
                    _previous_business_day(date(p.year, p.month, housing_day)),
                    round(housing, 2),
                    "DBIT",
                    BTC_DIRECT_DEBIT,
                    None,
                    landlord,
                    None,
                    None,
                )
            )
            for u, share in zip(util, (0.6, 0.4), strict=True):
                rows.append(
                    (
                        c.customer_id,
                        c.account_id,
                        _previous_business_day(date(p.year, p.month, util_day)),
                        round(utilities * share * float(rng.uniform(0.85, 1.15)), 2),
                        "DBIT",
                        BTC_DIRECT_DEBIT,
                        None,
                        u,
                        None,
                        None,
                    )
                )
            p = p.shift(1)
        # Card payments: count and discretionary mix rise with income.
        n_card = int(rng.poisson((14 + 12 * np.sqrt(rel)) * months))
        if n_card:
            w = np.clip(0.25 + 0.25 * np.log(rel), 0.05, 0.85)
            mix = (1 - w) * MCC_BASIC + w * MCC_DISCRETIONARY
            mcc = rng.choice(MCC, n_card, p=mix / mix.sum())
            raw = rng.lognormal(0, 0.75, n_card)
            amounts = np.maximum(np.round(raw / raw.sum() * card_budget * months, 2), 0.5)
            away = rng.random(n_card) < np.clip(0.15 + 0.1 * rel, 0.1, 0.6)
            region = np.where(away, region_names[rng.integers(0, len(REGIONS), n_card)], c.home_region)
            d = rng.integers(0, days, n_card)
            merchants = rng.integers(1, 99_999, n_card)
            for k in range(n_card):
                rows.append(
                    (
                        c.customer_id,
                        c.account_id,
                        start + timedelta(days=int(d[k])),
                        float(amounts[k]),
                        "DBIT",
                        BTC_CARD,
                        None,
                        f"MER-{merchants[k]:05d}",
                        str(mcc[k]),
                        str(region[k]),
                    )
                )
        # Cash withdrawals and an occasional transfer out.
        for _ in range(int(rng.poisson(2 * months))):
            rows.append(
                (
                    c.customer_id,
                    c.account_id,
                    start + timedelta(days=int(rng.integers(0, days))),
                    float(rng.choice([20, 50, 100, 200])),
                    "DBIT",
                    BTC_CASH,
                    None,
                    None,
                    None,
                    None,
                )
            )
        for _ in range(int(rng.poisson(0.8 * months))):
            rows.append(
                (
                    c.customer_id,
                    c.account_id,
                    start + timedelta(days=int(rng.integers(0, days))),
                    round(float(rng.lognormal(np.log(150 * rel + 30), 0.8)), 2),
                    "DBIT",
                    BTC_TRANSFER_OUT,
                    None,
                    f"CP-{int(rng.integers(1, 90_000)):05d}",
                    None,
                    None,
                )
            )
    return rows


def _to_cents(x: pd.Series) -> pd.Series:
    return np.round(x.astype(float) * 100).astype("int64")


def _format_cents(cents: pd.Series) -> pd.Series:
    sign = np.where(cents < 0, "-", "")
    a = np.abs(cents)
    return (
        pd.Series(sign, index=cents.index) + (a // 100).astype(str) + "." + (a % 100).astype(str).str.zfill(2)
    )


def generate(
    landing_dir: Path,
    answers_path: Path,
    *,
    customers: int = 2_000,
    months: int = 3,
    end_period: str = "2026-10",
    seed: int = 7,
    file_format: str = "csv",
    institution: str = "Corrandale Mutual Savings",
) -> DemoFiles:
    """Write `months` monthly extracts ending at `end_period`, their manifests and customers.csv.

    Same arguments, same bytes: files are reproducible, so a rerun loads nothing twice.
    """
    if file_format not in ("csv", "parquet"):
        raise LedgerbandError(f"demo file format must be csv or parquet, not {file_format!r}")
    if not 1 <= months <= 24 or customers < 50:
        raise LedgerbandError(
            f"demo needs 1 to 24 months and at least 50 customers (got {months}, {customers})"
        )
    rng = np.random.default_rng(seed)
    periods = list(Period.parse(end_period).window(months))
    start, end = periods[0].start, periods[-1].end
    cust = _customers(rng, customers, end)
    income_rows, answers = _income_credits(rng, cust, start, end)
    rows = income_rows + _spending(rng, cust, start, end)
    cols = [
        "customer_id",
        "account_id",
        "booking_date",
        "amount",
        "direction",
        "bank_txn_code",
        "purpose_code",
        "counterparty_id",
        "merchant_category",
        "merchant_region",
    ]
    tx = pd.DataFrame(rows, columns=cols)
    tx["cents"] = _to_cents(tx["amount"])
    # Weekend moves can push a booking before the first month; the extracts cover whole months only.
    tx = tx[(tx["cents"] > 0) & (tx["booking_date"] >= start) & (tx["booking_date"] <= end)]
    # Credits post before debits on the same day; stable order within a day keeps balances reproducible.
    tx["_dir_order"] = (tx["direction"] == "DBIT").astype(int)
    tx = tx.sort_values(["account_id", "booking_date", "_dir_order", "cents"], kind="mergesort").reset_index(
        drop=True
    )
    signed = np.where(tx["direction"] == "CRDT", tx["cents"], -tx["cents"])
    opening = (
        (cust.set_index("account_id")["income"] * rng.uniform(0.01, 0.25, len(cust)) * 100)
        .round()
        .astype("int64")
    )
    tx["balance_cents"] = (
        opening.reindex(tx["account_id"]).to_numpy()
        + pd.Series(signed).groupby(tx["account_id"]).cumsum().to_numpy()
    )
    tx["currency"] = "EUR"

    landing_dir.mkdir(parents=True, exist_ok=True)
    extracts, manifests = [], []
    for p in periods:
        month = tx[(tx["booking_date"] >= p.start) & (tx["booking_date"] <= p.end)]
        month = month.sort_values(["booking_date", "account_id"], kind="mergesort").reset_index(drop=True)
        out = pd.DataFrame(
            {
                "txn_id": [f"CMS{p.year:04d}{p.month:02d}{k:08d}" for k in range(len(month))],
                "account_id": month["account_id"],
                "customer_id": month["customer_id"],
                "booking_date": month["booking_date"].map(date.isoformat),
                "amount": _format_cents(month["cents"]),
                "direction": month["direction"],
                "currency": month["currency"],
                "balance_after": _format_cents(month["balance_cents"]),
                "bank_txn_code": month["bank_txn_code"],
                "purpose_code": month["purpose_code"],
                "counterparty_id": month["counterparty_id"],
                "merchant_category": month["merchant_category"],
                "merchant_region": month["merchant_region"],
            }
        )
        folder = landing_dir / str(p)
        folder.mkdir(parents=True, exist_ok=True)
        path = folder / f"ledger-{p}.{file_format}"
        if file_format == "csv":
            out.to_csv(path, index=False, lineterminator="\n")
        else:
            table = pa.Table.from_pandas(out, preserve_index=False)
            for col in ("amount", "balance_after"):
                table = table.set_column(
                    table.schema.get_field_index(col), col, pc.cast(table[col], pa.decimal128(18, 2))
                )
            table = table.set_column(
                table.schema.get_field_index("booking_date"),
                "booking_date",
                pc.cast(table["booking_date"], pa.date32()),
            )
            pq.write_table(table, path)
        credit = int(month.loc[month["direction"] == "CRDT", "cents"].sum())
        debit = int(month.loc[month["direction"] == "DBIT", "cents"].sum())
        manifest = {
            "period": str(p),
            "institution": institution,
            "file": path.name,
            "sha256": sha256_file(path),
            "row_count": int(len(out)),
            "credit_total": str(Decimal(credit) / 100),
            "debit_total": str(Decimal(debit) / 100),
        }
        mpath = folder / f"ledger-{p}.manifest.json"
        mpath.write_text(json.dumps(manifest, indent=2) + "\n")
        extracts.append(path)
        manifests.append(mpath)

    customers_path = landing_dir / "customers.csv"
    cust_out = cust[list(CUSTOMER_COLUMNS)].copy()
    for col in ("birth_date", "opened_date"):
        cust_out[col] = cust_out[col].map(date.isoformat)
    cust_out.to_csv(customers_path, index=False, lineterminator="\n")

    answers_path.parent.mkdir(parents=True, exist_ok=True)
    answers = answers.merge(cust[["customer_id", "occupation", "age"]], on="customer_id")
    answers.to_csv(answers_path, index=False, lineterminator="\n")
    return DemoFiles(
        landing_dir, [str(p) for p in periods], extracts, manifests, customers_path, answers_path, len(tx)
    )
