"""The demo's closing table: control quality per zone from the plants' true room air.

The figures reuse :func:`roomloop.plant.figures.window_figures` (the simulator's
definitions, DESIGN.md): control accuracy (EN 15500, |mean T - S| plus half the
swing) and cycles per hour over the second half of the comfort stretch; the
overshoot and the time to come within 0.5 K over the stretch after the
program's switch; energy as heater power times relay-on time over the whole
run (for a zone on a heat source, the time its relay was on while the source fired);
time in fail-safe from the service's own decisions.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass
from zoneinfo import ZoneInfo

from roomloop.demo.plant_server import STEP_S, PlantTrace
from roomloop.demo.timeline import Timeline
from roomloop.plant.figures import PhaseFigures, window_figures


@dataclass(frozen=True, slots=True)
class ZoneSummary:
    """One zone's figures; ``None`` where the run stopped before the window had any step."""

    zone: str
    heating: str
    control_accuracy_k: float | None
    cycles_per_hour: float | None
    overshoot_k: float | None
    reach_s: float | None
    """From the switch until the room first came within 0.5 K of comfort (None: not yet)."""
    energy_kwh: float
    fail_safe_s: float


def _window(
    trace: PlantTrace,
    *,
    started_at: float,
    start: float,
    end: float,
    setpoint_c: float,
    heater_w: float,
    step_response: bool = False,
) -> PhaseFigures | None:
    end = min(end, started_at + len(trace.room_c) * STEP_S)
    if end - start < STEP_S:
        return None
    try:
        return window_figures(
            trace.room_c,
            trace.relay,
            tick_s=STEP_S,
            start_s=start - started_at,
            end_s=end - started_at,
            setpoint_c=setpoint_c,
            heater_w=heater_w,
            step_response=step_response,
        )
    except ValueError:  # the window holds no step
        return None


def summarize_zone(
    zone: str,
    heating: str,
    trace: PlantTrace,
    *,
    started_at: float,
    timeline: Timeline,
    comfort_c: float,
    heater_w: float,
    fail_safe_s: float,
) -> ZoneSummary:
    """The figures of one zone's run (see the module docstring for the windows)."""
    scored = _window(
        trace,
        started_at=started_at,
        start=timeline.score_from,
        end=timeline.comfort_end,
        setpoint_c=comfort_c,
        heater_w=heater_w,
    )
    step = _window(
        trace,
        started_at=started_at,
        start=timeline.switch_at,
        end=timeline.comfort_end,
        setpoint_c=comfort_c,
        heater_w=heater_w,
        step_response=True,
    )
    # heat delivered: the relay on, and for a zone on a heat source that source firing
    on_steps = sum(1 for on in (trace.heat or trace.relay) if on)
    return ZoneSummary(
        zone=zone,
        heating=heating,
        control_accuracy_k=None if scored is None else scored.control_accuracy_k,
        cycles_per_hour=None if scored is None else scored.cycles_per_hour,
        overshoot_k=None if step is None else step.overshoot_k,
        reach_s=None if step is None else step.settle_s,
        energy_kwh=heater_w * on_steps * STEP_S / 3.6e6,
        fail_safe_s=fail_safe_s,
    )


def _num(value: float | None, fmt: str) -> str:
    return "-" if value is None or not math.isfinite(value) else format(value, fmt)


def clock_text(at: float, tz: ZoneInfo) -> str:
    """``07:42`` for a simulated instant in the site's time zone."""
    return dt.datetime.fromtimestamp(at, tz).strftime("%H:%M")


def format_summary(
    rows: list[ZoneSummary],
    timeline: Timeline,
    tz: ZoneInfo,
    comfort_c: float,
    stopped_at: float | None = None,
) -> str:
    """The closing table and a legend that says which window each figure covers."""
    lines = [
        f"{'zone':<14}{'heating':<12}{'CA K':>6}{'cyc/h':>7}{'overshoot K':>13}"
        f"{'reach min':>11}{'energy kWh':>12}{'fail-safe min':>15}",
    ]
    for r in rows:
        lines.append(
            f"{r.zone:<14}{r.heating:<12}{_num(r.control_accuracy_k, '.2f'):>6}"
            f"{_num(r.cycles_per_hour, '.1f'):>7}{_num(r.overshoot_k, '+.2f'):>13}"
            f"{_num(None if r.reach_s is None else r.reach_s / 60, '.0f'):>11}"
            f"{r.energy_kwh:>12.2f}{r.fail_safe_s / 60:>15.0f}"
        )
    score = f"{clock_text(timeline.score_from, tz)}-{clock_text(timeline.comfort_end, tz)}"
    switch = clock_text(timeline.switch_at, tz)
    lines += [
        f"CA = control accuracy |mean T - S| + (max T - min T) / 2 (EN 15500) and cyc/h over "
        f"{score}, the second half of the comfort stretch;",
        f"overshoot = max T - {comfort_c:g} C and reach = minutes until T came within 0.5 K, "
        f"after the {switch} switch;",
        "energy = heater power x time heated over the run (relay on and, on the boiler, "
        "the boiler firing). T is the simulated room air (true value, not the sensor).",
    ]
    if stopped_at is not None:
        lines.append(
            f"The run stopped at {clock_text(stopped_at, tz)}: figures of a window it did not "
            "reach show '-', those of a window it cut short cover what ran."
        )
    return "\n".join(lines)
