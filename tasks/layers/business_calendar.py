"""The institution's business calendar: which days pay can land on, and where a pay day moves to.

Pay due on a weekend or public holiday is paid on the business day before or after it. The SQL that
finds pay schedules reads `ref.business_calendar`, written here for the window (plus margins) from the
`holidays` package (the institution's country, `payroll.holiday_country`) and the fixed dates listed in
`payroll.holidays`.
"""

from __future__ import annotations

from datetime import date, timedelta

import duckdb
import numpy as np
import pandas as pd

from ledgerband.tasks.core.errors import LedgerbandError
from ledgerband.tasks.core.period import Window
from ledgerband.tasks.core.settings import PayrollSettings, Settings

# Margins around the window: a pay date moved across the window's start, and the next pay day due after
# the last payment of a stream (up to a month plus a holiday weekend later).
MARGIN_BEFORE = timedelta(days=45)
MARGIN_AFTER = timedelta(days=75)


def holiday_dates(payroll: PayrollSettings, start: date, end: date) -> set[date]:
    """Public holidays between start and end (inclusive)."""
    years = range(start.year, end.year + 1)
    days: set[date] = set()
    if payroll.holiday_country:
        import holidays

        try:
            days |= set(holidays.country_holidays(payroll.holiday_country, years=years))
        except NotImplementedError as exc:
            raise LedgerbandError(
                f"payroll.holiday_country {payroll.holiday_country!r} is not a country the holidays package knows"
            ) from exc
    for text in payroll.holidays:
        if len(text) == 5:  # MM-DD, every year
            month, day = int(text[:2]), int(text[3:])
            days |= {date(y, month, day) for y in years}
        else:  # YYYY-MM-DD, once
            days.add(date.fromisoformat(text))
    return {d for d in days if start <= d <= end}


def business_calendar(start: date, end: date, holidays: set[date]) -> pd.DataFrame:
    """One row per day from start to end: business day or not, and the business days either side."""
    pad = timedelta(days=14)  # any real calendar has a business day within a fortnight of any day
    days = pd.date_range(start - pad, end + pad, freq="D")
    weekday = days.weekday.to_numpy()  # Monday 0 … Sunday 6
    is_business = (weekday < 5) & ~days.normalize().isin(pd.DatetimeIndex(sorted(holidays)))
    idx = np.arange(len(days))
    business_idx = np.where(is_business, idx, -1)
    prev_idx = np.maximum.accumulate(business_idx)
    nxt = np.where(is_business, idx, len(days))
    next_idx = np.minimum.accumulate(nxt[::-1])[::-1]
    inside = (days >= pd.Timestamp(start)) & (days <= pd.Timestamp(end))
    if (prev_idx[inside] < 0).any() or (next_idx[inside] >= len(days)).any():
        # The margins hold business days on both sides of the window in any real calendar.
        raise LedgerbandError(f"business calendar {start}..{end} has no business day at one of its ends")
    prev_idx, next_idx = np.clip(prev_idx, 0, len(days) - 1), np.clip(next_idx, 0, len(days) - 1)
    frame = pd.DataFrame(
        {
            "day": days.date,
            "is_business_day": is_business,
            "prev_business_day": days[prev_idx].date,
            "next_business_day": days[next_idx].date,
            "iso_weekday": weekday + 1,
            "day_of_month": days.day,
            "days_in_month": days.days_in_month,
            "month_index": days.year * 12 + days.month - 1,
        }
    )
    return frame[inside].reset_index(drop=True)


def write_business_calendar(con: duckdb.DuckDBPyConnection, window: Window, payroll: PayrollSettings) -> int:
    """(Re)write ref.business_calendar around the window; returns its number of days."""
    start, end = window.start - MARGIN_BEFORE, window.end + MARGIN_AFTER
    frame = business_calendar(start, end, holiday_dates(payroll, start, end))
    con.register("calendar_rows", frame)
    con.execute("delete from ref.business_calendar")
    con.execute("insert into ref.business_calendar by name select * from calendar_rows")
    con.unregister("calendar_rows")
    return len(frame)


def write_pay_frequencies(con: duckdb.DuckDBPyConnection, settings: Settings) -> None:
    """(Re)write ref.pay_frequencies: pay periods per year by the configured convention."""
    rows = settings.payroll.periods_per_year()
    con.execute("delete from ref.pay_frequencies")
    con.executemany(
        "insert into ref.pay_frequencies values (?, ?, ?)",
        [[name, value, settings.payroll.annualisation] for name, value in rows.items()],
    )
