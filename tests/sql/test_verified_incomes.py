"""The verified incomes file on an in-memory warehouse: ingest, each rule at its bounds, the run's own
judgement, staging.verified_incomes as the modelling side reads it, and the decision that never stops."""

from __future__ import annotations

from datetime import date
from pathlib import Path

import pycountry
import pytest

from ledgerband.tasks.core.context import RunContext
from ledgerband.tasks.core.errors import ExtractError
from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.core.warehouse import run_sql_file
from ledgerband.tasks.gates.quarantine_share import verified_incomes_check
from ledgerband.tasks.ingest import loads
from ledgerband.tasks.ingest.extracts import load_customers
from ledgerband.tasks.ingest.verified import load_verified_incomes
from ledgerband.tasks.quality.verified import oldest_verified_on, validate_verified

HEADER = "customer_id,verified_on,annual_net_income,currency,source"
CUSTOMERS = "customer_id,birth_date,sex,home_region,opened_date\n" + "".join(
    f"C{i},1980-01-01,F,North Reach,2015-01-01\n" for i in range(1, 7)
)


def _landing(tmp_path: Path, records: list[str] | None) -> Path:
    landing = tmp_path / "landing"
    landing.mkdir(exist_ok=True)
    (landing / "customers.csv").write_text(CUSTOMERS)
    target = landing / "verified_incomes.csv"
    if records is None:
        target.unlink(missing_ok=True)
    else:
        target.write_text("\n".join([HEADER, *records]) + "\n")
    return landing


def _run(con, landing: Path, period: str = "2026-10", run_id: str = "r1", **settings):
    ctx = RunContext.create(
        period, landing, settings=Settings(home=landing.parent / "state", **settings), run_id=run_id
    )
    load_customers(con, ctx, landing / "customers.csv")
    load = load_verified_incomes(con, ctx)
    summary = validate_verified(con, ctx)
    run_sql_file(con, "staging", "verified_incomes", ctx.layer_params())
    return ctx, load, summary


def _quarantined(con, run_id: str = "r1") -> dict[int, list[str]]:
    rows = con.execute(
        "select source_line, failed_rules from quarantine.verified_incomes where run_id = ? order by 1",
        [run_id],
    ).fetchall()
    return {line: rules for line, rules in rows}


# Each rule at its bound for October 2026 (end 2026-10-31; 12 months: oldest recent day 2025-10-31).
# Line 2 is the record under test; the value one step inside the bound is accepted, one step past it is not.
BOUNDS = [
    # the last day of the period is not in the future; the next day is
    ("C1,2026-10-31,41250.00,EUR,x", []),
    ("C1,2026-11-01,41250.00,EUR,x", ["verified_on_not_future"]),
    # exactly 12 months before the period's end is still recent; a day earlier is not
    ("C1,2025-10-31,41250.00,EUR,x", []),
    ("C1,2025-10-30,41250.00,EUR,x", ["verified_on_recent"]),
    # a leap day that exists, and one that does not (2026 is not a leap year)
    ("C1,2024-02-29,41250.00,EUR,x", ["verified_on_recent"]),
    ("C1,2026-02-29,41250.00,EUR,x", ["verified_on_is_date"]),
    ("C1,,41250.00,EUR,x", ["verified_on_present"]),
    ("C1,2026-5-4,41250.00,EUR,x", ["verified_on_format"]),
    # the smallest positive amount is accepted, zero is not
    ("C1,2026-05-14,0.01,EUR,x", []),
    ("C1,2026-05-14,0,EUR,x", ["annual_net_income_positive"]),
    ("C1,2026-05-14,-0.01,EUR,x", ["annual_net_income_positive"]),
    # verified.max_annual_income (2,000,000) itself is accepted, a cent above is absurd
    ("C1,2026-05-14,2000000.00,EUR,x", []),
    ("C1,2026-05-14,2000000.01,EUR,x", ["annual_net_income_not_absurd"]),
    # a whole number is a number; three decimals, a decimal comma, an exponent are not what the file says
    ("C1,2026-05-14,41250,EUR,x", []),
    ("C1,2026-05-14,41250.001,EUR,x", ["annual_net_income_format"]),
    ('C1,2026-05-14,"41250,00",EUR,x', ["annual_net_income_format"]),
    ("C1,2026-05-14,4.125e4,EUR,x", ["annual_net_income_format"]),
    ("C1,2026-05-14,,EUR,x", ["annual_net_income_present"]),
    # ISO 4217 codes are upper-case: "eur" is not the ledger's currency; neither is another valid code
    ("C1,2026-05-14,41250.00,eur,x", ["currency_is_ledger_currency"]),
    ("C1,2026-05-14,41250.00,GBP,x", ["currency_is_ledger_currency"]),
    ("C1,2026-05-14,41250.00,,x", ["currency_present"]),
    # the customer must be in the reference file; an empty id is reported once, as missing
    ("C9,2026-05-14,41250.00,EUR,x", ["customer_id_in_reference"]),
    (",2026-05-14,41250.00,EUR,x", ["customer_id_present"]),
    # the source is free text, and may be empty
    ("C1,2026-05-14,41250.00,EUR,", []),
]


@pytest.mark.parametrize("engine", ["duckdb", "gx"])
@pytest.mark.parametrize(("record", "rules"), BOUNDS, ids=[r for r, _ in BOUNDS])
def test_each_rule_at_its_bound(con, tmp_path, record, rules, engine):
    _, load, summary = _run(con, _landing(tmp_path, [record]), quality={"engine": engine})
    assert _quarantined(con) == ({2: rules} if rules else {})
    staged = con.execute("select count(*) from staging.verified_incomes").fetchall()[0][0]
    assert (staged, summary.rows_quarantined) == ((0, 1) if rules else (1, 0))
    assert load.rows_in_file == staged + summary.rows_quarantined


def test_the_ledger_currency_is_an_iso_4217_code():
    # Reference: ISO 4217 as packaged by pycountry (178 codes).
    assert pycountry.currencies.get(alpha_3=Settings().bands.currency) is not None
    assert pycountry.currencies.get(alpha_3="GBP") is not None  # the "other currency" above is a real code


def test_the_age_limit_follows_the_setting(con, tmp_path):
    landing = _landing(tmp_path, ["C1,2026-04-30,41250.00,EUR,x", "C2,2026-04-29,30000.00,EUR,x"])
    ctx, _, _ = _run(con, landing, verified={"max_age_months": 6})
    assert oldest_verified_on(ctx) == date(2026, 4, 30)
    assert _quarantined(con) == {3: ["verified_on_recent"]}


def test_a_duplicate_customer_sets_aside_every_record_and_names_the_other_lines(con, tmp_path):
    landing = _landing(
        tmp_path,
        [
            "C1,2026-05-14,41250.00,EUR,loan application payslips",
            "C2,2026-06-01,30000.00,EUR,x",
            "C1,2026-08-02,44900.00,EUR,mortgage application tax statement",
            "C1,2026-09-09,44900.00,EUR,x",
        ],
    )
    _, _, summary = _run(con, landing)
    rows = con.execute(
        "select source_line, reason from quarantine.verified_incomes where run_id = 'r1' order by 1"
    ).fetchall()
    assert rows == [
        (2, "line 2: customer_id_unique (field customer_id, the same customer also on line 4, 5)"),
        (4, "line 4: customer_id_unique (field customer_id, the same customer also on line 2, 5)"),
        (5, "line 5: customer_id_unique (field customer_id, the same customer also on line 2, 4)"),
    ]
    assert summary.rule_counts == {"customer_id_unique": 3}
    assert con.execute("select customer_id from staging.verified_incomes").fetchall() == [("C2",)]


def test_staging_has_the_fixed_interface_and_one_row_per_customer(con, tmp_path):
    landing = _landing(
        tmp_path, ["C1,2026-05-14,41250.10,EUR,loan application payslips", "C2,2026-06-01,30000,EUR,"]
    )
    _run(con, landing)
    assert con.execute("describe staging.verified_incomes").fetchall() == [
        ("customer_id", "VARCHAR", "YES", None, None, None),
        ("verified_on", "DATE", "YES", None, None, None),
        ("annual_net_income", "DOUBLE", "YES", None, None, None),
        ("source", "VARCHAR", "YES", None, None, None),
    ]
    assert con.execute("select * from staging.verified_incomes order by 1").fetchall() == [
        ("C1", date(2026, 5, 14), 41250.10, "loan application payslips"),
        ("C2", date(2026, 6, 1), 30000.0, None),
    ]


def test_an_absent_file_is_no_error_and_leaves_an_empty_table(con, tmp_path):
    ctx, load, summary = _run(con, _landing(tmp_path, None))
    assert load.status == loads.ABSENT and "0 verified incomes" in load.notes[0]
    assert (summary.rows_in_file, summary.rows_quarantined, summary.source_file) == (0, 0, None)
    assert con.execute("select count(*) from staging.verified_incomes").fetchall() == [(0,)]
    assert con.execute(
        "select load_id, rows_in_file, rows_accepted from ops.verified_income_runs"
    ).fetchall() == [(None, 0, 0)]
    decision = verified_incomes_check(summary, ctx.settings)
    assert decision.passed and not decision.warning and decision.subject == "verified_incomes.csv"
    assert "no verified_incomes.csv" in decision.reason


def test_a_later_run_without_the_file_stages_nothing_from_the_earlier_one(con, tmp_path):
    landing = _landing(tmp_path, ["C1,2026-05-14,41250.00,EUR,x"])
    _run(con, landing, run_id="r1")
    assert con.execute("select count(*) from staging.verified_incomes").fetchall() == [(1,)]
    _run(con, _landing(tmp_path, None), run_id="r2")
    assert con.execute("select count(*) from staging.verified_incomes").fetchall() == [(0,)]


def test_the_same_file_is_loaded_once_and_judged_again_for_each_period(con, tmp_path):
    landing = _landing(tmp_path, ["C1,2026-05-14,41250.00,EUR,x", "C2,2026-10-20,30000.00,EUR,x"])
    _, first, _ = _run(con, landing, period="2026-10", run_id="r1")
    # September: the October verification is in the future for it
    _, again, summary = _run(con, landing, period="2026-09", run_id="r2")
    assert (first.status, again.status, again.load_id) == (loads.LOADED, loads.SKIPPED, first.load_id)
    assert con.execute("select count(*) from raw.verified_incomes").fetchall() == [(2,)]
    assert _quarantined(con, "r1") == {} and _quarantined(con, "r2") == {3: ["verified_on_not_future"]}
    assert con.execute("select customer_id from staging.verified_incomes").fetchall() == [("C1",)]
    assert summary.rows_accepted == 1


def test_a_run_that_has_not_checked_its_file_stages_nothing(con, tmp_path):
    landing = _landing(tmp_path, ["C1,2026-05-14,41250.00,EUR,x"])
    ctx = RunContext.create("2026-10", landing, settings=Settings(home=tmp_path / "state"), run_id="r1")
    load_customers(con, ctx, landing / "customers.csv")
    load_verified_incomes(con, ctx)
    run_sql_file(con, "staging", "verified_incomes", ctx.layer_params())
    assert con.execute("select count(*) from staging.verified_incomes").fetchall() == [(0,)]


@pytest.mark.parametrize(
    ("data", "message"),
    [
        # a Latin-1 byte (0xe9) in a record: the file is refused, the line named, the value kept out
        (
            (HEADER + "\nC1,2026-05-14,41250.00,EUR,r\xe9vision\n").encode("latin-1"),
            ["verified_incomes.csv: line 2", "text_invalid_utf8", "refused as a whole"],
        ),
        # a header that is not UTF-8
        (b"customer_id,verified_\xf6n,annual_net_income,currency,source\n", ["line 1 (header) is not UTF-8"]),
        # an extra column
        (
            (HEADER + ",branch\nC1,2026-05-14,41250.00,EUR,x,B1\n").encode(),
            ["columns_match_contract", "'unexpected': ['branch']"],
        ),
        # tab-separated
        (
            (HEADER.replace(",", "\t") + "\nC1\t2026-05-14\t41250.00\tEUR\tx\n").encode(),
            ["columns_match_contract", "line 1 (header)"],
        ),
    ],
)
def test_an_unreadable_file_is_refused_naming_file_line_and_rule(con, tmp_path, data, message):
    landing = _landing(tmp_path, [])
    (landing / "verified_incomes.csv").write_bytes(data)
    with pytest.raises(ExtractError) as caught:
        _run(con, landing)
    for part in message:
        assert part in str(caught.value)
    assert "vision" not in str(caught.value)
    assert con.execute("select count(*) from ops.loads where dataset = 'verified_incomes'").fetchall() == [
        (0,)
    ]


@pytest.mark.parametrize(
    ("quarantined", "warns"),
    [
        (0, False),
        (1, False),  # 1 of 100: at quality.max_quarantine_share (1%), not past it
        (2, True),
        (100, True),  # every record bad: a warning still, never a stop
    ],
)
def test_the_decision_warns_past_the_share_and_never_stops(quarantined, warns):
    from ledgerband.tasks.quality.verified import VerifiedSummary

    summary = VerifiedSummary(
        "/landing/verified_incomes.csv",
        "L1",
        100,
        100 - quarantined,
        quarantined,
        {"verified_on_recent": quarantined},
    )
    decision = verified_incomes_check(summary, Settings())
    assert decision.passed and decision.warning == warns
    assert decision.outcome == ("warn" if warns else "pass")
    assert decision.figures["rows_quarantined"] == quarantined
    assert decision.thresholds == {"max_quarantine_share": 0.01, "stops_the_run": False}
