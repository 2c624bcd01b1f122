"""``report``'s figures: per zone and day, the simulator's figures computed on recorded history.

The figures are those of the standard protocol (:mod:`roomloop.plant.figures`): control
accuracy after EN 15500 (CA = |CSD| + CV, CSD = mean(T) - S, CV = (max T - min T) / 2)
over each stretch of constant set point, once it has settled (the first ``SETTLE_S``
after a set-point change are left out, as the protocol leaves out its warm-up and
ramps, and the time until the temperature first reached the new set point: a slow floor's
free cool-down after a set-back or its slow warm-up is no steady-state error, but a raised
set point not reached within ``RECOVERY_S`` is scored from then (see :func:`_settled_at`);
stretches with less than ``MIN_STRETCH_S`` after that are not scored); the day's CA is the
worst stretch's. Cycles per hour, on-fraction, shortest complete on and off
runs and energy (``heater_w`` x on-time, when the zone has ``heater_w``) over the whole
day. Minutes in fail-safe, and minutes each input point was not ``ok``.

Durations are real time, not a count of ticks: a recorded history is not evenly spaced
(a command wakes a zone for an extra step, a tick changes, the service stops). Each
sample holds from its time until the next sample, but at most ``MAX_COVER_TICKS``
ticks (the tick: the median spacing), so a gap in the history (the service stopped,
ticks lost) is not counted as time in the state before it; the newest sample holds one
tick. A day's hours are the time its samples cover (a day with a gap reads less than
24 h), split at midnight (the sample before midnight holds into the next day); the mean
of T is weighted by that time.

One difference from the simulator: T is the zone temperature the controller saw (its
sensors), not a model's true room air, which the history cannot know.
"""

from __future__ import annotations

import datetime as dt
import itertools
import math
import statistics
from collections.abc import Sequence
from dataclasses import dataclass, field
from zoneinfo import ZoneInfo

from roomloop.history.store import ZoneHistory
from roomloop.units import delta_from_kelvin

SETTLE_S = 3600.0
RECOVERY_S = 6 * 3600.0
"""The longest a raised set point waits to count as settled: the standard protocol's own
recovery phase is 6 h (roomloop.plant.protocol); a room slower than that is scored."""
MIN_STRETCH_S = 3600.0
MAX_COVER_TICKS = 3
"""A sample holds at most this many ticks: a longer gap after it is not counted."""


@dataclass(frozen=True, slots=True)
class DayFigures:
    day: dt.date
    hours: float
    control_accuracy_k: float | None
    setpoint_deviation_k: float | None
    control_variation_k: float | None
    scored_hours: float
    cycles_per_hour: float
    on_fraction: float
    shortest_on_s: float | None
    shortest_off_s: float | None
    energy_kwh: float | None
    fail_safe_min: float
    fault_min: dict[str, float] = field(default_factory=dict)


def tick_of(history: ZoneHistory) -> float:
    """The zone's tick: the median spacing of its recorded times."""
    if len(history.time) < 2:
        return 10.0
    gaps = [b - a for a, b in zip(history.time, history.time[1:], strict=False) if b > a]
    return float(statistics.median(gaps)) if gaps else 10.0


def cover_s(history: ZoneHistory, tick_s: float) -> list[float]:
    """How long each sample held: until the next sample, at most ``MAX_COVER_TICKS`` ticks;
    the newest, one tick."""
    cap = MAX_COVER_TICKS * tick_s
    out = [max(0.0, min(b - a, cap)) for a, b in itertools.pairwise(history.time)]
    if history.time:
        out.append(tick_s)
    return out


def _days(history: ZoneHistory, tz: ZoneInfo) -> list[tuple[dt.date, int, int]]:
    """(local day, first index, end index) for each day the history touches."""
    out: list[tuple[dt.date, int, int]] = []
    start = 0
    current: dt.date | None = None
    for k, at in enumerate(history.time):
        day = dt.datetime.fromtimestamp(at, tz).date()
        if day != current:
            if current is not None:
                out.append((current, start, k))
            current, start = day, k
    if current is not None:
        out.append((current, start, len(history.time)))
    return out


def _day_bounds(day: dt.date, tz: ZoneInfo) -> tuple[float, float]:
    """The day's first and last instant (POSIX seconds; 23 or 25 h on a DST change)."""
    begin = dt.datetime.combine(day, dt.time(0), tzinfo=tz).timestamp()
    end = dt.datetime.combine(day + dt.timedelta(days=1), dt.time(0), tzinfo=tz).timestamp()
    return begin, end


def _stretches(setpoints: Sequence[float | None]) -> list[tuple[int, int]]:
    """Runs of a constant (known) set point: (first, end) indices."""
    out: list[tuple[int, int]] = []
    start = 0
    for k in range(1, len(setpoints) + 1):
        if k == len(setpoints) or setpoints[k] != setpoints[start]:
            if setpoints[start] is not None:
                out.append((start, k))
            start = k
    return out


def _shortest_runs(
    relay: Sequence[bool], cover: Sequence[float], first: int, end: int
) -> dict[bool, float | None]:
    """The shortest complete on and off run that starts in the day: from one switch to the
    next, both at samples of the day (or the next day's first), as long as its samples held."""
    switches = [
        k for k in range(max(first, 1), min(end + 1, len(relay))) if relay[k] != relay[k - 1]
    ]
    elapsed = [0.0, *itertools.accumulate(cover)]
    shortest: dict[bool, float | None] = {True: None, False: None}
    for a, b in itertools.pairwise(switches):
        length = elapsed[b] - elapsed[a]
        current = shortest[relay[a]]
        if current is None or length < current:
            shortest[relay[a]] = length
    return shortest


def _settled_at(history: ZoneHistory) -> list[float]:
    """Per sample, when its stretch of constant set point counts as settled: ``SETTLE_S``
    after the change, and not before the temperature first reached the new set point.
    A set-back never reached is never settled (a warm floor cooling freely is no control
    error); a raised set point counts as settled at the latest ``RECOVERY_S`` after the
    change, reached or not (a room that does not get warm in time is one)."""
    settled = [math.inf] * len(history.time)
    for first, end in _stretches(history.setpoint):
        at = history.time[first] + SETTLE_S
        setpoint = history.setpoint[first]
        before = history.setpoint[first - 1] if first > 0 else None
        if setpoint is not None and before is not None and before != setpoint:
            down = before > setpoint
            reached = next(
                (
                    history.time[k] for k in range(first, end)
                    if (t := history.temperature[k]) is not None
                    and (t <= setpoint if down else t >= setpoint)
                ),
                math.inf,
            )
            at = max(at, reached)
            if not down:
                at = min(at, history.time[first] + RECOVERY_S)
        for k in range(first, end):
            settled[k] = at
    return settled


def _accuracy(
    history: ZoneHistory,
    weight: dict[int, float],
    first: int,
    end: int,
    settled_at: Sequence[float],
) -> tuple[tuple[float, float, float] | None, float]:
    """The day's worst settled stretch (CA, CSD, CV) and the seconds scored."""
    worst: tuple[float, float, float] | None = None
    scored = 0.0
    for s_first, s_end in _stretches(history.setpoint[first:end]):
        settled = settled_at[first + s_first]
        ok: list[tuple[int, float]] = []  # (sample, T) of the settled part, not in fail-safe
        for k in range(first + s_first, first + s_end):
            temperature = history.temperature[k]
            if history.time[k] >= settled and temperature is not None and not history.fail_safe[k]:
                ok.append((k, temperature))
        held = math.fsum(weight[k] for k, _ in ok)
        if not ok or held < MIN_STRETCH_S:
            continue
        mean = math.fsum(weight[k] * t for k, t in ok) / held
        temps = [t for _, t in ok]
        setpoint = history.setpoint[ok[0][0]]
        assert setpoint is not None
        deviation = mean - setpoint
        variation = (max(temps) - min(temps)) / 2.0
        scored += held
        if worst is None or abs(deviation) + variation > worst[0]:
            worst = (abs(deviation) + variation, deviation, variation)
    return worst, scored


def day_figures(
    history: ZoneHistory, tz: ZoneInfo, *, heater_w: float | None
) -> list[DayFigures]:
    """The figures of each day of ``history`` (days in the site's time zone)."""
    cover = cover_s(history, tick_of(history))
    # set-point stretches over the whole history, so a change just before midnight still
    # counts as unsettled after it
    settled_at = _settled_at(history)
    out: list[DayFigures] = []
    for day, first, end in _days(history, tz):
        begin, finish = _day_bounds(day, tz)
        # the time each sample held within the day, the one before midnight included
        weight = {
            k: max(0.0, min(history.time[k] + cover[k], finish) - max(history.time[k], begin))
            for k in range(max(first - 1, 0), end)
        }
        held = math.fsum(weight.values())
        on_s = math.fsum(w for k, w in weight.items() if history.relay[k])
        switch_ons = sum(
            1 for k in range(max(first, 1), end) if history.relay[k] and not history.relay[k - 1]
        )
        runs = _shortest_runs(history.relay, cover, first, end)
        worst, scored = _accuracy(history, weight, first, end, settled_at)
        faults = {
            name: math.fsum(w for k, w in weight.items() if column[k][1] not in ("ok", "absent"))
            / 60.0
            for name, column in history.points.items()
        }
        out.append(
            DayFigures(
                day=day,
                hours=held / 3600.0,
                control_accuracy_k=None if worst is None else worst[0],
                setpoint_deviation_k=None if worst is None else worst[1],
                control_variation_k=None if worst is None else worst[2],
                scored_hours=scored / 3600.0,
                cycles_per_hour=switch_ons / (held / 3600.0) if held > 0 else 0.0,
                on_fraction=on_s / held if held > 0 else 0.0,
                shortest_on_s=runs[True],
                shortest_off_s=runs[False],
                energy_kwh=heater_w * on_s / 3.6e6 if heater_w else None,
                fail_safe_min=math.fsum(w for k, w in weight.items() if history.fail_safe[k])
                / 60.0,
                fault_min=faults,
            )
        )
    return out


def _k(value: float | None, fmt: str = "{:.2f}") -> str:
    return "-" if value is None else fmt.format(value)


def format_report(
    zone: str, heating: str, days: Sequence[DayFigures], *, units: str, tick_s: float
) -> str:
    """A readable table of one zone's days (differences in K, or F degrees on an F site)."""
    scale = delta_from_kelvin(1.0, units)
    unit = "F" if units == "F" else "K"

    def d(value: float | None, fmt: str = "{:.2f}") -> str:
        return _k(None if value is None else value * scale, fmt)

    lines = [
        f"zone {zone} ({heating}), tick {tick_s:.0f} s; T is the zone's measured temperature",
        f"{'day':<10} {'hours':>5} {'CA ' + unit:>6} {'CSD ' + unit:>6} {'CV ' + unit:>6} "
        f"{'cyc/h':>5} {'on %':>5} {'min on s':>8} {'min off s':>9} {'kWh':>6} {'fail-safe':>9}  "
        "point faults (min)",
    ]
    for f in days:
        faults = ", ".join(f"{name} {minutes:.0f}" for name, minutes in f.fault_min.items())
        lines.append(
            f"{f.day.isoformat():<10} {f.hours:>5.1f} {d(f.control_accuracy_k):>6} "
            f"{d(f.setpoint_deviation_k, '{:+.2f}'):>6} {d(f.control_variation_k):>6} "
            f"{f.cycles_per_hour:>5.1f} {100 * f.on_fraction:>5.0f} "
            f"{_k(f.shortest_on_s, '{:.0f}'):>8} {_k(f.shortest_off_s, '{:.0f}'):>9} "
            f"{_k(f.energy_kwh):>6} {f.fail_safe_min:>7.0f} m  {faults or '-'}"
        )
    lines.append(
        "CA = |CSD| + CV (EN 15500), worst settled stretch of constant set point "
        f"(the first {SETTLE_S / 60:.0f} min after a change left out, and the time until T "
        f"first reached the new set point, at most {RECOVERY_S / 3600:.0f} h after a rise)"
    )
    lines.append(
        "hours: the time the samples cover (each holds until the next, at most "
        f"{MAX_COVER_TICKS} ticks: a longer gap, the service stopped, is not counted)"
    )
    if any(f.energy_kwh is None for f in days):
        lines.append("kWh: - where the zone has no heater_w (give it the heater's power)")
    return "\n".join(lines)
