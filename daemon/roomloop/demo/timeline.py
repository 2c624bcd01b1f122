"""When things happen in a demo run: the program switch, the silent sensor, the scored windows.

Everything is placed as a share of the run so that ``--hours`` stretches it
evenly: the run starts at 30 % before the program's 07:00 switch from standby
to comfort on a January Monday, one zone's sensor goes silent at 45 % of the
run for 15 % of it (at least 20 minutes, longer than the zone's sensor timeout,
so its fail-safe engages and recovers), and control accuracy is scored over
the second half of the comfort stretch.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass
from zoneinfo import ZoneInfo

from roomloop.config.models import Zone
from roomloop.service.program import next_change

DEMO_DAY = dt.date(2026, 1, 12)
"""A Monday in January: a heating day."""
SWITCH_TIME = dt.time(7, 0)
"""The program's switch from standby to comfort (demo/site.yaml)."""
LEAD_SHARE = 0.30
SILENCE_AT_SHARE = 0.45
SILENCE_SHARE = 0.15
SILENCE_MIN_S = 20 * 60.0
MIN_HOURS = 1.0
MAX_HOURS = 48.0


@dataclass(frozen=True, slots=True)
class Timeline:
    """Instants of one run, POSIX seconds on the demo's simulated clock."""

    start: float
    end: float
    switch_at: float
    """The program's switch to comfort."""
    comfort_end: float
    """The end of that comfort stretch: the run's end or the program's next switch."""
    silence_start: float
    silence_end: float

    @classmethod
    def for_run(cls, hours: float, zone: Zone, tz: ZoneInfo) -> Timeline:
        """The timeline of a run of ``hours`` simulated hours, using ``zone``'s program."""
        if not MIN_HOURS <= hours <= MAX_HOURS:
            raise ValueError(f"a demo runs {MIN_HOURS:g} to {MAX_HOURS:g} simulated hours")
        length = hours * 3600.0
        switch_at = dt.datetime.combine(DEMO_DAY, SWITCH_TIME, tzinfo=tz).timestamp()
        start = switch_at - LEAD_SHARE * length
        end = start + length
        following = next_change(zone.program, switch_at + 1.0, tz, zone.default_level)
        comfort_end = end if following is None else min(end, following.at)
        silence_start = start + SILENCE_AT_SHARE * length
        silence_end = silence_start + max(SILENCE_SHARE * length, SILENCE_MIN_S)
        return cls(start, end, switch_at, comfort_end, silence_start, silence_end)

    @property
    def score_from(self) -> float:
        """Start of the accuracy window: the second half of the comfort stretch."""
        return self.switch_at + 0.5 * (self.comfort_end - self.switch_at)

    @property
    def hours(self) -> float:
        return (self.end - self.start) / 3600.0
