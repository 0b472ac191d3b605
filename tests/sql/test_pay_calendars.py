"""Pay calendars, life events and uncoded pay (warehouse/sql/intermediate/*.sql, features/customer_label.sql).

Every date below was checked against the Gregorian calendar for 2026 (weekdays named beside them); the
window is August to October 2026 unless a test says otherwise, with the default demo holidays, none of
which falls on a date used here. Expected figures are worked by hand: pay amount x periods per year.
"""

from datetime import date

import pytest

from tests.sql.sqlkit import build_salary, every


def _label(con, customer_id="C1"):
    return con.execute(
        "select label_status, annual_salary, label_confidence from features.customer_label where customer_id = ?",
        [customer_id],
    ).fetchall()[0]


def _streams(con, customer_id="C1"):
    return con.execute(
        "select payer_id, status, pay_frequency, is_current, pay_amount, annual_salary "
        "from intermediate.salary_streams where customer_id = ? order by payer_id",
        [customer_id],
    ).fetchall()


# --- the rows of the review's table of wrong labels ---------------------------------------------------------


def test_job_change_only_the_new_employer_is_current(con, ledger):
    # Old employer: last paid Fri 28 Aug; new employer from Wed 2 Sep and Fri 2 Oct (day 2 of the month).
    ledger.pay("C1", [date(2026, 8, 28)], 2500.0, payer="EMP-OLD")
    ledger.pay("C1", [date(2026, 9, 2), date(2026, 10, 2)], 2800.0, payer="EMP-NEW")
    ledger.load()
    build_salary(con)
    assert _label(con) == ("labelled", pytest.approx(2800 * 12), "medium")  # two payments: medium
    assert [(s[0], s[3]) for s in _streams(con)] == [("EMP-NEW", True), ("EMP-OLD", False)]


def test_job_change_whose_new_employer_paid_once_gives_no_label(con, ledger):
    ledger.pay("C1", [date(2026, 8, 28), date(2026, 9, 28)], 2500.0, payer="EMP-OLD")  # next due Wed 28 Oct
    ledger.pay("C1", [date(2026, 10, 20)], 2800.0, payer="EMP-NEW")  # one payment: no calendar yet
    ledger.load()
    build_salary(con)
    assert _label(con)[0] == "irregular"


def test_a_leaver_whose_next_pay_day_passed_gets_no_label(con, ledger):
    # Monthly on the 28th, last paid Mon 28 Sep, 33 days before 31 Oct: Wed 28 Oct came and went.
    ledger.pay("C1", [date(2026, 8, 28), date(2026, 9, 28)], 2500.0)
    ledger.load()
    build_salary(con)
    assert _streams(con)[0][1:4] == ("classified", "monthly", False)
    assert _label(con) == ("ended", None, None)


def test_monthly_pay_on_the_last_friday_is_monthly(con, ledger):
    # Fri 28 Aug, Fri 25 Sep, Fri 30 Oct: gaps 28 and 35, so no four-weekly calendar explains them.
    ledger.pay("C1", [date(2026, 8, 28), date(2026, 9, 25), date(2026, 10, 30)], 3000.0)
    ledger.load()
    build_salary(con)
    assert _label(con) == ("labelled", pytest.approx(36_000.0), "high")


def test_pay_on_the_first_and_fifteenth_is_semi_monthly(con, ledger):
    # Sat 15 Aug -> Fri 14 Aug; Tue 1 Sep; Tue 15 Sep; Thu 1 Oct; Thu 15 Oct (Sat 1 Aug -> Fri 31 Jul,
    # before the window). Gaps 18, 14, 16, 14: no fortnightly calendar explains them.
    ledger.pay(
        "C1",
        [date(2026, 8, 14), date(2026, 9, 1), date(2026, 9, 15), date(2026, 10, 1), date(2026, 10, 15)],
        1250.0,
    )
    ledger.load()
    build_salary(con)
    assert _streams(con)[0][2] == "semi_monthly"
    assert _label(con) == ("labelled", pytest.approx(1250 * 24), "high")


def test_new_joiner_with_two_monthly_payments_28_days_apart_gets_no_label(con, ledger):
    # Mon 28 Sep and Mon 26 Oct: the last Monday of each month, or every 28 days. Cannot tell: no label
    # (it once read as four-weekly, +8.7%).
    ledger.pay("C1", [date(2026, 9, 28), date(2026, 10, 26)], 2600.0)
    ledger.load()
    build_salary(con)
    assert _label(con) == ("ambiguous", None, None)


def test_new_joiner_with_two_monthly_payments_on_the_10th_is_monthly(con, ledger):
    # Thu 10 Sep; Sat 10 Oct -> Fri 9 Oct: 29 days apart, which no weekly cycle explains.
    ledger.pay("C1", [date(2026, 9, 10), date(2026, 10, 9)], 2600.0)
    ledger.load()
    build_salary(con)
    assert _label(con) == ("labelled", pytest.approx(2600 * 12), "medium")


def test_a_classified_stream_and_a_second_jobs_single_payment_give_no_label(con, ledger):
    # Labelling the first job only once read 25% low; a current stream without a calendar means no label.
    ledger.pay("C1", [date(2026, 8, 25), date(2026, 9, 25), date(2026, 10, 23)], 3000.0, payer="EMP-A")
    ledger.pay("C1", [date(2026, 10, 16)], 1000.0, payer="EMP-B")
    ledger.load()
    build_salary(con)
    assert _label(con)[0] == "irregular"


def test_salary_and_bonus_on_the_same_day_mid_window_keep_the_label(con, ledger):
    ledger.pay("C1", [date(2026, 8, 28), date(2026, 9, 28), date(2026, 10, 28)], 2000.0)
    ledger.pay("C1", [date(2026, 9, 28)], 3000.0, txn_id="BONUS")  # a separate credit, same payer and day
    ledger.load()
    build_salary(con)
    assert _label(con) == ("labelled", pytest.approx(24_000.0), "high")
    assert con.execute("select bonus_amount from features.customer_label").fetchall() == [(3000.0,)]


def test_a_pay_rise_over_60_percent_sets_the_amount_from_the_last_payments(con, ledger):
    ledger.pay("C1", every(date(2026, 8, 7), 14, 4), 1000.0)  # Fridays 7 Aug .. 18 Sep
    ledger.pay("C1", every(date(2026, 10, 2), 14, 3), 1700.0)  # +70% from Fri 2 Oct
    ledger.load()
    build_salary(con)
    assert _label(con) == ("labelled", pytest.approx(1700 * 365.25 / 14), "high")


# --- life events ----------------------------------------------------------------------------------------------


def test_one_missed_monthly_run_inside_the_window_keeps_the_stream(con, ledger):
    ledger.pay("C1", [date(2026, 8, 28), date(2026, 10, 28)], 2000.0)  # nothing on Mon 28 Sep
    ledger.load()
    build_salary(con)
    assert con.execute("select missed_runs from intermediate.salary_streams").fetchall() == [(1,)]
    assert _label(con) == ("labelled", pytest.approx(24_000.0), "medium")


def test_one_missed_weekly_run_keeps_the_stream_two_do_not(con, ledger):
    fridays = every(date(2026, 8, 7), 7, 12)  # 7 Aug .. 23 Oct
    ledger.pay("C1", fridays[:4] + fridays[5:], 400.0)  # one week missed
    ledger.pay("C2", fridays[:4] + fridays[6:], 400.0)  # two weeks missed in a row
    ledger.load()
    build_salary(con)
    assert _label(con, "C1") == ("labelled", pytest.approx(400 * 365.25 / 7), "medium")
    assert _label(con, "C2")[0] != "labelled"


def test_a_missed_run_at_the_end_cannot_be_told_from_leaving(con, ledger):
    ledger.pay("C1", every(date(2026, 8, 7), 14, 5), 900.0)  # 7 Aug .. 2 Oct; Fri 16 Oct never came
    ledger.load()
    build_salary(con)
    assert _label(con)[0] == "ended"


def test_a_payment_posted_within_the_grace_days_is_not_a_missed_run(con, ledger):
    # Weekly on Fridays; the last one (Fri 30 Oct) had not posted by Sat 31 Oct: due 30 Oct + 2 days grace.
    ledger.pay("C1", every(date(2026, 8, 7), 7, 12), 400.0)  # 7 Aug .. 23 Oct, next due Fri 30 Oct
    ledger.load()
    build_salary(con)
    assert _label(con)[0] == "labelled"
    build_salary(con, due_grace_days=0)
    assert _label(con)[0] == "ended"


def test_a_holiday_moves_monthly_pay_to_the_next_business_day_when_the_employer_pays_late(con, ledger):
    # Day 5: Wed 5 Aug, Sat 5 Sep -> Mon 7 Sep, Mon 5 Oct is a holiday (default calendar) -> Tue 6 Oct.
    ledger.pay("C1", [date(2026, 8, 5), date(2026, 9, 7), date(2026, 10, 6)], 2100.0)
    ledger.load()
    build_salary(con)
    assert _label(con) == ("labelled", pytest.approx(2100 * 12), "high")
    assert _streams(con)[0][2] == "monthly"


# --- uncoded pay, found by recurrence --------------------------------------------------------------------------


def _uncoded(ledger, customer_id, dates, amount, payer, bank_txn_code="PMNT/RCDT/DMCT", **kw):
    for d in dates:
        ledger.add(customer_id, d, amount, "CRDT", bank_txn_code=bank_txn_code, counterparty_id=payer, **kw)


def test_uncoded_pay_from_an_employer_of_three_customers_is_found_by_its_calendar(con, ledger):
    dates = [date(2026, 8, 25), date(2026, 9, 25), date(2026, 10, 23)]  # day 25, Sun 25 Oct -> Fri 23
    for cid in ("C1", "C2", "C3"):
        _uncoded(ledger, cid, dates, 2400.0, "EMP-U")
    ledger.load()
    build_salary(con)
    assert _label(con) == ("labelled", pytest.approx(2400 * 12), "medium")  # found by recurrence: medium
    assert con.execute("select distinct found_by from intermediate.salary_streams").fetchall() == [
        ("recurrence",)
    ]


def test_uncoded_credits_coded_as_something_else_are_not_pay(con, ledger):
    dates = [date(2026, 8, 25), date(2026, 9, 25), date(2026, 10, 23)]
    for cid in ("C1", "C2", "C3"):
        # ISO 20022 purpose codes (from memory): BENE a benefit, PENS a pension, RENT rent.
        _uncoded(ledger, cid, dates, 300.0, "GOV-1", purpose_code="BENE")
        _uncoded(ledger, cid, dates, 900.0, "GOV-2", purpose_code="PENS")
        _uncoded(ledger, cid, dates, 500.0, "P-9", purpose_code="RENT")
    ledger.load()
    build_salary(con)
    kinds = con.execute("select distinct income_kind from intermediate.payroll_credits").fetchall()
    assert kinds == [("pension",)]  # the pension is read as a pension (below), never as pay
    assert _label(con)[0] == "no_pay"


def test_a_pension_is_read_as_observed_income_but_never_a_salary_label(con, ledger):
    # Purpose PENS on the 10th: Mon 10 Aug, Thu 10 Sep, Sat 10 Oct -> Fri 9 Oct.
    ledger.pay("C1", [date(2026, 8, 10), date(2026, 9, 10), date(2026, 10, 9)], 1100.0, purpose_code="PENS")
    ledger.load()
    build_salary(con)
    assert con.execute(
        "select label_status, annual_salary, annual_pension from features.customer_label"
    ).fetchall() == [("no_pay", None, pytest.approx(13_200.0))]
    build_salary(con, pensions_observed=False)
    assert con.execute("select annual_pension from features.customer_label").fetchall() == [(None,)]


def test_an_employer_that_codes_salary_for_some_is_an_employer_for_all(con, ledger):
    dates = [date(2026, 8, 25), date(2026, 9, 25), date(2026, 10, 23)]
    ledger.pay("C1", dates, 2400.0, payer="EMP-X")
    _uncoded(ledger, "C2", dates, 2000.0, "EMP-X")  # the same employer, no code for this one
    ledger.load()
    build_salary(con)
    assert _label(con, "C2") == ("labelled", pytest.approx(24_000.0), "medium")


def test_transfers_from_the_customers_own_account_are_not_pay(con, ledger):
    dates = [date(2026, 8, 25), date(2026, 9, 25), date(2026, 10, 23)]
    _uncoded(ledger, "C1", dates, 1500.0, "A-C1")  # A-C1 is C1's own account (sqlkit names them A-<customer>)
    ledger.load()
    build_salary(con, min_payer_customers=1)  # even when any payer would do
    assert _label(con)[0] == "no_pay"


def test_card_refunds_and_book_transfers_are_not_pay(con, ledger):
    dates = [date(2026, 8, 25), date(2026, 9, 25), date(2026, 10, 23)]
    for cid in ("C1", "C2", "C3"):
        _uncoded(ledger, cid, dates, 50.0, "MER-1", bank_txn_code="PMNT/CCRD/RIMB")
        _uncoded(ledger, cid, dates, 700.0, "BANK-1", bank_txn_code="PMNT/RCDT/BOOK")
    ledger.load()
    build_salary(con)
    assert _label(con)[0] == "no_pay"


# --- annualisation --------------------------------------------------------------------------------------------


def test_annualisation_follows_the_julian_year_by_default():
    # A Julian year is exactly 365.25 days (IAU, the unit of the Julian calendar's mean year): the mean
    # number of weeks in a year is 365.25 / 7 = 52.1786, of fortnights 26.0893, of four-week periods 13.0446.
    from ledgerband.tasks.core.settings import PayrollSettings

    ppy = PayrollSettings().periods_per_year()
    assert ppy == {
        "weekly": pytest.approx(52.178571, rel=1e-6),
        "fortnightly": pytest.approx(26.089286, rel=1e-6),
        "four_weekly": pytest.approx(13.044643, rel=1e-6),
        "semi_monthly": 24.0,
        "monthly": 12.0,
    }
    # The payroll convention counts whole pay days a year instead (common practice).
    assert PayrollSettings(annualisation="pay_periods").periods_per_year()["weekly"] == 52.0


def test_the_payroll_convention_is_applied_by_the_sql(con, ledger):
    ledger.pay("C1", every(date(2026, 8, 7), 7, 12), 400.0)
    ledger.load()
    build_salary(con, annualisation="pay_periods")
    assert _label(con)[1] == pytest.approx(400 * 52)


def test_a_rise_on_the_last_pay_day_waits_a_month_for_a_label(con, ledger):
    # Monthly 2000 on the 28th, then 2600 on Wed 28 Oct: a rise, or a one-off on the pay day? One payment
    # cannot tell; the median of the last three would say 2000, 23% low if it is a rise. No label yet.
    ledger.pay("C1", [date(2026, 8, 28), date(2026, 9, 28)], 2000.0)
    ledger.pay("C1", [date(2026, 10, 28)], 2600.0)
    ledger.load()
    build_salary(con)
    assert _label(con) == ("unsettled", None, None)
    assert _streams(con)[0][3] is True  # still current: it is paying


# --- found in review -----------------------------------------------------------------------------------------


def test_two_different_amounts_a_month_are_not_semi_monthly_pay(con, ledger):
    # 1200 on the 15th and 1800 on the last day read as semi-monthly x 24 x 1800 = 43,200 (+20%): the halves
    # of semi-monthly pay are the same pay, so two sizes a month get no label.
    ledger.pay("C1", [date(2026, 8, 14), date(2026, 9, 15), date(2026, 10, 15)], 1200.0)
    ledger.pay("C1", [date(2026, 8, 31), date(2026, 9, 30), date(2026, 10, 30)], 1800.0)
    ledger.load()
    build_salary(con)
    assert _label(con)[0] != "labelled"


def test_a_pension_sent_with_the_salary_sub_family_is_a_pension(con, ledger):
    # The purpose code says what the payer meant (PENS); the sub-family SALA counts only without one.
    for d in (date(2026, 8, 10), date(2026, 9, 10), date(2026, 10, 9)):
        ledger.add(
            "C1",
            d,
            1100.0,
            "CRDT",
            purpose_code="PENS",
            bank_txn_code="PMNT/RCDT/SALA",
            counterparty_id="GOV-1",
        )
    ledger.load()
    build_salary(con)
    assert con.execute("select label_status, annual_pension from features.customer_label").fetchall() == [
        ("no_pay", pytest.approx(13_200.0))
    ]


def test_a_leaver_whose_employer_pays_early_is_not_current(con, ledger):
    # Last business day of the month: Fri 30 May 2025 (31st a Saturday), Mon 30 Jun, Thu 31 Jul; then nothing.
    # The next pay day, Sun 31 Aug, moves back to Fri 29 Aug like the May one did: 29 Aug + 2 days' grace is
    # not after 31 Aug, so the stream has stopped (moving it forward to Mon 1 Sep kept a leaver labelled).
    ledger.pay("C1", [date(2025, 5, 30), date(2025, 6, 30), date(2025, 7, 31)], 2500.0)
    ledger.load()
    build_salary(con, {"window_start": date(2025, 5, 1), "window_end": date(2025, 8, 31)})
    assert _label(con)[0] == "ended"


def test_pay_brought_forward_before_the_holidays_keeps_the_stream_current(con, ledger):
    # Day 25: Fri 25 Sep, Sun 25 Oct -> Fri 23 Oct, Wed 25 Nov; December paid early on Fri 18 Dec (25 and 26
    # Dec are holidays here). The calendar's December slot (Mon 28 Dec) is unpaid, but a payment came a week
    # before it: that run was paid early, not missed.
    ledger.pay("C1", [date(2026, 9, 25), date(2026, 10, 23), date(2026, 11, 25), date(2026, 12, 18)], 3000.0)
    ledger.load()
    build_salary(con, {"window_start": date(2026, 9, 1), "window_end": date(2026, 12, 31)})
    assert _label(con)[:2] == ("labelled", pytest.approx(36_000.0))
