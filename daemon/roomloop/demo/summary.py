"""The demo's closing table: control quality per zone from the plants' true room air.

The figures reuse :func:`roomloop.plant.figures.window_figures` (the simulator's
definitions, DESIGN.md): control accuracy (EN 15500, |mean T - S| plus half the
swing) and cycles per hour over the second half of the comfort stretch; the
overshoot and the time to come within 0.5 K over the stretch after the
program's switch; energy as heater power times relay-on time over the whole
run (for a zone on a heat source, the time its relay was on while the source fired);
time in fail-safe from the service's own decisions (for the zone whose sensor the scenario
silences, the figure of that silence: none for a run stopped before it).
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
    silenced: bool = False
    """The scenario silences this zone's sensor (``Timeline.silence_start`` to
    ``silence_end``): its fail-safe time is that window's figure."""


def _window(
    trace: PlantTrace,
    *,
    started_at: float,
    start: float,
    end: float,
    ended_at: float,
    setpoint_c: float,
    heater_w: float,
    step_response: bool = False,
) -> PhaseFigures | None:
    """The figures of the window ``start``-``end`` as far as the run went (None: no step of it
    ran). The window keeps its place: a run stopped early never moves it onto what ran."""
    end = min(end, ended_at, started_at + len(trace.room_c) * STEP_S)
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
    ended_at: float | None = None,
    silenced: bool = False,
) -> ZoneSummary:
    """The figures of one zone's run (see the module docstring for the windows); a run that
    ended at ``ended_at`` before ``timeline.end`` has no figures for windows it did not
    reach and figures over what ran of a window it cut short."""
    ended_at = timeline.end if ended_at is None else ended_at
    scored = _window(
        trace,
        started_at=started_at,
        start=timeline.score_from,
        end=timeline.comfort_end,
        ended_at=ended_at,
        setpoint_c=comfort_c,
        heater_w=heater_w,
    )
    step = _window(
        trace,
        started_at=started_at,
        start=timeline.switch_at,
        end=timeline.comfort_end,
        ended_at=ended_at,
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
        silenced=silenced,
    )


NOT_REACHED = "n/r"
"""A cell of a window the run stopped before: no figure, not even a dash."""


def _num(value: float | None, fmt: str) -> str:
    return "-" if value is None or not math.isfinite(value) else format(value, fmt)


def clock_text(at: float, tz: ZoneInfo) -> str:
    """``07:42`` for a simulated instant in the site's time zone."""
    return dt.datetime.fromtimestamp(at, tz).strftime("%H:%M")


@dataclass(frozen=True, slots=True)
class Coverage:
    """How much of a window ``start``-``end`` a run that stopped at ``stopped_at`` covered."""

    start: float
    end: float
    stopped_at: float | None
    """None: the run went to its end."""

    @property
    def ran_to(self) -> float:
        return self.end if self.stopped_at is None else min(self.end, self.stopped_at)

    @property
    def reached(self) -> bool:
        """At least one plant step of the window ran (the figures need one)."""
        return self.ran_to - self.start >= STEP_S

    @property
    def partial(self) -> bool:
        return self.reached and self.ran_to < self.end

    def text(self, tz: ZoneInfo) -> str:
        """``''`` for a whole window, else ``': partial, ...'`` or ``': not reached, ...'``."""
        if not self.reached:
            return f": not reached (the run stopped at {clock_text(self.ran_to, tz)})"
        if not self.partial:
            return ""
        ran = (self.ran_to - self.start) / 60
        length = (self.end - self.start) / 60
        return (
            f": partial, only {clock_text(self.start, tz)}-{clock_text(self.ran_to, tz)} ran "
            f"({ran:.0f} of {length:.0f} min)"
        )


def format_summary(
    rows: list[ZoneSummary],
    timeline: Timeline,
    tz: ZoneInfo,
    comfort_c: float,
    stopped_at: float | None = None,
) -> str:
    """The closing table and a legend that says which window each figure covers, and for a
    run stopped early, which windows it did not reach (``n/r`` cells) or cut short."""
    scored = Coverage(timeline.score_from, timeline.comfort_end, stopped_at)
    step = Coverage(timeline.switch_at, timeline.comfort_end, stopped_at)
    silence = Coverage(timeline.silence_start, timeline.silence_end, stopped_at)
    silenced = [r.zone for r in rows if r.silenced]
    lines = [
        f"{'zone':<14}{'heating':<12}{'CA K':>6}{'cyc/h':>7}{'overshoot K':>13}"
        f"{'reach min':>11}{'energy kWh':>12}{'fail-safe min':>15}",
    ]
    for r in rows:
        ca, cph = _num(r.control_accuracy_k, ".2f"), _num(r.cycles_per_hour, ".1f")
        overshoot = _num(r.overshoot_k, "+.2f")
        reach = _num(None if r.reach_s is None else r.reach_s / 60, ".0f")
        if not scored.reached:
            ca = cph = NOT_REACHED
        if not step.reached:
            overshoot = reach = NOT_REACHED
        fail_safe = f"{r.fail_safe_s / 60:.0f}"
        if r.silenced and not silence.reached:
            fail_safe = NOT_REACHED
        lines.append(
            f"{r.zone:<14}{r.heating:<12}{ca:>6}{cph:>7}{overshoot:>13}{reach:>11}"
            f"{r.energy_kwh:>12.2f}{fail_safe:>15}"
        )
    score = f"{clock_text(timeline.score_from, tz)}-{clock_text(timeline.comfort_end, tz)}"
    switch = clock_text(timeline.switch_at, tz)
    end = clock_text(timeline.comfort_end, tz)
    run = "over the run"
    if stopped_at is not None:
        ran = (stopped_at - timeline.start) / 60
        run = (
            f"over the run as far as it went, {clock_text(timeline.start, tz)}-"
            f"{clock_text(stopped_at, tz)} ({ran:.0f} min)"
        )
    lines += [
        f"CA = control accuracy |mean T - S| + (max T - min T) / 2 (EN 15500) and cyc/h over "
        f"{score}, the second half of the comfort stretch{scored.text(tz)};",
        f"overshoot = max T - {comfort_c:g} C and reach = minutes until T came within 0.5 K, "
        f"after the {switch} switch until {end}{step.text(tz)};",
        f"energy = heater power x time heated {run} (relay on and, on the boiler, the boiler "
        "firing). T is the simulated room air (true value, not the sensor).",
    ]
    if silenced:
        lines.append(
            f"fail-safe = minutes in fail-safe {run}; {', '.join(silenced)}'s sensor silent "
            f"{clock_text(timeline.silence_start, tz)}-{clock_text(timeline.silence_end, tz)}"
            f"{silence.text(tz)}."
        )
    if not (scored.reached and step.reached and (silence.reached or not silenced)):
        lines.append(f"{NOT_REACHED} = not reached: the run stopped before that window began.")
    return "\n".join(lines)
