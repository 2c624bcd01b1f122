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

Calendar entries (holidays, one-off events: ``calendar:`` in the site file) are
date ranges whose level replaces the weekly program while they last; their
bounds are local times resolved the same way, so a holiday that starts at
midnight starts at local midnight on either side of a daylight-saving change.
Where two entries overlap, the later one in the file wins.

Pure functions: time comes in as POSIX seconds, nothing reads a clock.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Sequence
from dataclasses import dataclass
from zoneinfo import ZoneInfo

from roomloop.config.models import DAYS, CalendarEntry, Level, ProgramEntry, calendar_wall

_LOOK_DAYS = 8
"""A weekly program repeats within 7 days; one more covers the day boundary."""


PROGRAM = "program"
"""What a switch comes from when the weekly program makes it (else a calendar entry's name)."""


@dataclass(frozen=True, slots=True)
class Switch:
    """One concrete switch point: at ``at`` (POSIX seconds) the level becomes ``level``."""

    at: float
    level: Level
    by: str = PROGRAM
    """``program`` (the weekly program) or the name of the calendar entry that sets the level."""


@dataclass(frozen=True, slots=True)
class Period:
    """A calendar entry resolved to POSIX seconds: ``level`` in ``[start, end)``."""

    start: float
    end: float
    level: Level
    name: str


def resolve_calendar(entries: Sequence[CalendarEntry], tz: ZoneInfo) -> tuple[Period, ...]:
    """The entries' local bounds as instants, in file order."""
    periods: list[Period] = []
    for entry in entries:
        start_day, start_minute = calendar_wall(entry.start, end=False)
        end_day, end_minute = calendar_wall(entry.end, end=True)
        periods.append(
            Period(
                switch_instant(start_day, start_minute, tz),
                switch_instant(end_day, end_minute, tz),
                entry.level,
                entry.name,
            )
        )
    return tuple(periods)


def _period_at(periods: Sequence[Period], when: float) -> Period | None:
    """The period in force at ``when``: of those containing it, the last in the file."""
    found: Period | None = None
    for period in periods:
        if period.start <= when < period.end:
            found = period
    return found


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
    entries: Sequence[ProgramEntry],
    when: float,
    tz: ZoneInfo,
    default: Level = "comfort",
    periods: Sequence[Period] = (),
) -> Level:
    """The level in force at ``when``: a calendar period's, else the weekly program's
    (``default`` for an empty program)."""
    return _source_at(entries, when, tz, default, periods)[0]


def _source_at(
    entries: Sequence[ProgramEntry],
    when: float,
    tz: ZoneInfo,
    default: Level,
    periods: Sequence[Period],
) -> tuple[Level, str]:
    period = _period_at(periods, when)
    if period is not None:
        return period.level, period.name
    return _weekly_level_at(entries, when, tz, default), PROGRAM


def _weekly_level_at(
    entries: Sequence[ProgramEntry], when: float, tz: ZoneInfo, default: Level
) -> Level:
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
    entries: Sequence[ProgramEntry],
    when: float,
    tz: ZoneInfo,
    default: Level = "comfort",
    periods: Sequence[Period] = (),
) -> Switch | None:
    """The first instant after ``when`` at which the level changes (a weekly switch point
    outside the calendar periods, or a period's start or end), or None if it never changes."""
    current = level_at(entries, when, tz, default, periods)
    bounds = sorted({b for p in periods for b in (p.start, p.end)})
    t = when
    for _ in range(2 * len(bounds) + 1):
        bound = next((b for b in bounds if b > t), math.inf)
        if _period_at(periods, t) is None:
            weekly = _first_weekly_change(entries, t, tz, current)
            if weekly is not None and weekly.at < bound:
                return weekly
        if bound == math.inf:
            return None
        t = bound
        level, by = _source_at(entries, t, tz, default, periods)
        if level != current:
            return Switch(t, level, by)
    return None  # pragma: no cover - every bound is visited at most once above


def _first_weekly_change(
    entries: Sequence[ProgramEntry], when: float, tz: ZoneInfo, current: Level
) -> Switch | None:
    """The first weekly switch point after ``when`` to a level other than ``current``; the
    program repeats every week, so none within eight days means none ever."""
    if not entries:
        return None
    today = dt.datetime.fromtimestamp(when, tz).date()
    switches = switches_between(entries, today, today + dt.timedelta(days=_LOOK_DAYS), tz)
    for k, switch in enumerate(switches):
        if switch.at <= when or (k + 1 < len(switches) and switches[k + 1].at == switch.at):
            continue  # of two entries at one instant the later one in the file wins
        if switch.level != current:
            return switch
    return None


@dataclass(frozen=True, slots=True)
class ProgramChangeover:
    """The changeover the program sets, and the instant of the switch (or calendar entry's
    start) that set it: a new ``since`` is a new program change, applied once."""

    changeover: str
    since: float
    by: str = PROGRAM


def changeover_at(
    entries: Sequence[ProgramEntry],
    calendar: Sequence[CalendarEntry],
    when: float,
    tz: ZoneInfo,
    default: str | None = None,
) -> ProgramChangeover | None:
    """The changeover the program has in force at ``when``: a calendar entry's (the last in
    the file that contains ``when`` and gives one), else the one of the latest weekly entry
    that gives one. When a calendar entry's changeover ended after that weekly entry, the
    weekly one (or ``default``, the zone's own) is back from the entry's end. None: nothing
    in the program gives one."""
    found: ProgramChangeover | None = None
    for item, period in zip(calendar, resolve_calendar(calendar, tz), strict=True):
        if item.changeover is not None and period.start <= when < period.end:
            found = ProgramChangeover(item.changeover, period.start, item.name)
    if found is not None:
        return found
    latest = _weekly_changeover_at(entries, when, tz)
    ended = [
        period.end
        for item, period in zip(calendar, resolve_calendar(calendar, tz), strict=True)
        if item.changeover is not None and period.end <= when
    ]
    if ended and (latest is None or max(ended) > latest.since):
        value = default if latest is None else latest.changeover
        return None if value is None else ProgramChangeover(value, max(ended))
    return latest


def _weekly_changeover_at(
    entries: Sequence[ProgramEntry], when: float, tz: ZoneInfo
) -> ProgramChangeover | None:
    """The changeover of the latest weekly entry at or before ``when`` that gives one."""
    weekly = [e for e in entries if e.changeover is not None]
    if not weekly:
        return None
    today = dt.datetime.fromtimestamp(when, tz).date()
    first = today - dt.timedelta(days=_LOOK_DAYS)
    latest: ProgramChangeover | None = None
    day = first
    while day <= today:
        weekday = DAYS[day.weekday()]
        for entry in weekly:
            at = switch_instant(day, entry.minute_of_day, tz)
            if weekday in entry.days and at <= when and (latest is None or at >= latest.since):
                assert entry.changeover is not None
                latest = ProgramChangeover(entry.changeover, at)
        day += dt.timedelta(days=1)
    return latest


class ProgramCursor:
    """:func:`level_at` and :func:`next_change` for a zone's ticks, computed once per change.

    Between two switch points the answer cannot change, so a zone ticking every
    few seconds recomputes only when it passes the next change (or when time
    jumps back, e.g. a clock set back).
    """

    def __init__(
        self,
        entries: Sequence[ProgramEntry],
        tz: ZoneInfo,
        default: Level = "comfort",
        calendar: Sequence[CalendarEntry] = (),
    ) -> None:
        self.entries = tuple(entries)
        self.tz = tz
        self.default = default
        self.periods = resolve_calendar(calendar, tz)
        self._since = math.inf
        self._until = -math.inf
        self._level: Level = default
        self._next: Switch | None = None

    def at(self, when: float) -> tuple[Level, Switch | None]:
        """The level in force at ``when`` and the next change after it (None: never)."""
        if not self._since <= when < self._until:
            self._level = level_at(self.entries, when, self.tz, self.default, self.periods)
            self._next = next_change(self.entries, when, self.tz, self.default, self.periods)
            self._since = when
            self._until = math.inf if self._next is None else self._next.at
        return self._level, self._next
