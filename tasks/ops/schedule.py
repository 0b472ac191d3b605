"""When the monthly run happens and which month it reads.

A scheduled run reads the last complete month before its *scheduled* time, in the institution's time
zone: the run scheduled for 06:00 on 3 November (Europe/Dublin) reads October, however late a worker
picks it up and whatever the clock says when it starts. A run started by hand names its period.
"""

from __future__ import annotations

from datetime import datetime
from zoneinfo import ZoneInfo

from ledgerband.tasks.core.period import Period


def period_for_scheduled(scheduled: datetime, timezone: str) -> Period:
    """The last complete month before `scheduled`, read on the calendar of `timezone`."""
    if scheduled.tzinfo is None:
        raise ValueError("a scheduled time must carry its time zone")
    local = scheduled.astimezone(ZoneInfo(timezone))
    return Period(local.year, local.month).shift(-1)


def cron_schedule(settings):
    """The Prefect schedule of the monthly deployment (cron in an explicit IANA time zone)."""
    from prefect.schedules import Cron

    s = settings.schedule
    return Cron(s.cron, timezone=s.timezone)
