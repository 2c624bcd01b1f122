"""``report``'s figures: per zone and day, the simulator's figures computed on recorded history.

The figures are those of the standard protocol (:mod:`roomloop.plant.figures`, reused):
control accuracy after EN 15500 (CA = |CSD| + CV, CSD = mean(T) - S, CV = (max T -
min T) / 2) over each stretch of constant set point, once it has settled (the first
``SETTLE_S`` after a set-point change are left out, as the protocol leaves out its
warm-up and ramps; stretches shorter than ``MIN_STRETCH_S`` after that are not
scored); the day's CA is the worst stretch's. Cycles per hour, on-fraction, shortest
complete on and off runs and energy (``heater_w`` x on-time, when the zone has
``heater_w``) over the whole day. Minutes in fail-safe, and minutes each input point
was not ``ok``.

One difference from the simulator: T is the zone temperature the controller saw (its
sensors), not a model's true room air, which the history cannot know.
"""

from __future__ import annotations

import datetime as dt
import math
import statistics
from collections.abc import Sequence
from dataclasses import dataclass, field
from zoneinfo import ZoneInfo

from roomloop.history.store import ZoneHistory
from roomloop.plant.figures import window_figures
from roomloop.units import delta_from_kelvin

SETTLE_S = 3600.0
MIN_STRETCH_S = 3600.0


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


def day_figures(
    history: ZoneHistory, tz: ZoneInfo, *, heater_w: float | None
) -> list[DayFigures]:
    """The figures of each day of ``history`` (days in the site's time zone)."""
    tick = tick_of(history)
    out: list[DayFigures] = []
    settle_ticks = math.ceil(SETTLE_S / tick)
    min_ticks = math.ceil(MIN_STRETCH_S / tick)
    # set-point stretches over the whole history, so a change just before midnight still
    # counts as unsettled after it
    stretch_of = [0] * len(history.time)
    for first, end in _stretches(history.setpoint):
        for k in range(first, end):
            stretch_of[k] = first
    for day, first, end in _days(history, tz):
        relay = history.relay[first:end]
        n = end - first
        temps = history.temperature[first:end]
        known = [t if t is not None else math.nan for t in temps]
        whole = window_figures(
            [0.0 if math.isnan(t) else t for t in known],
            relay,
            tick_s=tick,
            start_s=0.0,
            end_s=n * tick,
            setpoint_c=0.0,
            heater_w=heater_w or 0.0,
        )
        worst: tuple[float, float, float] | None = None
        scored = 0
        for s_first, s_end in _stretches(history.setpoint[first:end]):
            a = max(first + s_first, stretch_of[first + s_first] + settle_ticks)
            b = first + s_end
            ok = [
                k
                for k in range(a, b)
                if history.temperature[k] is not None and not history.fail_safe[k]
            ]
            if len(ok) < min_ticks:
                continue
            setpoint = history.setpoint[a]
            assert setpoint is not None
            figures = window_figures(
                [history.temperature[k] for k in ok],  # type: ignore[misc]
                [history.relay[k] for k in ok],
                tick_s=tick,
                start_s=0.0,
                end_s=len(ok) * tick,
                setpoint_c=setpoint,
                heater_w=0.0,
            )
            scored += len(ok)
            if worst is None or figures.control_accuracy_k > worst[0]:
                worst = (
                    figures.control_accuracy_k,
                    figures.setpoint_deviation_k,
                    figures.control_variation_k,
                )
        faults: dict[str, float] = {}
        for name, column in history.points.items():
            bad = sum(1 for value in column[first:end] if value[1] not in ("ok", "absent"))
            faults[name] = bad * tick / 60.0
        out.append(
            DayFigures(
                day=day,
                hours=n * tick / 3600.0,
                control_accuracy_k=None if worst is None else worst[0],
                setpoint_deviation_k=None if worst is None else worst[1],
                control_variation_k=None if worst is None else worst[2],
                scored_hours=scored * tick / 3600.0,
                cycles_per_hour=whole.cycles_per_hour,
                on_fraction=whole.on_fraction,
                shortest_on_s=whole.shortest_on_s,
                shortest_off_s=whole.shortest_off_s,
                energy_kwh=whole.energy_kwh if heater_w else None,
                fail_safe_min=sum(1 for f in history.fail_safe[first:end] if f) * tick / 60.0,
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
        f"{'cyc/h':>5} {'on %':>5} {'min on':>6} {'min off':>7} {'kWh':>6} {'fail-safe':>9}  "
        "point faults (min)",
    ]
    for f in days:
        faults = ", ".join(f"{name} {minutes:.0f}" for name, minutes in f.fault_min.items())
        lines.append(
            f"{f.day.isoformat():<10} {f.hours:>5.1f} {d(f.control_accuracy_k):>6} "
            f"{d(f.setpoint_deviation_k, '{:+.2f}'):>6} {d(f.control_variation_k):>6} "
            f"{f.cycles_per_hour:>5.1f} {100 * f.on_fraction:>5.0f} "
            f"{_k(f.shortest_on_s, '{:.0f}'):>6} {_k(f.shortest_off_s, '{:.0f}'):>7} "
            f"{_k(f.energy_kwh):>6} {f.fail_safe_min:>7.0f} m  {faults or '-'}"
        )
    lines.append(
        "CA = |CSD| + CV (EN 15500), worst settled stretch of constant set point "
        f"(the first {SETTLE_S / 60:.0f} min after a change left out); min on/off in s"
    )
    return "\n".join(lines)
