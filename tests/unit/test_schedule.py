"""Which month a scheduled run reads, and when the schedule fires (month ends, daylight saving)."""

from __future__ import annotations

from datetime import UTC, datetime
from zoneinfo import ZoneInfo

import pytest

from ledgerband.tasks.core.settings import Settings
from ledgerband.tasks.ops.schedule import period_for_scheduled

DUBLIN = ZoneInfo("Europe/Dublin")


@pytest.mark.parametrize(
    ("scheduled", "period"),
    [
        (datetime(2026, 11, 3, 6, 0, tzinfo=DUBLIN), "2026-10"),
        (datetime(2027, 1, 3, 6, 0, tzinfo=DUBLIN), "2026-12"),  # across the year end
        (datetime(2027, 3, 3, 6, 0, tzinfo=DUBLIN), "2027-02"),  # after the shortest month
        # 23:30 UTC on 31 March is already 1 April in Dublin (summer time): the month is March.
        (datetime(2027, 3, 31, 23, 30, tzinfo=UTC), "2027-03"),
        # A worker that picks the run up days late still reads the scheduled month.
        (datetime(2026, 12, 3, 6, 0, tzinfo=DUBLIN), "2026-11"),
    ],
)
def test_a_scheduled_run_reads_the_month_before_its_scheduled_time(scheduled, period):
    assert str(period_for_scheduled(scheduled, "Europe/Dublin")) == period


def test_a_time_without_a_zone_is_refused():
    with pytest.raises(ValueError, match="time zone"):
        period_for_scheduled(datetime(2026, 11, 3, 6, 0), "Europe/Dublin")


def test_the_schedule_keeps_06_00_local_through_daylight_saving():
    # Prefect's own cron schedule (server schema, DST-aware) with our settings; the tz database facts:
    # Ireland is UTC+0 in winter and UTC+1 in summer (IST), changing on the last Sundays of March/October.
    from prefect.server.schemas.schedules import CronSchedule

    s = Settings().schedule
    import asyncio

    dates = asyncio.run(
        CronSchedule(cron=s.cron, timezone=s.timezone).get_dates(n=6, start=datetime(2026, 12, 2, tzinfo=UTC))
    )
    local = [d.astimezone(DUBLIN) for d in dates]
    assert [(d.month, d.day, d.hour, d.minute) for d in local] == [
        (12, 3, 6, 0),
        (1, 3, 6, 0),
        (2, 3, 6, 0),
        (3, 3, 6, 0),
        (4, 3, 6, 0),
        (5, 3, 6, 0),
    ]
    assert [d.astimezone(UTC).hour for d in dates] == [6, 6, 6, 6, 5, 5]
    assert [str(period_for_scheduled(d, s.timezone)) for d in dates] == [
        "2026-11",
        "2026-12",
        "2027-01",
        "2027-02",
        "2027-03",
        "2027-04",
    ]


def test_an_unknown_time_zone_is_a_configuration_error():
    with pytest.raises(ValueError, match="not an IANA time zone"):
        Settings(schedule={"timezone": "Corrandale/Central"})


def test_prefect_yaml_says_what_the_settings_say():
    import yaml

    from ledgerband.tasks.core.settings import Settings as S

    root = __import__("pathlib").Path(__file__).resolve().parents[2]
    spec = yaml.safe_load((root / "prefect.yaml").read_text())
    [d] = spec["deployments"]
    s = S().schedule
    assert d["name"] == s.deployment_name and d["work_pool"]["name"] == s.work_pool
    assert d["schedules"][0]["cron"] == s.cron and d["schedules"][0]["timezone"] == s.timezone
    assert d["concurrency_limit"] == 1
