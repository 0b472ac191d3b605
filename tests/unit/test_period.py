from datetime import date

import pytest

from ledgerband.tasks.core.errors import LedgerbandError
from ledgerband.tasks.core.period import Period


def test_period_bounds_follow_the_calendar_including_leap_february():
    # Source: Gregorian calendar rules — 2028 is a leap year, 2026 is not.
    assert Period.parse("2028-02").end == date(2028, 2, 29)
    assert Period.parse("2026-02").end == date(2026, 2, 28)
    assert Period.parse("2026-12").start == date(2026, 12, 1)


def test_window_runs_oldest_first_across_a_year_end():
    assert [str(p) for p in Period.parse("2027-01").window(3)] == ["2026-11", "2026-12", "2027-01"]


@pytest.mark.parametrize(
    "text", ["2026-13", "2026-1", "26-10", "", "2026/10"]
)  # month out of range, no zero pad, short year, empty, wrong separator
def test_bad_period_text_is_a_clear_user_error(text):
    with pytest.raises(LedgerbandError, match="YYYY-MM"):
        Period.parse(text)
