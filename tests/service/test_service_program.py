"""The weekly program across daylight-saving changes.

Check values: the EU summer-time rule (Directive 2000/84/EC [published]) moves
clocks forward at 01:00 UTC on the last Sunday of March and back at 01:00 UTC on
the last Sunday of October; in 2026 those are 29 March and 25 October. Vienna is
UTC+1 in winter, UTC+2 in summer. The expected UTC instants below are worked out
by hand from that rule.
"""

from __future__ import annotations

import datetime as dt
from zoneinfo import ZoneInfo

from hypothesis import given, settings
from hypothesis import strategies as st

from roomloop.config.models import ProgramEntry
from roomloop.service.program import ProgramCursor, level_at, next_change, switch_instant

VIENNA = ZoneInfo("Europe/Vienna")
UTC = dt.UTC


def utc(*args: int) -> float:
    """POSIX seconds of a UTC time given as year, month, day[, hour[, minute[, second]]]."""
    year, month, day, *rest = args
    hour, minute, second = (*rest, 0, 0, 0)[:3]
    return dt.datetime(year, month, day, hour, minute, second, tzinfo=UTC).timestamp()


PROGRAM = [
    ProgramEntry(days="all", at="06:00", level="comfort"),
    ProgramEntry(days="all", at="22:00", level="economy"),
    ProgramEntry(days="sun", at="02:30", level="standby"),
]


def test_spring_forward_switch_in_the_skipped_hour_happens_at_the_change() -> None:
    # 2026-03-29: 02:00 CET jumps to 03:00 CEST at 01:00 UTC; 02:30 local never exists.
    assert level_at(PROGRAM, utc(2026, 3, 29, 0, 59, 59), VIENNA) == "economy"
    assert level_at(PROGRAM, utc(2026, 3, 29, 1, 0, 0), VIENNA) == "standby"
    change = next_change(PROGRAM, utc(2026, 3, 28, 23, 0), VIENNA)
    assert change is not None
    assert (change.at, change.level) == (utc(2026, 3, 29, 1, 0), "standby")


def test_after_spring_forward_local_times_use_summer_time() -> None:
    # 06:00 CEST = 04:00 UTC (it would be 05:00 UTC if winter time were still used).
    assert level_at(PROGRAM, utc(2026, 3, 29, 3, 59, 59), VIENNA) == "standby"
    assert level_at(PROGRAM, utc(2026, 3, 29, 4, 0), VIENNA) == "comfort"
    # 22:00 CEST = 20:00 UTC
    assert level_at(PROGRAM, utc(2026, 3, 29, 19, 59), VIENNA) == "comfort"
    assert level_at(PROGRAM, utc(2026, 3, 29, 20, 0), VIENNA) == "economy"


def test_fall_back_switch_in_the_repeated_hour_happens_once_at_its_first_occurrence() -> None:
    # 2026-10-25: 03:00 CEST goes back to 02:00 CET at 01:00 UTC; 02:30 local occurs at
    # 00:30 UTC (CEST) and again at 01:30 UTC (CET). The first one counts.
    assert level_at(PROGRAM, utc(2026, 10, 25, 0, 29, 59), VIENNA) == "economy"
    assert level_at(PROGRAM, utc(2026, 10, 25, 0, 30), VIENNA) == "standby"
    change = next_change(PROGRAM, utc(2026, 10, 25, 0, 0), VIENNA)
    assert change is not None and change.at == utc(2026, 10, 25, 0, 30)
    # The second 02:30 is not a new switch point: the next change is 06:00 CET = 05:00 UTC.
    change = next_change(PROGRAM, utc(2026, 10, 25, 1, 15), VIENNA)
    assert change is not None
    assert (change.at, change.level) == (utc(2026, 10, 25, 5, 0), "comfort")
    assert level_at(PROGRAM, utc(2026, 10, 25, 4, 59, 59), VIENNA) == "standby"


def test_switch_instant_in_gap_and_overlap() -> None:
    assert switch_instant(dt.date(2026, 3, 29), 150, VIENNA) == utc(2026, 3, 29, 1, 0)
    assert switch_instant(dt.date(2026, 10, 25), 150, VIENNA) == utc(2026, 10, 25, 0, 30)
    assert switch_instant(dt.date(2026, 7, 1), 6 * 60, VIENNA) == utc(2026, 7, 1, 4, 0)
    assert switch_instant(dt.date(2026, 1, 5), 6 * 60, VIENNA) == utc(2026, 1, 5, 5, 0)


def test_empty_program_uses_the_default_level_and_never_changes() -> None:
    assert level_at([], utc(2026, 5, 1), VIENNA, default="standby") == "standby"
    assert next_change([], utc(2026, 5, 1), VIENNA) is None


def test_weekday_entries_and_later_entry_wins_at_the_same_instant() -> None:
    program = [
        ProgramEntry(days="mon-fri", at="07:00", level="comfort"),
        ProgramEntry(days="mon-fri", at="18:00", level="economy"),
        ProgramEntry(days="mon", at="18:00", level="standby"),
    ]
    # Monday 2026-01-05 18:00 CET = 17:00 UTC: both entries apply, the later one wins.
    assert level_at(program, utc(2026, 1, 5, 17, 0), VIENNA) == "standby"
    assert level_at(program, utc(2026, 1, 6, 17, 0), VIENNA) == "economy"
    # Saturday and Sunday keep Friday evening's level.
    assert level_at(program, utc(2026, 1, 10, 12, 0), VIENNA) == "economy"
    change = next_change(program, utc(2026, 1, 10, 12, 0), VIENNA)
    assert change is not None and change.at == utc(2026, 1, 12, 6, 0)


@settings(max_examples=200, deadline=None)
@given(st.integers(min_value=int(utc(2026, 1, 1)), max_value=int(utc(2027, 1, 1))))
def test_next_change_is_where_the_level_really_changes(when: int) -> None:
    change = next_change(PROGRAM, when, VIENNA)
    assert change is not None
    current = level_at(PROGRAM, when, VIENNA)
    assert change.level != current
    assert level_at(PROGRAM, change.at - 1, VIENNA) == current
    assert level_at(PROGRAM, change.at, VIENNA) == change.level
    assert 0 < change.at - when <= 24 * 3600


@settings(max_examples=100, deadline=None)
@given(
    st.lists(st.integers(min_value=0, max_value=400), min_size=1, max_size=40).map(sorted),
    st.sampled_from([60, 600, 86400]),
    st.booleans(),
)
def test_cursor_answers_like_the_functions(steps: list[int], scale: int, backwards: bool) -> None:
    start = int(utc(2026, 3, 27))  # runs across the spring-forward change at scale 600
    times = [start + k * scale for k in steps]
    if backwards:
        times = times[::-1]  # time running backwards: the cursor must recompute
    cursor = ProgramCursor(PROGRAM, VIENNA)
    for when in times:
        expected = (level_at(PROGRAM, when, VIENNA), next_change(PROGRAM, when, VIENNA))
        assert cursor.at(when) == expected


def test_the_program_changeover_in_force_comes_from_its_latest_entry_or_a_calendar_entry() -> None:
    """Worked by hand (Vienna, summer time UTC+2 in June): entries at 06:00 (cool on
    weekdays) and 22:00 (auto, every day); a calendar 'shutdown' 10-12 June says heat."""
    from roomloop.config.models import CalendarEntry
    from roomloop.service.program import changeover_at

    entries = [
        ProgramEntry(days="mon-fri", at="06:00", level="comfort", changeover="cool"),
        ProgramEntry(days="all", at="22:00", level="economy", changeover="auto"),
        ProgramEntry(days="all", at="12:00", level="comfort"),  # gives no changeover
    ]
    # Monday 1 June 2026, 09:00 local = 07:00 UTC: that morning's 06:00 entry (04:00 UTC)
    found = changeover_at(entries, (), utc(2026, 6, 1, 7), VIENNA)
    assert found is not None and (found.changeover, found.since) == ("cool", utc(2026, 6, 1, 4))
    # Monday 13:00 local: the 12:00 entry gives none, so 06:00's still holds
    found = changeover_at(entries, (), utc(2026, 6, 1, 11), VIENNA)
    assert found is not None and found.changeover == "cool"
    # Sunday 7 June 09:00 local: no weekday entry that day; Saturday's 22:00 (20:00 UTC)
    found = changeover_at(entries, (), utc(2026, 6, 7, 7), VIENNA)
    assert found is not None and (found.changeover, found.since) == ("auto", utc(2026, 6, 6, 20))
    # a calendar entry wins while it lasts, from its start (10 June 00:00 local = 9 June 22:00 UTC)
    shutdown = CalendarEntry(
        name="shutdown", start="2026-06-10", end="2026-06-12", level="economy", changeover="heat"
    )
    found = changeover_at(entries, (shutdown,), utc(2026, 6, 11, 7), VIENNA)
    assert found is not None
    assert (found.changeover, found.since, found.by) == ("heat", utc(2026, 6, 9, 22), "shutdown")
    assert changeover_at(entries[2:], (), utc(2026, 6, 1, 11), VIENNA) is None
    # after the calendar entry the weekly one is back (or, without one, the zone's own),
    # from the entry's end (12 June ends at 13 June 00:00 local = 12 June 22:00 UTC)
    found = changeover_at(entries, (shutdown,), utc(2026, 6, 13, 3), VIENNA)
    assert found is not None and (found.changeover, found.since) == ("auto", utc(2026, 6, 12, 22))
    found = changeover_at(entries[2:], (shutdown,), utc(2026, 6, 13, 3), VIENNA, default="cool")
    assert found is not None and (found.changeover, found.since) == ("cool", utc(2026, 6, 12, 22))
