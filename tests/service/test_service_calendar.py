"""Calendar entries (holidays, one-off events) over the weekly program, across DST changes.

Check values: the EU summer-time rule (Directive 2000/84/EC [published]) moves clocks forward
at 01:00 UTC on the last Sunday of March and back at 01:00 UTC on the last Sunday of October;
in 2026 those are 29 March and 25 October. Vienna is UTC+1 in winter, UTC+2 in summer. The
expected UTC instants below are worked out by hand from that rule.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from roomloop.config.loader import load_site
from roomloop.config.models import CalendarEntry, ProgramEntry
from roomloop.errors import ConfigError
from roomloop.service.program import (
    ProgramCursor,
    level_at,
    next_change,
    resolve_calendar,
)

VIENNA = ZoneInfo("Europe/Vienna")


def utc(*args: int) -> float:
    year, month, day, *rest = args
    hour, minute = (*rest, 0, 0)[:2]
    return dt.datetime(year, month, day, hour, minute, tzinfo=dt.UTC).timestamp()


WEEKLY = [
    ProgramEntry(days="mon-fri", at="07:00", level="comfort"),
    ProgramEntry(days="mon-fri", at="18:00", level="economy"),
]


def test_a_holiday_replaces_the_program_from_local_midnight_to_the_end_of_its_last_day() -> None:
    closure = CalendarEntry(
        name="closure", start="2026-12-24", end="2026-12-27", level="protection"
    )
    periods = resolve_calendar([closure], VIENNA)
    # 2026-12-24 00:00 CET = 12-23 23:00 UTC; the end date is included: 12-28 00:00 CET.
    assert periods[0].start == utc(2026, 12, 23, 23, 0)
    assert periods[0].end == utc(2026, 12, 27, 23, 0)
    # Wednesday 12-23 12:00 CET: the program's comfort; the next change is the program's 18:00.
    change = next_change(WEEKLY, utc(2026, 12, 23, 11, 0), VIENNA, "economy", periods)
    assert change is not None and (change.at, change.level, change.by) == (
        utc(2026, 12, 23, 17, 0), "economy", "program"
    )
    # From 18:00 the next change is the holiday itself, named by the entry.
    change = next_change(WEEKLY, utc(2026, 12, 23, 17, 0), VIENNA, "economy", periods)
    assert change is not None and (change.at, change.level, change.by) == (
        utc(2026, 12, 23, 23, 0), "protection", "closure"
    )
    # Thursday 12-24 07:00 (a weekday switch inside the holiday) does nothing.
    assert level_at(WEEKLY, utc(2026, 12, 24, 6, 0), VIENNA, "economy", periods) == "protection"
    # The holiday ends at Monday 12-28 00:00 CET, into the program's economy (the level in force
    # then); the next change is Monday 07:00 comfort.
    change = next_change(WEEKLY, utc(2026, 12, 24, 6, 0), VIENNA, "economy", periods)
    assert change is not None and (change.at, change.level, change.by) == (
        utc(2026, 12, 27, 23, 0), "economy", "program"
    )
    after = next_change(WEEKLY, change.at, VIENNA, "economy", periods)
    assert after is not None and after.at == utc(2026, 12, 28, 6, 0)


def test_calendar_bounds_follow_daylight_saving() -> None:
    # An event from Saturday 03-28 20:00 (CET, UTC+1) to Sunday 03-29 20:00 (CEST, UTC+2):
    # 23 hours long on the clock of the world, 24 on the wall.
    event = CalendarEntry(
        name="open-day", start="2026-03-28 20:00", end="2026-03-29 20:00", level="comfort"
    )
    (period,) = resolve_calendar([event], VIENNA)
    assert period.start == utc(2026, 3, 28, 19, 0)
    assert period.end == utc(2026, 3, 29, 18, 0)
    # A whole-day entry on the fall-back day lasts 25 hours: 10-25 00:00 CEST to 10-26 00:00 CET.
    day = CalendarEntry(name="fair", start="2026-10-25", end="2026-10-25", level="standby")
    (period,) = resolve_calendar([day], VIENNA)
    assert period.end - period.start == 25 * 3600
    # A start inside the skipped hour (02:30 on 03-29) starts at the change, 03:00 CEST.
    gap = CalendarEntry(
        name="gap", start="2026-03-29 02:30", end="2026-03-29 05:00", level="comfort"
    )
    assert resolve_calendar([gap], VIENNA)[0].start == utc(2026, 3, 29, 1, 0)


def test_the_later_of_two_overlapping_entries_wins() -> None:
    entries = [
        CalendarEntry(name="closure", start="2026-08-01", end="2026-08-31", level="protection"),
        CalendarEntry(name="open-day", start="2026-08-15 09:00", end="2026-08-15 17:00",
                      level="comfort"),
    ]
    periods = resolve_calendar(entries, VIENNA)
    assert level_at(WEEKLY, utc(2026, 8, 15, 10, 0), VIENNA, "economy", periods) == "comfort"
    assert level_at(WEEKLY, utc(2026, 8, 15, 16, 0), VIENNA, "economy", periods) == "protection"
    change = next_change(WEEKLY, utc(2026, 8, 15, 10, 0), VIENNA, "economy", periods)
    # 17:00 CEST = 15:00 UTC: back to the closure.
    assert change is not None and (change.at, change.level, change.by) == (
        utc(2026, 8, 15, 15, 0), "protection", "closure"
    )


CALENDAR = [
    CalendarEntry(name="closure", start="2026-03-26", end="2026-03-30", level="protection"),
    CalendarEntry(name="event", start="2026-10-24 22:00", end="2026-10-25 03:00", level="comfort"),
]


@settings(max_examples=200, deadline=None)
@given(st.integers(min_value=int(utc(2026, 3, 20)), max_value=int(utc(2026, 11, 1))))
def test_next_change_is_where_the_level_really_changes(when: int) -> None:
    periods = resolve_calendar(CALENDAR, VIENNA)
    change = next_change(WEEKLY, when, VIENNA, "economy", periods)
    assert change is not None
    current = level_at(WEEKLY, when, VIENNA, "economy", periods)
    assert change.level != current
    assert level_at(WEEKLY, change.at - 1, VIENNA, "economy", periods) == current
    assert level_at(WEEKLY, change.at, VIENNA, "economy", periods) == change.level
    cursor = ProgramCursor(WEEKLY, VIENNA, "economy", CALENDAR)
    assert cursor.at(when) == (current, change)


def test_an_empty_program_with_a_calendar_still_changes_at_the_entry() -> None:
    periods = resolve_calendar(CALENDAR, VIENNA)
    change = next_change([], utc(2026, 3, 1), VIENNA, "standby", periods)
    assert change is not None and change.level == "protection" and change.by == "closure"
    assert next_change([], utc(2026, 11, 1), VIENNA, "standby", periods) is None


def _site(tmp_path: Path, calendar: str) -> Path:
    path = tmp_path / "site.yaml"
    path.write_text(
        "site: {name: larchside-studio, timezone: Europe/Vienna}\n"
        "points:\n"
        "  - {name: t, type: mqtt-input, topic: sensors/t}\n"
        "  - {name: r, type: mqtt-output, command_topic: relays/r}\n"
        "broker: {host: 127.0.0.1}\n"
        "zones:\n"
        "  - {name: studio, inputs: [t], output: r, heating: electric}\n" + calendar
    )
    return path


def test_the_site_file_takes_dates_and_local_times(tmp_path: Path) -> None:
    site = load_site(
        _site(
            tmp_path,
            "calendar:\n"
            "  - {name: closure, start: 2026-12-24, end: 2027-01-01, level: protection}\n"
            "  - {name: concert, start: '2026-12-12 17:00', end: '2026-12-12 23:30',"
            " level: comfort, zones: [studio]}\n",
        )
    )
    assert [e.name for e in site.calendar_for("studio")] == ["closure", "concert"]
    assert site.calendar[0].start == "2026-12-24" and site.calendar[1].end == "2026-12-12 23:30"


@pytest.mark.parametrize(
    ("entry", "where", "fragment"),
    [
        ("{name: x, start: 2026-12-24, end: 2026-12-23, level: economy}", "calendar[x]",
         "is not after start"),
        ("{name: x, start: 2026-02-30, end: 2026-03-01, level: economy}", "calendar[x].start",
         "is not a date"),
        ("{name: x, start: '24.12.2026', end: 2026-12-26, level: economy}", "calendar[x].start",
         "is not a date YYYY-MM-DD"),
        ("{name: x, start: 2026-12-24, end: 2026-12-26, level: economy, zones: [attic]}",
         "calendar[x].zones[0]", "no zone named 'attic'"),
        ("{name: x, start: 2026-12-24, end: 2026-12-26, level: away}", "calendar[x].level",
         ""),
    ],
)
def test_bad_calendar_entries_are_refused_with_their_line(
    tmp_path: Path, entry: str, where: str, fragment: str
) -> None:
    path = _site(tmp_path, f"calendar:\n  - {entry}\n")
    with pytest.raises(ConfigError) as caught:
        load_site(path)
    problems = caught.value.problems
    assert any(
        p.path == where and fragment in p.message and p.line == 9 for p in problems
    ), [str(p) for p in problems]


def test_the_published_state_names_the_calendar_entry_of_the_next_change() -> None:
    from roomloop.core.types import ZoneOutputs
    from roomloop.service.publisher import ZoneView, state_payload

    periods = resolve_calendar(CALENDAR, VIENNA)
    when = utc(2026, 3, 25, 20, 0)  # Wednesday evening before the closure
    change = next_change(WEEKLY, when, VIENNA, "economy", periods)
    outputs = ZoneOutputs(
        demand=False, reason="off-to-cut-in", temperature=19.0, setpoint=16.0,
        level="economy", mode="auto", anticipator_k=0.0, droop_k=0.0,
    )
    view = ZoneView("studio", outputs, when, "r", "ok", False, None, change, "learned-duty")
    payload = state_payload(view, units="C", tz=VIENNA)
    # 2026-03-26 00:00 CET = 03-25 23:00 UTC
    assert payload["next_change"] == {
        "at": "2026-03-26T00:00:00+01:00", "level": "protection", "by": "closure"
    }
