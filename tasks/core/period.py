"""Calendar months (periods) and feature windows: parsed once at the edge, passed as objects after."""

from __future__ import annotations

import calendar
import re
from dataclasses import dataclass
from datetime import date, datetime

from ledgerband.tasks.core.errors import LedgerbandError

_PERIOD = re.compile(r"^(\d{4})-(0[1-9]|1[0-2])$")


@dataclass(frozen=True, order=True)
class Period:
    """A calendar month, written YYYY-MM."""

    year: int
    month: int

    @classmethod
    def parse(cls, text: str | Period) -> Period:
        """`2026-10` → Period(2026, 10); anything else is a LedgerbandError naming the text."""
        if isinstance(text, Period):
            return text
        m = _PERIOD.match(text or "")
        if not m:
            raise LedgerbandError(f"period {text!r} is not a month written YYYY-MM (e.g. 2026-10)")
        return cls(int(m.group(1)), int(m.group(2)))

    @classmethod
    def of(cls, day: date | datetime) -> Period:
        return cls(day.year, day.month)

    def __str__(self) -> str:
        return f"{self.year:04d}-{self.month:02d}"

    @property
    def start(self) -> date:
        return date(self.year, self.month, 1)

    @property
    def end(self) -> date:
        return date(self.year, self.month, calendar.monthrange(self.year, self.month)[1])

    def shift(self, months: int) -> Period:
        index = self.year * 12 + (self.month - 1) + months
        return Period(index // 12, index % 12 + 1)

    def window(self, months: int) -> Window:
        """The `months` periods ending with this one."""
        return Window(tuple(self.shift(-k) for k in range(months - 1, -1, -1)))


@dataclass(frozen=True)
class Window:
    """Consecutive periods, oldest first: the months a run's features may see."""

    periods: tuple[Period, ...]

    def __post_init__(self) -> None:
        if not self.periods:
            raise ValueError("a window holds at least one period")

    def __iter__(self):
        return iter(self.periods)

    def __len__(self) -> int:
        return len(self.periods)

    def __contains__(self, period: object) -> bool:
        return period in self.periods

    @property
    def first(self) -> Period:
        return self.periods[0]

    @property
    def last(self) -> Period:
        return self.periods[-1]

    @property
    def start(self) -> date:
        return self.first.start

    @property
    def end(self) -> date:
        return self.last.end

    @property
    def labels(self) -> list[str]:
        return [str(p) for p in self.periods]

    def __str__(self) -> str:
        return f"{self.first}..{self.last}" if len(self) > 1 else str(self.first)
