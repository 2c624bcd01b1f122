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

The cooling variant (``mode="cool"``) runs the same schedule on the cooling call of a plant
with ``cooler_w``: the load is the fraction of ``cooler_w`` the cooler must remove at the
cooling comfort set point 24 C, the economy stretch is a set-up to 27 C (the same 3 K as the
heating set-back), and the recovery is the step back down to 24 C. The outdoor temperature
stays at :func:`cooling_outdoor_c` for the whole run (a warm day, 6 K above the comfort set
point); what the fabric and the plant's ``internal_gains_w`` do not bring, the schedule adds
as solar and internal gains (``PlantSimulation.extra_gains_w``), so the cooler must remove
30 % and 60 % of its capacity in the two load phases.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

from roomloop.core.settings import SettingsError, ZoneSettings
from roomloop.core.types import Controller, PointSample, ZoneInputs, ZoneOutputs
from roomloop.plant.figures import OverallFigures, PhaseFigures, overall_figures, window_figures
from roomloop.plant.model import PlantSimulation
from roomloop.plant.spec import PlantSpec

COMFORT_C = 20.0
ECONOMY_C = 17.0
TICK_S = 10.0
EPOCH = 1_767_225_600.0
"""2026-01-01T00:00:00Z: the simulated clock's start (POSIX seconds), handed to the controller."""

COOLING_COMFORT_C = 24.0
"""The cooling run's comfort set point: inside the 23-26 C summer range of EN 16798-1's
category II [recalled from memory]."""
COOLING_ECONOMY_C = 27.0
"""The cooling run's economy set point: a 3 K set-up, the heating run's 3 K set-back mirrored."""
COOLING_OUTDOOR_EXCESS_K = 6.0
"""The cooling run's outdoor temperature above its comfort set point (a warm summer afternoon,
30 C outdoors at 24 C inside) [common practice, no source]."""

Mode = Literal["heat", "cool"]
MODES: tuple[Mode, ...] = ("heat", "cool")

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


class PlantCannotCool(ValueError):
    """A cooling run on a plant without ``cooler_w``."""


def default_setpoints(mode: Mode) -> tuple[float, float]:
    """The protocol's own (comfort, economy) set points of a heating or a cooling run."""
    return (COOLING_COMFORT_C, COOLING_ECONOMY_C) if mode == "cool" else (COMFORT_C, ECONOMY_C)


def cooling_outdoor_c(plant: PlantSpec, comfort_c: float = COOLING_COMFORT_C) -> float:
    """The cooling run's outdoor temperature: ``COOLING_OUTDOOR_EXCESS_K`` above the comfort set
    point, or lower where the fabric and the plant's own internal gains would then bring
    more than half of the low-load phase's heat (so the schedule's gains are never negative
    and always carry at least half of it)."""
    if plant.cooler_w is None:
        raise PlantCannotCool(_cannot_cool(plant))
    half = 0.5 * INITIAL_LOAD * plant.cooler_w - plant.internal_gains_w
    return comfort_c + min(COOLING_OUTDOOR_EXCESS_K, half / plant.room.loss_w_per_k)


def _cannot_cool(plant: PlantSpec) -> str:
    return f"plant {plant.name} has no cooler_w: it cannot cool (a heating-only plant)"


def calls(outputs: ZoneOutputs) -> tuple[bool, bool]:
    """(heating call, cooling call) of one step's outputs."""
    cooling = outputs.cooling
    return outputs.demand, cooling is not None and cooling.demand


def protocol_settings(
    settings: ZoneSettings,
    *,
    comfort_c: float | None = None,
    economy_c: float | None = None,
    mode: Mode = "heat",
) -> ZoneSettings:
    """The zone's settings with the run's set points (by default the protocol's own: comfort
    20 C and economy 17 C in heating, 24 C and 27 C in cooling), mode auto, and the
    changeover of the run: ``heat`` in a heating run of a zone that also cools, ``cool`` in
    a cooling run (the set points are then the cooling call's).

    Everything else (tuning, limits, reliability checks) stays the zone's own. A cooling run
    of a zone without a cooling call, or a heating run of a zone that only cools, is a
    :class:`~roomloop.core.settings.SettingsError`.
    """
    default_comfort, default_economy = default_setpoints(mode)
    comfort = default_comfort if comfort_c is None else comfort_c
    economy = default_economy if economy_c is None else economy_c
    cs = settings.cooling
    if mode == "cool":
        if cs is None:
            raise SettingsError(
                f"zone {settings.name} has no cooling call: a cooling run needs a zone with a "
                "cooling output (or --cooling TYPE)"
            )
        cooling = dataclasses.replace(
            cs, comfort_c=comfort, economy_c=economy, initial_changeover="cool"
        )
        return dataclasses.replace(settings, cooling=cooling, initial_mode="auto")
    if cs is not None:
        if not cs.heating:
            raise SettingsError(
                f"zone {settings.name} only cools: a heating run needs a zone with a heating "
                "output (try --mode cool)"
            )
        cs = dataclasses.replace(cs, initial_changeover="heat")
    return dataclasses.replace(
        settings, comfort_c=comfort, economy_c=economy, initial_mode="auto", cooling=cs
    )


@dataclass(slots=True)
class Trace:
    """Per tick: the time since the start, true room air, sensor reading, set point, relay,
    and the controller's published anticipator and droop terms (in a cooling run: the
    cooling call and its terms)."""

    time_s: list[float] = field(default_factory=list)
    room_c: list[float] = field(default_factory=list)
    sensor_c: list[float] = field(default_factory=list)
    setpoint_c: list[float] = field(default_factory=list)
    demand: list[bool] = field(default_factory=list)
    anticipator_k: list[float] = field(default_factory=list)
    droop_k: list[float] = field(default_factory=list)
    outdoor_c: list[float] = field(default_factory=list)
    load: list[float] = field(default_factory=list)
    """The fraction of ``heater_w`` the schedule asks the heater to cover (in cooling: of
    ``cooler_w`` the cooler must remove)."""
    gains_w: list[float] = field(default_factory=list)
    """The schedule's extra (solar and internal) gains, W: 0 in heating."""


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
    mode: Mode = "heat"

    def to_dict(self) -> dict[str, Any]:
        """The JSON document of ``roomloop simulate --json`` (DESIGN.md's keys, the run's mode
        and its set points in Celsius)."""
        return {
            "plant": self.plant,
            "controller": self.controller,
            "seed": self.seed,
            "mode": self.mode,
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
    comfort_c: float | None = None,
    economy_c: float | None = None,
    mode: Mode = "heat",
) -> ProtocolResult:
    """Run ``controller`` against ``plant`` on the standard protocol; figures and trace.

    The controller must already hold the run's set points (see :func:`protocol_settings`):
    by default the protocol's own (comfort 20 C and economy 17 C; in cooling 24 C and 27 C);
    a zone's own set points move the whole run (the loads are set at ``comfort_c``, the
    figures are taken against the set point of each phase). ``sensor_names`` are the zone's
    input points in order; the plant has one sensor, so each gets the same reading.
    ``mode="cool"`` runs the cooling variant and scores the cooling call
    (:class:`PlantCannotCool` on a plant without ``cooler_w``).
    """
    names = tuple(sensor_names)
    default_comfort, default_economy = default_setpoints(mode)
    comfort_c = default_comfort if comfort_c is None else comfort_c
    economy_c = default_economy if economy_c is None else economy_c
    cooling = mode == "cool"
    if cooling:
        outdoor = cooling_outdoor_c(plant, comfort_c)
        sim = PlantSimulation.at_cooling_steady_state(
            plant, load=INITIAL_LOAD, room_c=comfort_c, outdoor_c=outdoor, seed=seed
        )
        assert plant.cooler_w is not None
        capacity_w = plant.cooler_w
    else:
        sim = PlantSimulation.at_steady_state(
            plant, load=INITIAL_LOAD, room_c=comfort_c, seed=seed
        )
        capacity_w = plant.heater_w
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
        if cooling:
            sim.extra_gains_w = plant.cooling_gains_for_load_w(load, comfort_c, outdoor)
        else:
            sim.outdoor_c = plant.outdoor_for_load_c(load, comfort_c)
        now = EPOCH + t
        reading = sim.read_sensor()
        inputs = ZoneInputs(
            samples=tuple(PointSample(name=name, value=reading, received_at=now) for name in names),
            scheduled_level=segment.level,  # type: ignore[arg-type]
        )
        state, outputs = controller.step(state, inputs, now)
        heat, cool = calls(outputs)
        trace.time_s.append(t)
        trace.room_c.append(sim.room_c)
        trace.sensor_c.append(reading)
        trace.setpoint_c.append(segment.setpoint_for(comfort_c, economy_c))
        trace.demand.append(cool if cooling else heat)
        shown = outputs.cooling if cooling and outputs.cooling is not None else outputs
        trace.anticipator_k.append(shown.anticipator_k)
        trace.droop_k.append(shown.droop_k)
        trace.outdoor_c.append(sim.outdoor_c)
        trace.load.append(load)
        trace.gains_w.append(sim.extra_gains_w)
        sim.advance(tick_s, heat, cool)

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
            heater_w=capacity_w,
            step_response=segment.name == "recovery",
            cooling=cooling,
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
        mode=mode,
    )
