"""The standard simulation protocol (DESIGN.md): 49 h of loads and set points, and its figures.

The controller is driven exactly as the service drives it: every ``tick_s`` it gets
a :class:`~roomloop.core.types.ZoneInputs` holding the plant sensor's reading as a
:class:`~roomloop.core.types.PointSample` and the scheduled level, and only its
``ZoneOutputs.demand`` reaches the plant (held over the tick). Sensor noise comes
from ``random.Random(seed)``, so the same seed gives the same figures.

Schedule (load = fraction of ``heater_w`` the heater must cover at 20 C):
16 h warm-up at 30 % (not scored); ``low-load`` 8 h at 30 %; 1 h ramp to 60 % and
4 h settling (not scored); ``high-load`` 8 h at 60 %; 6 h at the economy set point
17 C at 30 % (not scored); ``recovery``, the step back to 20 C at 30 %, 6 h scored.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

from roomloop.core.settings import ZoneSettings
from roomloop.core.types import Controller, PointSample, ZoneInputs
from roomloop.plant.figures import OverallFigures, PhaseFigures, overall_figures, window_figures
from roomloop.plant.model import PlantSimulation
from roomloop.plant.spec import PlantSpec

COMFORT_C = 20.0
ECONOMY_C = 17.0
TICK_S = 10.0
EPOCH = 1_767_225_600.0
"""2026-01-01T00:00:00Z: the simulated clock's start (POSIX seconds), handed to the controller."""

HOUR = 3600.0
SCORED_PHASES: tuple[str, ...] = ("low-load", "high-load", "recovery")


@dataclass(frozen=True, slots=True)
class Segment:
    """One stretch of the schedule: level, load at its start and end (linear between)."""

    name: str
    start_s: float
    end_s: float
    level: str
    load_start: float
    load_end: float
    scored: bool

    @property
    def setpoint_c(self) -> float:
        """The set point of the standard protocol (comfort 20 C, economy 17 C)."""
        return self.setpoint_for(COMFORT_C, ECONOMY_C)

    def setpoint_for(self, comfort_c: float, economy_c: float) -> float:
        """The set point of this stretch for a run with these comfort and economy set points."""
        return economy_c if self.level == "economy" else comfort_c

    def load_at(self, t_s: float) -> float:
        if self.load_start == self.load_end:
            return self.load_start
        frac = (t_s - self.start_s) / (self.end_s - self.start_s)
        return self.load_start + (self.load_end - self.load_start) * frac


SCHEDULE: tuple[Segment, ...] = (
    Segment("warm-up", 0 * HOUR, 16 * HOUR, "comfort", 0.3, 0.3, False),
    Segment("low-load", 16 * HOUR, 24 * HOUR, "comfort", 0.3, 0.3, True),
    Segment("ramp", 24 * HOUR, 25 * HOUR, "comfort", 0.3, 0.6, False),
    Segment("settling", 25 * HOUR, 29 * HOUR, "comfort", 0.6, 0.6, False),
    Segment("high-load", 29 * HOUR, 37 * HOUR, "comfort", 0.6, 0.6, True),
    Segment("economy", 37 * HOUR, 43 * HOUR, "economy", 0.3, 0.3, False),
    Segment("recovery", 43 * HOUR, 49 * HOUR, "comfort", 0.3, 0.3, True),
)
DURATION_S = SCHEDULE[-1].end_s
INITIAL_LOAD = 0.3


def protocol_settings(
    settings: ZoneSettings, *, comfort_c: float = COMFORT_C, economy_c: float = ECONOMY_C
) -> ZoneSettings:
    """The zone's settings with the run's set points (by default the protocol's comfort 20 C and
    economy 17 C), mode auto.

    Everything else (tuning, limits, reliability checks) stays the zone's own.
    """
    return dataclasses.replace(
        settings, comfort_c=comfort_c, economy_c=economy_c, initial_mode="auto"
    )


@dataclass(slots=True)
class Trace:
    """Per tick: the time since the start, true room air, sensor reading, set point, relay,
    and the controller's published anticipator and droop terms."""

    time_s: list[float] = field(default_factory=list)
    room_c: list[float] = field(default_factory=list)
    sensor_c: list[float] = field(default_factory=list)
    setpoint_c: list[float] = field(default_factory=list)
    demand: list[bool] = field(default_factory=list)
    anticipator_k: list[float] = field(default_factory=list)
    droop_k: list[float] = field(default_factory=list)
    outdoor_c: list[float] = field(default_factory=list)
    load: list[float] = field(default_factory=list)
    """The fraction of ``heater_w`` the schedule asks the heater to cover."""


@dataclass(frozen=True, slots=True)
class ProtocolResult:
    """The figures of one run (and its trace, for plots)."""

    plant: str
    controller: str
    seed: int
    phases: dict[str, PhaseFigures]
    overall: OverallFigures
    trace: Trace
    comfort_c: float = COMFORT_C
    economy_c: float = ECONOMY_C

    def to_dict(self) -> dict[str, Any]:
        """The JSON document of ``roomloop simulate --json`` (DESIGN.md's keys, and the run's
        set points in Celsius)."""
        return {
            "plant": self.plant,
            "controller": self.controller,
            "seed": self.seed,
            "setpoints_c": {"comfort": self.comfort_c, "economy": self.economy_c},
            "phases": {name: figures.to_dict() for name, figures in self.phases.items()},
            "overall": self.overall.to_dict(),
        }


def run_protocol(
    controller: Controller[Any],
    plant: PlantSpec,
    *,
    seed: int = 1,
    sensor_names: Sequence[str] = ("temperature",),
    controller_name: str = "",
    tick_s: float = TICK_S,
    comfort_c: float = COMFORT_C,
    economy_c: float = ECONOMY_C,
) -> ProtocolResult:
    """Run ``controller`` against ``plant`` on the standard protocol; figures and trace.

    The controller must already hold the run's set points (see :func:`protocol_settings`):
    by default the protocol's comfort 20 C and economy 17 C; a zone's own set points move the
    whole run (the loads are set at ``comfort_c``, the figures are taken against the set point
    of each phase). ``sensor_names`` are the zone's input points in order; the plant has one
    sensor, so each gets the same reading.
    """
    names = tuple(sensor_names)
    sim = PlantSimulation.at_steady_state(plant, load=INITIAL_LOAD, room_c=comfort_c, seed=seed)
    trace = Trace()
    state = controller.initial_state(EPOCH)
    ticks = round(DURATION_S / tick_s)
    segment_index = 0
    segment = SCHEDULE[0]
    for k in range(ticks):
        t = k * tick_s
        while t >= segment.end_s and segment_index < len(SCHEDULE) - 1:
            segment_index += 1
            segment = SCHEDULE[segment_index]
        load = segment.load_at(t)
        sim.outdoor_c = plant.outdoor_for_load_c(load, comfort_c)
        now = EPOCH + t
        reading = sim.read_sensor()
        inputs = ZoneInputs(
            samples=tuple(PointSample(name=name, value=reading, received_at=now) for name in names),
            scheduled_level=segment.level,  # type: ignore[arg-type]
        )
        state, outputs = controller.step(state, inputs, now)
        trace.time_s.append(t)
        trace.room_c.append(sim.room_c)
        trace.sensor_c.append(reading)
        trace.setpoint_c.append(segment.setpoint_for(comfort_c, economy_c))
        trace.demand.append(outputs.demand)
        trace.anticipator_k.append(outputs.anticipator_k)
        trace.droop_k.append(outputs.droop_k)
        trace.outdoor_c.append(sim.outdoor_c)
        trace.load.append(load)
        sim.advance(tick_s, outputs.demand)

    phases: dict[str, PhaseFigures] = {}
    for segment in SCHEDULE:
        if not segment.scored:
            continue
        phases[segment.name] = window_figures(
            trace.room_c,
            trace.demand,
            tick_s=tick_s,
            start_s=segment.start_s,
            end_s=segment.end_s,
            setpoint_c=segment.setpoint_for(comfort_c, economy_c),
            heater_w=plant.heater_w,
            step_response=segment.name == "recovery",
        )
    overall = overall_figures(phases["low-load"], phases["high-load"], phases["recovery"])
    return ProtocolResult(
        plant=plant.name,
        controller=controller_name or type(controller).__name__,
        seed=seed,
        phases=phases,
        overall=overall,
        trace=trace,
        comfort_c=comfort_c,
        economy_c=economy_c,
    )
