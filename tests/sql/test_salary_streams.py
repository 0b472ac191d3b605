"""warehouse/sql/intermediate/{payroll_credits,salary_streams}.sql and features/customer_salary.sql on hand-made payroll."""

from datetime import date

import pytest

from tests.sql.sqlkit import WINDOW, build_salary, every


def _build(con, window=WINDOW, **payroll):
    build_salary(con, window, **payroll)


WINTER = {"window_start": date(2026, 12, 1), "window_end": date(2027, 2, 28)}


def _stream(con, customer_id):
    return con.execute(
        "select pay_frequency, pay_amount, annual_salary, is_current from intermediate.salary_streams where customer_id = ?",
        [customer_id],
    ).fetchall()


# Pay periods per year are a fact of the trade: a 365.25-day average year holds 365.25/7 weeks, so
# weekly pay is annualised x 52.18 (not 52), fortnightly x 26.09, four-weekly x 13.04, monthly x 12.
@pytest.mark.parametrize(
    "days, count, frequency, per_year",
    [
        (7, 12, "weekly", 365.25 / 7),
        (14, 6, "fortnightly", 365.25 / 14),
        (28, 4, "four_weekly", 365.25 / 28),  # four payments: three gaps no monthly calendar explains
    ],
)
def test_regular_gaps_are_classified_and_annualised(con, ledger, days, count, frequency, per_year):
    ledger.pay("C1", every(date(2026, 8, 7), days, count), 1000.0)  # Fridays
    ledger.load()
    _build(con)
    [(freq, amount, annual, current)] = _stream(con, "C1")
    assert (freq, amount, current) == (frequency, 1000.0, True)
    assert annual == pytest.approx(1000.0 * per_year, abs=0.01)


def test_monthly_pay_moved_off_weekends_is_still_monthly(con, ledger):
    # Nominal pay day 31: 2026-08-31 Mon, 2026-09-30 Wed, 2026-10-31 is a Saturday -> paid Friday 30th.
    ledger.pay("C1", [date(2026, 8, 31), date(2026, 9, 30), date(2026, 10, 30)], 3200.0)
    ledger.load()
    _build(con)
    [(freq, _, annual, _)] = _stream(con, "C1")
    assert freq == "monthly" and annual == pytest.approx(38_400.0)


def test_holiday_shift_in_fortnightly_pay_keeps_the_frequency(con, ledger):
    dates = every(date(2026, 8, 7), 14, 6)
    dates[2] = date(2026, 9, 3)  # Friday 4 Sep is a holiday in this calendar: paid Thursday
    ledger.pay("C1", dates, 800.0)
    ledger.load()
    _build(con, holidays=("2026-09-04",))
    assert _stream(con, "C1")[0][0] == "fortnightly"


def test_a_one_off_bonus_does_not_set_the_pay_amount(con, ledger):
    ledger.pay("C1", [date(2026, 8, 28), date(2026, 10, 28)], 2000.0)
    ledger.pay("C1", [date(2026, 9, 28)], 2000.0)
    ledger.pay("C1", [date(2026, 9, 28)], 5000.0, txn_id="BONUS")  # same payer, same day, mid-window
    ledger.load()
    _build(con)
    [(freq, amount, annual, _)] = _stream(con, "C1")
    # Median of the latest three payments (2000, 7000, 2000) is 2000.
    assert amount == 2000.0 and annual == pytest.approx(24_000.0)
    assert freq == "monthly"
    # The bonus is reported, not annualised: 7000 paid on 28 Sep is 2000 of pay and 5000 of bonus.
    assert con.execute("select bonus_amount from intermediate.salary_streams").fetchall() == [(5000.0,)]


def test_a_bonus_on_another_day_neither_breaks_the_rhythm_nor_the_amount(con, ledger):
    ledger.pay("C1", [date(2026, 8, 28), date(2026, 9, 28), date(2026, 10, 28)], 2000.0)
    ledger.pay("C1", [date(2026, 10, 15)], 3500.0, txn_id="BONUS")  # gaps would read 31, 17, 13 with it
    ledger.load()
    _build(con)
    [(freq, amount, annual, _)] = _stream(con, "C1")
    assert (freq, amount, annual) == ("monthly", 2000.0, pytest.approx(24_000.0))


def test_last_business_day_pay_across_february_is_monthly(con, ledger):
    # 2026-12-31 Thu, 2027-01-29 Fri (30/31 Jan are a weekend), 2027-02-26 Fri (27/28 Feb are a weekend):
    # gaps 29 and 28, median 28.5. Source: Gregorian calendar for 2026-2027.
    ledger.pay("C1", [date(2026, 12, 31), date(2027, 1, 29), date(2027, 2, 26)], 3000.0)
    ledger.load()
    _build(con, WINTER, holidays=())  # weekends only
    [(freq, _, annual, _)] = _stream(con, "C1")
    assert (freq, annual) == ("monthly", pytest.approx(36_000.0))


def test_three_payments_that_fit_monthly_and_four_weekly_get_no_label(con, ledger):
    # The same dates when 1 Jan 2027 (a Friday) is a holiday: Fridays 1 Jan (moved back to Thu 31 Dec),
    # 29 Jan and 26 Feb are also four-weekly. Three payments cannot tell the two apart (8.7% apart per year),
    # so the customer is left to the model rather than given a label that may be wrong.
    ledger.pay("C1", [date(2026, 12, 31), date(2027, 1, 29), date(2027, 2, 26)], 3000.0)
    ledger.load()
    _build(con, WINTER, holidays=("01-01",))
    assert con.execute("select status from intermediate.salary_streams").fetchall() == [("ambiguous",)]
    assert con.execute("select label_status from features.customer_label").fetchall() == [("ambiguous",)]


def test_four_weekly_pay_with_one_holiday_moved_date_stays_four_weekly(con, ledger):
    dates = every(date(2026, 8, 7), 28, 4)  # Fridays: 7 Aug, 4 Sep, 2 Oct, 30 Oct
    dates[1] = date(2026, 9, 3)  # a holiday on Friday 4 Sep: paid Thursday, gaps 27, 29, 28
    ledger.pay("C1", dates, 1500.0)
    ledger.load()
    _build(con, holidays=("2026-09-04",))
    [(freq, _, annual, _)] = _stream(con, "C1")
    assert freq == "four_weekly" and annual == pytest.approx(1500 * 365.25 / 28, abs=0.01)


def test_semi_monthly_pay_is_annualised_by_24(con, ledger):
    # The 15th and the last day of each month, moved to the previous business day when on a weekend.
    dates = [
        date(2026, 8, 14),
        date(2026, 8, 31),
        date(2026, 9, 15),
        date(2026, 9, 30),
        date(2026, 10, 15),
        date(2026, 10, 30),
    ]
    ledger.pay("C1", dates, 1250.0)
    ledger.load()
    _build(con)
    [(freq, _, annual, _)] = _stream(con, "C1")
    assert (freq, annual) == ("semi_monthly", pytest.approx(30_000.0))


def test_a_pay_rise_takes_over_after_two_payments(con, ledger):
    ledger.pay("C1", every(date(2026, 8, 7), 14, 3), 1000.0)
    ledger.pay("C1", every(date(2026, 9, 18), 14, 3), 1100.0)
    ledger.load()
    _build(con)
    assert _stream(con, "C1")[0][1] == 1100.0


def test_two_employers_add_up(con, ledger):
    ledger.pay("C1", [date(2026, 8, 25), date(2026, 9, 25), date(2026, 10, 23)], 2500.0, payer="EMP-A")
    ledger.pay("C1", every(date(2026, 8, 7), 7, 12), 100.0, payer="EMP-B")
    ledger.load()
    _build(con)
    salary = con.execute("select annual_salary, stream_count from features.customer_salary").fetchall()
    assert salary == [(pytest.approx(2500 * 12 + 100 * 365.25 / 7, abs=0.01), 2)]


def test_single_payment_gives_no_label(con, ledger):
    # One payment has no gap: frequency unknown, so the customer is left for the model to estimate.
    ledger.pay("C1", [date(2026, 10, 15)], 1800.0)
    ledger.load()
    _build(con)
    assert _stream(con, "C1")[0][0] == "irregular"
    assert con.execute("select count(*) from features.customer_salary").fetchall()[0][0] == 0


def test_a_stream_that_stopped_is_not_current(con, ledger):
    ledger.pay("C1", every(date(2026, 8, 7), 7, 4), 500.0)  # weekly pay ended late August
    ledger.load()
    _build(con)
    assert _stream(con, "C1")[0][3] is False
    assert con.execute("select count(*) from features.customer_salary").fetchall()[0][0] == 0


def test_uncoded_credits_from_a_payer_of_one_customer_are_not_pay(con, ledger):
    # A lodger's rent or one's own account elsewhere: regular, but the payer pays nobody else here.
    for d in [date(2026, 8, 28), date(2026, 9, 28), date(2026, 10, 28)]:
        ledger.add("C1", d, 2000.0, "CRDT", bank_txn_code="PMNT/RCDT/DMCT", counterparty_id="EMP-1")
    ledger.load()
    _build(con)
    assert _stream(con, "C1") == []


def test_pay_outside_the_window_is_ignored(con, ledger):
    ledger.pay("C1", [date(2026, 7, 28), date(2026, 11, 27)], 9999.0)
    ledger.load()
    _build(con)
    assert _stream(con, "C1") == []


def test_a_same_size_extra_payment_never_doubles_the_salary(con, ledger):
    # Found in review: 28 Aug, 28 Sep, 28 Oct plus an equal payment on 15 Oct once read as gaps 31, 17, 13
    # and a semi-monthly salary of 48,000. It is monthly pay with a same-size bonus, or semi-monthly pay
    # (15th and 28th) with 15 Sep missed: equally good fits, equal amounts, so no label at all.
    ledger.pay("C1", [date(2026, 8, 28), date(2026, 9, 28), date(2026, 10, 28)], 2000.0)
    ledger.pay("C1", [date(2026, 10, 15)], 2000.0, txn_id="EXTRA")
    ledger.load()
    _build(con)
    assert con.execute("select status, annual_salary from intermediate.salary_streams").fetchall() == [
        ("ambiguous", None)
    ]


@pytest.mark.parametrize(
    "parts",
    [(1800.0, 200.0), (1200.0, 900.0)],  # salary plus a same-day allowance; a salary split in two credits
)
def test_same_day_credits_from_one_payer_are_one_payment(con, ledger, parts):
    for part in parts:
        ledger.pay("C1", [date(2026, 8, 28), date(2026, 9, 28), date(2026, 10, 28)], part)
    ledger.load()
    _build(con)
    [(freq, amount, annual, _)] = _stream(con, "C1")
    assert (freq, amount, annual) == ("monthly", sum(parts), pytest.approx(12 * sum(parts)))


def test_a_large_pay_rise_keeps_the_stream_current(con, ledger):
    ledger.pay("C1", every(date(2026, 8, 7), 14, 4), 1000.0)  # 7 Aug .. 18 Sep
    ledger.pay("C1", every(date(2026, 10, 2), 14, 3), 1700.0)  # +70% from 2 Oct: outside the regular band
    ledger.load()
    _build(con)
    [(freq, _, _, current)] = _stream(con, "C1")
    assert freq == "fortnightly" and current is True
