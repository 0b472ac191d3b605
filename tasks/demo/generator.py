"""Synthetic demo data for a fictional institution: monthly ledger extracts, manifests, customers.

Everything here is invented: Corrandale Mutual Savings, its regions and its customers do not exist.
Incomes are drawn from a skewed (log-normal) distribution that depends on age, region and a latent
occupation group; spending, balances and merchant-category mix depend on income with noise.

Pay comes from employers, each with its own pay calendar (a day of the month, the last Thursday or
Friday, two days a month, or every 7, 14 or 28 days), its own way of moving pay off weekends and the
institution's holidays (numpy's business-day rules, not the pipeline's calendar) and its own coding (most
code salary; one in ten codes nothing). Salaried customers' pay has the life events of real pay: a missed
run, a job change, leaving, joining, a pay rise, bonuses on another day or on the pay day, a second job.
Other customers are self-employed, pensioners or paid elsewhere, and some customers get regular credits
that are not pay (from their own account elsewhere, a lodger, a benefit). Each customer's true income,
true net pay, pay calendar and life event go to an answer file the pipeline never reads. The bank's lending
side writes the optional verified incomes file: incomes documented for the customers who applied for credit
(more often those not paid by payroll here, and those of working age), the true income within a few per
cent; the answer file marks them (`verified`).
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import date, timedelta
from decimal import Decimal
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from ledgerband.tasks.core.errors import LedgerbandError
from ledgerband.tasks.core.period import Period
from ledgerband.tasks.ingest.extract_contract import CUSTOMER_COLUMNS, VERIFIED_INCOMES_FILE, sha256_file

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


@dataclass(frozen=True)
class DemoFiles:
    landing_dir: Path
    periods: list[str]
    extracts: list[Path]
    manifests: list[Path]
    customers: Path
    answers: Path
    rows: int
    verified_incomes: Path  # the optional verified incomes file (beside customers.csv)


def _previous_business_day(d: date) -> date:
    while d.weekday() >= 5:  # Saturday=5, Sunday=6
        d -= timedelta(days=1)
    return d


INCOME_NOISE_SD = 0.15  # log-scale sd of the part of income behaviour never shows
# Customers paid elsewhere often use this bank as a secondary account: the share of their spending here.
SECONDARY_SPENDING_SHARE = (0.25, 0.9)


def _customers(rng: np.random.Generator, n: int, end: date) -> pd.DataFrame:
    age = np.clip(rng.normal(44, 14, n), 19, 84).round().astype(int)
    region_idx = rng.choice(len(REGIONS), n, p=[0.26, 0.18, 0.16, 0.14, 0.12, 0.14])
    occ_idx = rng.choice(len(OCCUPATIONS), n, p=OCC_SHARE)
    # Older customers a little more often in senior roles; the very young rarely.
    occ_idx = np.where((age < 25) & (occ_idx == 4), 2, occ_idx)
    age_factor = np.exp(-(((age - 50) / 22.0) ** 2) * 0.45) * 0.45 + 0.62
    # Behaviour is driven by a customer's spending capacity; income is capacity times a factor no behaviour
    # shows (mean 1). No model of behaviour can beat knowing the capacity, so the error of predicting
    # income by capacity is the demo's error floor; the answer file keeps both.
    capacity = OCC_MEDIAN[occ_idx] * REGION_PAY_FACTOR[region_idx] * age_factor * rng.lognormal(0, 0.22, n)
    hidden = rng.normal(-(INCOME_NOISE_SD**2) / 2, INCOME_NOISE_SD, n)
    income = np.round(capacity * np.exp(hidden), -1)
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
            "capacity": capacity,
        }
    )


# --- Income: employers with their own pay calendars, what happens to people's pay, other credits ---------

KINDS = ("payroll", "self_employed", "pension_or_benefit", "paid_elsewhere")
KIND_SHARE = np.array([0.82, 0.07, 0.05, 0.06])
PATTERNS = ("monthly_day", "monthly_last_weekday", "semi_monthly", "weekly", "fortnightly", "four_weekly")
PATTERN_SHARE = np.array([0.42, 0.08, 0.07, 0.09, 0.19, 0.15])
PATTERN_FREQUENCY = {
    "monthly_day": "monthly",
    "monthly_last_weekday": "monthly",
    "semi_monthly": "semi_monthly",
    "weekly": "weekly",
    "fortnightly": "fortnightly",
    "four_weekly": "four_weekly",
}
# Pay days a year, by the generator's own definition: month-tied pay by count, cycles over a Julian year.
PERIODS_PER_YEAR = {
    "monthly": 12.0,
    "semi_monthly": 24.0,
    "weekly": 365.25 / 7,
    "fortnightly": 365.25 / 14,
    "four_weekly": 365.25 / 28,
}
CYCLE_DAYS = {"weekly": 7, "fortnightly": 14, "four_weekly": 28}
# What happens to a salaried customer's pay in the window (shares of salaried customers).
LIFE_EVENTS = (
    "none",
    "missed_run",
    "job_change",
    "leaver",
    "new_joiner",
    "pay_rise",
    "bonus_other_day",
    "same_day_bonus",
    "two_jobs",
)
LIFE_EVENT_SHARE = np.array([0.66, 0.03, 0.04, 0.02, 0.04, 0.07, 0.05, 0.04, 0.05])
UNCODED_EMPLOYER_SHARE = 0.10
# Regular credits that are not pay (shares of all customers).
OWN_ACCOUNT_SHARE, LODGER_SHARE, BENEFIT_SHARE = 0.06, 0.03, 0.05
# ISO 20022 purpose code of a benefit (from memory: BENE, unemployment/disability benefit).
PURPOSE_BENEFIT = "BENE"


@dataclass(frozen=True)
class Employer:
    payer_id: str
    pattern: str
    days: tuple[int, ...]  # day(s) of the month; iso weekday (last weekday); days after the anchor (cycles)
    roll: str  # pay due on a non-business day goes to the business day 'backward' or 'forward'
    coding: str  # 'purpose_and_subfamily' | 'purpose' | 'subfamily' | 'none'

    @property
    def frequency(self) -> str:
        return PATTERN_FREQUENCY[self.pattern]

    @property
    def periods_per_year(self) -> float:
        return PERIODS_PER_YEAR[self.frequency]

    @property
    def codes(self) -> tuple[str, str | None]:
        """(bank transaction code, purpose code) of this employer's pay credits."""
        return {
            "purpose_and_subfamily": (BTC_SALARY, "SALA"),
            "purpose": (BTC_TRANSFER_IN, "SALA"),
            "subfamily": (BTC_SALARY, None),
            "none": (BTC_TRANSFER_IN, None),
        }[self.coding]


def holiday_array(holidays: Sequence[str], start: date, end: date) -> np.ndarray:
    """The institution's holidays (MM-DD every year, or YYYY-MM-DD once) as numpy dates."""
    days = []
    for text in holidays:
        if len(text) == 5:
            days += [date(y, int(text[:2]), int(text[3:])) for y in range(start.year - 1, end.year + 2)]
        else:
            days.append(date.fromisoformat(text))
    return np.array(sorted(days), dtype="datetime64[D]")


def _roll(days: list[date], roll: str, holidays: np.ndarray) -> list[date]:
    """Move days off weekends and holidays with numpy's business-day rules (not the pipeline's calendar)."""
    if not days:
        return []
    out = np.busday_offset(np.array(days, dtype="datetime64[D]"), 0, roll=roll, holidays=holidays)
    return [d.astype(object) for d in out]


def _last_weekday(p: Period, iso_weekday: int) -> date:
    return p.end - timedelta(days=(p.end.isoweekday() - iso_weekday) % 7)


def pay_days(emp: Employer, start: date, end: date, holidays: np.ndarray) -> list[date]:
    """The days the employer's pay lands on within [start, end]."""
    first, last = start - timedelta(days=40), end + timedelta(days=40)
    nominal: list[date] = []
    if emp.pattern in CYCLE_DAYS:
        step = CYCLE_DAYS[emp.pattern]
        d = date(2000, 1, 7) + timedelta(days=emp.days[0])  # a Friday, plus the employer's phase
        d += timedelta(days=step * ((first - d).days // step))
        while d <= last:
            nominal.append(d)
            d += timedelta(days=step)
    else:
        p = Period.of(first)
        while p.start <= last:
            if emp.pattern == "monthly_last_weekday":
                nominal.append(_last_weekday(p, emp.days[0]))
            else:
                nominal += [date(p.year, p.month, min(day, p.end.day)) for day in emp.days]
            p = p.shift(1)
    return sorted(d for d in set(_roll(nominal, emp.roll, holidays)) if start <= d <= end)


def _employers(rng: np.random.Generator, count: int) -> list[Employer]:
    out = []
    for i in range(count):
        pattern = str(rng.choice(PATTERNS, p=PATTERN_SHARE))
        if pattern == "monthly_day":
            days: tuple[int, ...] = (int(rng.choice([1, 5, 10, 15, 20, 25, 28, 31])),)
        elif pattern == "semi_monthly":
            days = ((1, 15), (15, 31), (10, 25))[int(rng.integers(0, 3))]
        elif pattern == "monthly_last_weekday":
            days = (int(rng.choice([4, 5])),)  # the last Thursday or Friday
        else:
            days = (
                7 * int(rng.integers(0, CYCLE_DAYS[pattern] // 7)) - int(rng.integers(0, 2)),
            )  # Fri or Thu
        coding = (
            "none"
            if rng.random() < UNCODED_EMPLOYER_SHARE
            else str(rng.choice(["purpose_and_subfamily", "purpose", "subfamily"], p=[0.6, 0.3, 0.1]))
        )
        roll = "forward" if rng.random() < 0.15 else "backward"
        out.append(Employer(f"EMP-{i + 1:04d}", pattern, days, roll, coding))
    return out


def _labelable(emp: Employer, dates: list[date]) -> bool:
    """Whether these pay days let a careful reader name the calendar: two payments, four for four-weekly."""
    return len(dates) >= (4 if emp.frequency == "four_weekly" else 2)


def _income_credits(
    rng: np.random.Generator, cust: pd.DataFrame, start: date, end: date, holidays: np.ndarray
) -> tuple[list, pd.DataFrame]:
    """Pay and other credits; returns (rows, per-customer facts for the answer file)."""
    rows: list[tuple] = []
    facts = []
    n = len(cust)
    kind = rng.choice(KINDS, n, p=KIND_SHARE)
    event = rng.choice(LIFE_EVENTS, n, p=LIFE_EVENT_SHARE)
    employers = _employers(rng, max(12, int((kind == "payroll").sum()) // 18))
    size = rng.lognormal(0, 1.0, len(employers))
    pick = size / size.sum()
    window_days = (end - start).days + 1

    def credit(c, d, amount, btc, purpose, payer):
        rows.append(
            (c.customer_id, c.account_id, d, round(float(amount), 2), "CRDT", btc, purpose, payer, None, None)
        )

    def pay(c, emp, dates, amount):
        btc, purpose = emp.codes
        for d in dates:
            credit(c, d, amount, btc, purpose, emp.payer_id)

    staff: dict[str, int] = {}
    pending = []
    for i, c in enumerate(cust.itertuples(index=False)):
        fact = {"customer_id": c.customer_id, "true_annual_income": c.income, "income_kind": str(kind[i])}
        if kind[i] == "payroll":
            emp = employers[int(rng.choice(len(employers), p=pick))]
            ev = str(event[i])
            readable = True
            dates = pay_days(emp, start, end, holidays)
            amount = c.income / emp.periods_per_year
            current = [(emp, dates)]  # jobs paying at the window's end, with their pay days here
            if ev == "missed_run" and len(dates) >= 3:
                k = int(rng.integers(1, len(dates) - 1))
                dates = dates[:k] + dates[k + 1 :]
                current = [(emp, dates)]
                pay(c, emp, dates, amount)
            elif ev == "leaver":
                cutoff = end - timedelta(days=35 + int(rng.integers(5, 30)))
                pay(c, emp, [d for d in dates if d <= cutoff], amount)
                current = []
            elif ev == "new_joiner":
                joined = end - timedelta(days=int(rng.integers(35, 80)))
                dates = [d for d in dates if d >= joined]
                current = [(emp, dates)]
                pay(c, emp, dates, amount)
            elif ev == "job_change":
                new = employers[int(rng.choice(len(employers), p=pick))]
                change = start + timedelta(days=int(window_days * rng.uniform(0.3, 0.55)))
                pay(c, emp, [d for d in dates if d < change], amount * rng.uniform(0.8, 1.1))
                new_dates = [
                    d for d in pay_days(new, start, end, holidays) if d >= change + timedelta(days=3)
                ]
                pay(c, new, new_dates, c.income / new.periods_per_year)
                current = [(new, new_dates)]
            elif ev == "pay_rise" and len(dates) >= 2:
                k = int(rng.integers(1, len(dates)))  # the rise can come with any payment after the first
                factor = rng.uniform(1.03, 1.7)
                pay(c, emp, dates[:k], amount / factor)
                pay(c, emp, dates[k:], amount)
                # A rise first paid on the last pay day cannot be told from a one-off from the data.
                readable = k < len(dates) - 1
            elif ev == "two_jobs":
                second = employers[int(rng.choice(len(employers), p=pick))]
                if second.payer_id == emp.payer_id:
                    second = employers[(employers.index(emp) + 1) % len(employers)]
                pay(c, emp, dates, amount * 0.7)
                second_dates = pay_days(second, start, end, holidays)
                pay(c, second, second_dates, c.income * 0.3 / second.periods_per_year)
                current = [(emp, dates), (second, second_dates)]
            else:
                pay(c, emp, dates, amount)
                btc, purpose = emp.codes
                if ev == "bonus_other_day" and dates:
                    day = start + timedelta(days=int(rng.integers(0, window_days)))
                    day = _roll([day], "backward", holidays)[0]
                    if day not in dates and day >= start:
                        credit(c, day, amount * rng.uniform(0.5, 2.0), btc, purpose, emp.payer_id)
                elif ev == "same_day_bonus" and len(dates) >= 3:
                    day = dates[int(rng.integers(1, len(dates) - 1))]  # mid-window, a separate credit
                    credit(c, day, amount * rng.uniform(0.5, 2.0), btc, purpose, emp.payer_id)
            for job, _ in current:
                staff[job.payer_id] = staff.get(job.payer_id, 0) + 1
            fact.update(
                true_net_pay=c.income if current else float("nan"),
                pay_pattern="+".join(job.pattern for job, _ in current) or "ended",
                pay_frequency="+".join(job.frequency for job, _ in current) or None,
                life_event=ev,
                employer_coding="+".join(job.coding for job, _ in current) or None,
            )
            pending.append((fact, current, readable))
        else:
            fact.update(true_net_pay=float("nan"), pay_pattern="none", pay_frequency=None, life_event="none")
            if kind[i] == "pension_or_benefit":
                for d in _roll(
                    [date(p.year, p.month, 10) for p in _months(start, end)], "backward", holidays
                ):
                    credit(c, d, c.income / 12, BTC_TRANSFER_IN, "PENS", "GOV-0001")
            else:
                # Irregular credits from several payers (clients, or the customer's own account elsewhere).
                k = max(2, int(rng.poisson(2.5 * window_days / 30)))
                parts = rng.dirichlet(np.ones(k)) * c.income * window_days / 365.25
                payer_pool = [f"CP-{int(rng.integers(1, 90_000)):05d}" for _ in range(3)]
                for part in parts:
                    day = _roll(
                        [start + timedelta(days=int(rng.integers(0, window_days)))], "forward", holidays
                    )[0]
                    if day <= end:
                        credit(c, day, part, BTC_TRANSFER_IN, None, str(rng.choice(payer_pool)))
            facts.append(fact)
        # Regular credits that are not pay: from one's own account elsewhere, a lodger, a benefit.
        months = _months(start, end)
        if rng.random() < OWN_ACCOUNT_SHARE:
            day, amount = int(rng.integers(1, 28)), rng.uniform(100, 800)
            for d in _roll([date(p.year, p.month, day) for p in months], "forward", holidays):
                if d <= end:
                    credit(c, d, amount, BTC_TRANSFER_IN, None, "XA-" + c.account_id[2:])
        if rng.random() < LODGER_SHARE:
            day, amount = int(rng.integers(1, 28)), rng.uniform(300, 700)
            for d in _roll([date(p.year, p.month, day) for p in months], "forward", holidays):
                if d <= end:
                    credit(c, d, amount, BTC_TRANSFER_IN, None, f"P-{int(rng.integers(1, 90_000)):05d}")
        if rng.random() < BENEFIT_SHARE:
            for d in _roll([date(p.year, p.month, 20) for p in months], "backward", holidays):
                credit(c, d, 140.0, BTC_TRANSFER_IN, PURPOSE_BENEFIT, "GOV-0002")
    for fact, current, readable in pending:
        # A careful reader can label a salaried customer when every current job shows its calendar and is
        # coded as salary, or comes from an employer of at least three customers here, and the pay amount
        # is not still changing on the last pay day.
        fact["label_expected"] = (
            readable
            and bool(current)
            and all(
                _labelable(job, dates) and (job.coding != "none" or staff.get(job.payer_id, 0) >= 3)
                for job, dates in current
            )
        )
        facts.append(fact)
    answers = pd.DataFrame(facts)
    answers["label_expected"] = answers["label_expected"].fillna(False).astype(bool)
    return rows, answers


def _months(start: date, end: date) -> list[Period]:
    out, p = [], Period.of(start)
    while p.start <= end:
        out.append(p)
        p = p.shift(1)
    return out


def _spending(rng: np.random.Generator, cust: pd.DataFrame, start: date, end: date) -> list[tuple]:
    rows: list[tuple] = []
    days = (end - start).days + 1
    months = days / 30.4375
    region_names = np.array(REGIONS)
    for c in cust.itertuples(index=False):
        rel = c.capacity / 45_000
        # Diminishing returns: the share of capacity spent falls as capacity rises.
        spend_ratio = float(np.clip(rng.normal(0.78 - 0.12 * np.log(rel), 0.20), 0.30, 1.30))
        monthly_spend = c.capacity / 12 * spend_ratio * c.share_here
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
        n_card = int(rng.poisson((14 + 12 * np.sqrt(rel)) * months * c.share_here))
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


# The bank's lending side verified some incomes (payslips, tax statements in credit applications). Who
# applied for credit is not a random sample: customers not paid by payroll here (self-employed, paid
# elsewhere, pensions) are asked for documents far more often, and people of working age apply more.
VERIFIED_SHARE = {"payroll": 0.08, "other": 0.45}
VERIFIED_AGE_FACTOR = {"25-60": 1.3, "outside": 0.6}
VERIFIED_NOISE_SD = 0.02  # documents state the income of a slightly different twelve months
VERIFIED_MAX_DAYS_BEFORE = 334  # uniform over 0..11 months (11 x 30.4 days) before the last period's end
VERIFIED_SOURCES = (
    "loan application payslips",
    "mortgage application tax statement",
    "credit card application payslips",
    "overdraft review employer letter",
)
VERIFIED_STREAM = 20261205  # a random stream of its own: the ledger's bytes do not change with this file


def _verified_incomes(seed: int, facts: pd.DataFrame, end: date) -> tuple[pd.DataFrame, pd.Series]:
    """The lending side's verified incomes: the file's rows, and per customer (facts' order) whether verified.

    `facts` holds customer_id, age, income_kind and true_annual_income, one row per customer.
    """
    rng = np.random.default_rng([seed, VERIFIED_STREAM])
    base = np.where(facts["income_kind"] == "payroll", VERIFIED_SHARE["payroll"], VERIFIED_SHARE["other"])
    working_age = facts["age"].between(25, 60).to_numpy()
    factor = np.where(working_age, VERIFIED_AGE_FACTOR["25-60"], VERIFIED_AGE_FACTOR["outside"])
    probability = np.minimum(base * factor, 1.0)
    verified = rng.random(len(facts)) < probability
    chosen = facts[verified]
    n = len(chosen)
    days_before = rng.integers(0, VERIFIED_MAX_DAYS_BEFORE + 1, n)
    noise = rng.normal(0, VERIFIED_NOISE_SD, n)
    amounts = np.round(chosen["true_annual_income"].to_numpy(dtype=float) * (1 + noise), 2)
    rows = pd.DataFrame(
        {
            "customer_id": chosen["customer_id"].to_numpy(),
            "verified_on": [(end - timedelta(days=int(d))).isoformat() for d in days_before],
            "annual_net_income": [f"{a:.2f}" for a in amounts],
            "currency": "EUR",
            "source": np.array(VERIFIED_SOURCES)[rng.integers(0, len(VERIFIED_SOURCES), n)],
        }
    )
    return rows, pd.Series(verified, index=facts.index)


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
    holidays: Sequence[str] = ("01-01", "03-14", "06-23", "10-05", "12-25", "12-26"),
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
    income_rows, answers = _income_credits(rng, cust, start, end, holiday_array(holidays, start, end))
    kind = cust["customer_id"].map(answers.set_index("customer_id")["income_kind"])
    cust["share_here"] = np.where(
        kind == "paid_elsewhere", rng.uniform(*SECONDARY_SPENDING_SHARE, len(cust)), 1.0
    )
    truth = cust.set_index("customer_id")
    answers["behaviour_signal"] = answers["customer_id"].map(truth["capacity"]).round(2)
    answers["irreducible_noise"] = (answers["true_annual_income"] - answers["behaviour_signal"]).round(2)
    answers["spending_share_here"] = answers["customer_id"].map(truth["share_here"]).round(3)
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
    # Savings grow with capacity less than in proportion, and vary a lot between people.
    opening_eur = 2_000 * (cust["capacity"] / 45_000) ** 0.6 * rng.lognormal(0, 0.9, len(cust))
    opening = (pd.Series(opening_eur.to_numpy(), index=cust["account_id"]) * 100).round().astype("int64")
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
    answers = answers.merge(cust[["customer_id", "occupation", "age"]], on="customer_id").sort_values(
        "customer_id"
    )
    verified_rows, answers["verified"] = _verified_incomes(seed, answers, end)
    verified_path = landing_dir / VERIFIED_INCOMES_FILE
    verified_rows.to_csv(verified_path, index=False, lineterminator="\n")
    answers.to_csv(answers_path, index=False, lineterminator="\n")
    return DemoFiles(
        landing_dir,
        [str(p) for p in periods],
        extracts,
        manifests,
        customers_path,
        answers_path,
        len(tx),
        verified_path,
    )
