"""The weekly program: which level mode ``auto`` uses at a given time, and when it next changes.

Entries are switch points in the site's local time ("from 06:30 on mon-fri,
comfort"); the level in force is the one of the latest switch point at or
before the time asked. Local times are resolved with :mod:`zoneinfo`, so the
program follows daylight-saving changes:

* a switch time that does not exist on a spring-forward day (02:30 in the
  skipped hour) happens at the first instant the local clock reads it or later,
  i.e. at the change itself (03:00 new time);
* a switch time that exists twice on a fall-back day happens at its first
  occurrence.

Pure functions: time comes in as POSIX seconds, nothing reads a clock.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Sequence
from dataclasses import dataclass
from zoneinfo import ZoneInfo

from roomloop.config.models import DAYS, Level, ProgramEntry

_LOOK_DAYS = 8
"""A weekly program repeats within 7 days; one more covers the day boundary."""


@dataclass(frozen=True, slots=True)
class Switch:
    """One concrete switch point: at ``at`` (POSIX seconds) the level becomes ``level``."""

    at: float
    level: Level


def switch_instant(day: dt.date, minute_of_day: int, tz: ZoneInfo) -> float:
    """POSIX time of the first instant on ``day`` with wall time ``minute_of_day`` or later."""
    wall = dt.datetime.combine(day, dt.time(minute_of_day // 60, minute_of_day % 60))
    first = wall.replace(tzinfo=tz, fold=0)
    if _wall_time(first.timestamp(), tz) == wall:
        return first.timestamp()
    # The wall time falls into a spring-forward gap: fold=1 maps it before the
    # change and fold=0 after; the change itself is the first instant at or past it.
    low = int(wall.replace(tzinfo=tz, fold=1).timestamp())
    high = int(first.timestamp())
    if low > high:
        low, high = high, low
    while high - low > 1:
        mid = (low + high) // 2
        if _wall_time(mid, tz) >= wall:
            high = mid
        else:
            low = mid
    return float(high)


def _wall_time(posix: float, tz: ZoneInfo) -> dt.datetime:
    return dt.datetime.fromtimestamp(posix, tz).replace(tzinfo=None)


def switches_between(
    entries: Sequence[ProgramEntry], first_day: dt.date, last_day: dt.date, tz: ZoneInfo
) -> list[Switch]:
    """Every switch point on the local dates ``first_day``..``last_day``, in time order.

    Two entries at the same instant: the later one in the file wins (it sorts last).
    """
    out: list[tuple[float, int, Level]] = []
    day = first_day
    while day <= last_day:
        weekday = DAYS[day.weekday()]
        for index, entry in enumerate(entries):
            if weekday in entry.days:
                out.append((switch_instant(day, entry.minute_of_day, tz), index, entry.level))
        day += dt.timedelta(days=1)
    out.sort()
    return [Switch(at, level) for at, _, level in out]


def level_at(
    entries: Sequence[ProgramEntry], when: float, tz: ZoneInfo, default: Level = "comfort"
) -> Level:
    """The level the program puts in force at ``when``; ``default`` for an empty program."""
    if not entries:
        return default
    today = dt.datetime.fromtimestamp(when, tz).date()
    past = [
        s
        for s in switches_between(entries, today - dt.timedelta(days=_LOOK_DAYS), today, tz)
        if s.at <= when
    ]
    return past[-1].level if past else default


def next_change(
    entries: Sequence[ProgramEntry], when: float, tz: ZoneInfo, default: Level = "comfort"
) -> Switch | None:
    """The first switch point after ``when`` that changes the level, or None if it never changes."""
    if not entries:
        return None
    current = level_at(entries, when, tz, default)
    today = dt.datetime.fromtimestamp(when, tz).date()
    for switch in switches_between(entries, today, today + dt.timedelta(days=_LOOK_DAYS), tz):
        if switch.at > when and switch.level != current:
            return switch
    return None


class ProgramCursor:
    """:func:`level_at` and :func:`next_change` for a zone's ticks, computed once per change.

    Between two switch points the answer cannot change, so a zone ticking every
    few seconds recomputes only when it passes the next change (or when time
    jumps back, e.g. a clock set back).
    """

    def __init__(
        self, entries: Sequence[ProgramEntry], tz: ZoneInfo, default: Level = "comfort"
    ) -> None:
        self.entries = tuple(entries)
        self.tz = tz
        self.default = default
        self._since = math.inf
        self._until = -math.inf
        self._level: Level = default
        self._next: Switch | None = None

    def at(self, when: float) -> tuple[Level, Switch | None]:
        """The level in force at ``when`` and the next change after it (None: never)."""
        if not self._since <= when < self._until:
            self._level = level_at(self.entries, when, self.tz, self.default)
            self._next = next_change(self.entries, when, self.tz, self.default)
            self._since = when
            self._until = math.inf if self._next is None else self._next.at
        return self._level, self._next
