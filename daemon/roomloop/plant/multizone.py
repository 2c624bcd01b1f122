"""A multi-zone plant: several rooms, each with its own controller and plant model, sharing
one heat source, on the standard simulation protocol.

Each tick, as the service would: every room's controller steps on its sensor's reading (the
same :class:`~roomloop.core.types.ZoneInputs` as :func:`~roomloop.plant.protocol.run_protocol`),
the source steps on their demands (:class:`~roomloop.core.source.SourceLogic`, local zones),
and a room gets heat while its valve is open *and* the source fires. A room's valve follows
its relay after the actuator's own time (``actuator_s``, the plant's physics, rounded to
whole ticks; the source only knows its configured ``valve_opening_s``): a wax actuator
takes about as long to close as to open. The heat then reaches the emitter after the room
plant's transport delay (the pipe run). The source is taken as large enough for every
open room at once, and its water as cooling at once when it stops.

So integrators see what the source's timing costs each zone: every room also runs alone on
the same protocol (:func:`run_protocol`, its relay switching its own heat, with the
actuator's time added to the plant's transport delay), and the result puts the two side by
side: control accuracy and energy, and the time the room called without getting heat.

Each room runs the protocol's load schedule against its own plant (its outdoor
temperature set from its load, as in the single-zone protocol). With one room, no actuator
time and a source without any delay or limit (valve opening, pre-run, minimum on and off
0, 60 starts an hour) the run is the single-zone protocol run exactly
(tests/source/test_source_multizone.py checks it tick by tick). With a slow actuator a room
loses heat against its run alone even so: the source stops with the last call, while the
valve still takes its time to close.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from roomloop.core.settings import ZoneSettings
from roomloop.core.source import (
    SourceInputs,
    SourceLogic,
    SourceSettings,
    ZoneDemand,
    local_demand,
)
from roomloop.core.types import Controller, PointSample, ZoneInputs
from roomloop.plant.controllers import make_controller
from roomloop.plant.figures import OverallFigures, PhaseFigures, overall_figures, window_figures
from roomloop.plant.loader import PLANT_FOR_HEATING, load_plant
from roomloop.plant.model import PlantSimulation
from roomloop.plant.protocol import (
    COMFORT_C,
    DURATION_S,
    ECONOMY_C,
    EPOCH,
    INITIAL_LOAD,
    SCHEDULE,
    TICK_S,
    ProtocolResult,
    protocol_settings,
    run_protocol,
)
from roomloop.plant.spec import PlantSpec

if TYPE_CHECKING:
    from roomloop.config.models import Site


@dataclass(frozen=True, slots=True)
class Room:
    """One zone of the estate: its controller's settings, its plant, its valve actuator."""

    settings: ZoneSettings
    plant: PlantSpec
    actuator_s: float = 0.0
    """How long the valve really takes to open (the plant's physics, not a setting)."""
    controller: str = "anticipator"

    @property
    def name(self) -> str:
        return self.settings.name


@dataclass(frozen=True, slots=True)
class Estate:
    """Rooms sharing one heat source."""

    name: str
    rooms: tuple[Room, ...]
    source: SourceSettings


@dataclass(slots=True)
class RoomTrace:
    room_c: list[float] = field(default_factory=list)
    demand: list[bool] = field(default_factory=list)
    """The zone's relay (its call)."""
    valve: list[bool] = field(default_factory=list)
    """The room's valve: its relay, one actuator time later."""
    heat: list[bool] = field(default_factory=list)
    """Heat sent to the room: its valve open and the source firing."""


@dataclass(frozen=True, slots=True)
class RoomResult:
    name: str
    plant: str
    phases: dict[str, PhaseFigures]
    overall: OverallFigures
    alone: ProtocolResult
    """The same room on its own (no shared source), for comparison."""
    calls: int
    """Calls (relay switch-ons) in the scored phases."""
    waiting_s: float
    """Time in the scored phases the room called, its valve was open, and the source did not
    fire: what the source's timing cost it (its own actuator's time is not counted)."""
    trace: RoomTrace

    def to_dict(self) -> dict[str, Any]:
        return {
            "plant": self.plant,
            "phases": {name: f.to_dict() for name, f in self.phases.items()},
            "overall": self.overall.to_dict(),
            "alone": {
                "phases": {name: f.to_dict() for name, f in self.alone.phases.items()},
                "overall": self.alone.overall.to_dict(),
            },
            "cost": self.cost(),
            "calls": self.calls,
            "waiting_s": self.waiting_s,
        }

    def cost(self) -> dict[str, float]:
        """What sharing the source costs this room against running alone."""
        mine, alone = self.overall, self.alone.overall
        return {
            "control_accuracy_k": mine.control_accuracy_k - alone.control_accuracy_k,
            "energy_kwh": mine.energy_kwh - alone.energy_kwh,
            "mean_wait_per_call_s": self.waiting_s / self.calls if self.calls else 0.0,
        }


@dataclass(frozen=True, slots=True)
class SourceFigures:
    """The source over the scored phases."""

    starts: int
    most_starts_in_an_hour: int
    on_fraction: float
    pump_fraction: float
    shortest_on_s: float | None
    shortest_off_s: float | None
    reasons_s: dict[str, float]
    """Seconds per reason of the source's step (``firing``, ``min-off``, ...)."""

    def to_dict(self) -> dict[str, Any]:
        return {
            "starts": self.starts,
            "most_starts_in_an_hour": self.most_starts_in_an_hour,
            "on_fraction": self.on_fraction,
            "pump_fraction": self.pump_fraction,
            "shortest_on_s": self.shortest_on_s,
            "shortest_off_s": self.shortest_off_s,
            "reasons_s": dict(self.reasons_s),
        }


@dataclass(frozen=True, slots=True)
class EstateResult:
    estate: str
    seed: int
    rooms: tuple[RoomResult, ...]
    source: SourceFigures
    source_enable: list[bool]
    source_pump: list[bool]

    def to_dict(self) -> dict[str, Any]:
        return {
            "estate": self.estate,
            "seed": self.seed,
            "source": self.source.to_dict(),
            "rooms": {room.name: room.to_dict() for room in self.rooms},
        }


def _scored(k: int) -> bool:
    t = k * TICK_S
    return any(seg.scored and seg.start_s <= t < seg.end_s for seg in SCHEDULE)


def run_estate(estate: Estate, *, seed: int = 1, tick_s: float = TICK_S) -> EstateResult:
    """Run every room of ``estate`` and its shared source on the standard protocol.

    Room ``i`` gets the sensor noise seed ``seed + i``; each room's settings must already
    hold the run's set points (:func:`protocol_settings`).
    """
    rooms = estate.rooms
    controllers: list[Controller[Any]] = [
        make_controller(room.controller, room.settings) for room in rooms
    ]
    sims = [
        PlantSimulation.at_steady_state(
            room.plant, load=INITIAL_LOAD, room_c=room.settings.comfort_c, seed=seed + i
        )
        for i, room in enumerate(rooms)
    ]
    names = [tuple(p.name for p in room.settings.inputs) for room in rooms]
    states = [c.initial_state(EPOCH) for c in controllers]
    logic = SourceLogic(estate.source)
    source_state = logic.initial_state(EPOCH)
    traces = [RoomTrace() for _ in rooms]
    lag = [round(room.actuator_s / tick_s) for room in rooms]
    enable: list[bool] = []
    pump: list[bool] = []
    reasons: list[str] = []
    segment_index = 0
    segment = SCHEDULE[0]
    for k in range(round(DURATION_S / tick_s)):
        t = k * tick_s
        while t >= segment.end_s and segment_index < len(SCHEDULE) - 1:
            segment_index += 1
            segment = SCHEDULE[segment_index]
        load = segment.load_at(t)
        now = EPOCH + t
        demands: list[ZoneDemand] = []
        for i, room in enumerate(rooms):
            sim = sims[i]
            sim.outdoor_c = room.plant.outdoor_for_load_c(load, room.settings.comfort_c)
            reading = sim.read_sensor()
            inputs = ZoneInputs(
                samples=tuple(PointSample(n, reading, now) for n in names[i]),
                scheduled_level=segment.level,  # type: ignore[arg-type]
            )
            states[i], out = controllers[i].step(states[i], inputs, now)
            traces[i].room_c.append(sim.room_c)
            traces[i].demand.append(out.demand)
            demands.append(local_demand(room.name, out.demand, out.reason, now))
        source_state, source_out = logic.step(source_state, SourceInputs(tuple(demands)), now)
        enable.append(source_out.enable)
        pump.append(source_out.pump)
        reasons.append(source_out.reason)
        for i in range(len(rooms)):
            relay = traces[i].demand
            valve_open = k >= lag[i] and relay[k - lag[i]]
            heat = valve_open and source_out.enable
            traces[i].valve.append(valve_open)
            traces[i].heat.append(heat)
            sims[i].advance(tick_s, heat)

    results = tuple(
        _room_result(room, traces[i], seed + i, tick_s) for i, room in enumerate(rooms)
    )
    return EstateResult(
        estate=estate.name,
        seed=seed,
        rooms=results,
        source=_source_figures(enable, pump, reasons, tick_s),
        source_enable=enable,
        source_pump=pump,
    )


def _phases(room_c: Sequence[float], on: Sequence[bool], heater_w: float, tick_s: float, *,
            comfort_c: float, economy_c: float) -> dict[str, PhaseFigures]:
    return {
        seg.name: window_figures(
            room_c, on, tick_s=tick_s, start_s=seg.start_s, end_s=seg.end_s,
            setpoint_c=seg.setpoint_for(comfort_c, economy_c), heater_w=heater_w,
            step_response=seg.name == "recovery",
        )
        for seg in SCHEDULE
        if seg.scored
    }


def _room_result(room: Room, trace: RoomTrace, seed: int, tick_s: float) -> RoomResult:
    s = room.settings
    phases = _phases(trace.room_c, trace.heat, room.plant.heater_w, tick_s,
                     comfort_c=s.comfort_c, economy_c=s.economy_c)
    overall = overall_figures(phases["low-load"], phases["high-load"], phases["recovery"])
    lag_s = round(room.actuator_s / tick_s) * tick_s
    alone_plant = room.plant.model_copy(
        update={"transport_delay_s": room.plant.transport_delay_s + lag_s}
    )
    alone = run_protocol(
        make_controller(room.controller, s), alone_plant, seed=seed,
        sensor_names=[p.name for p in s.inputs], controller_name=room.controller,
        tick_s=tick_s, comfort_c=s.comfort_c, economy_c=s.economy_c,
    )
    relay = trace.demand
    calls = sum(1 for k, on in enumerate(relay) if on and k and not relay[k - 1] and _scored(k))
    waiting = tick_s * sum(
        1
        for k, open_ in enumerate(trace.valve)
        if open_ and relay[k] and not trace.heat[k] and _scored(k)
    )
    return RoomResult(room.name, room.plant.name, phases, overall, alone, calls, waiting, trace)


def _source_figures(enable: Sequence[bool], pump: Sequence[bool], reasons: Sequence[str],
                    tick_s: float) -> SourceFigures:
    scored = [k for k in range(len(enable)) if _scored(k)]
    starts = [k for k in scored if enable[k] and (k == 0 or not enable[k - 1])]
    per_hour = round(3600.0 / tick_s)
    most = max((sum(1 for j in starts if k - per_hour < j <= k) for k in starts), default=0)
    runs: dict[bool, list[float]] = {True: [], False: []}
    start = scored[0]
    for k in scored[1:]:
        if enable[k] != enable[k - 1]:
            if start != scored[0]:  # only complete runs inside the window
                runs[enable[k - 1]].append((k - start) * tick_s)
            start = k
    seconds: dict[str, float] = {}
    for k in scored:
        seconds[reasons[k]] = seconds.get(reasons[k], 0.0) + tick_s
    return SourceFigures(
        starts=len(starts),
        most_starts_in_an_hour=most,
        on_fraction=sum(enable[k] for k in scored) / len(scored),
        pump_fraction=sum(pump[k] for k in scored) / len(scored),
        shortest_on_s=min(runs[True], default=None),
        shortest_off_s=min(runs[False], default=None),
        reasons_s=seconds,
    )


# --------------------------------------------------------------------------- built-in estates

ESTATES: tuple[str, ...] = ("two-zone", "three-zone")
"""The built-in examples: rooms of the built-in plants on one boiler."""


def _room(name: str, heating: str, plant: str, actuator_s: float) -> Room:
    settings = protocol_settings(ZoneSettings.for_heating_type(heating, name=name))
    return _room_of(settings, plant, actuator_s)


def _room_of(settings: ZoneSettings, plant: str, actuator_s: float) -> Room:
    spec = load_plant(plant)
    # The built-in plant's transport delay counts the actuator's opening; here the actuator
    # is modelled on its own, so the pipe run is what stays.
    spec = spec.model_copy(
        update={"transport_delay_s": max(0.0, spec.transport_delay_s - actuator_s)}
    )
    return Room(settings, spec, actuator_s=actuator_s)


def builtin_estate(name: str, *, actuator_s: float | None = None) -> Estate:
    """``two-zone``: a radiator room and an underfloor room on one boiler; ``three-zone``
    adds a second radiator room. Wax actuators (150 s radiators, 240 s manifold: thermal
    actuators open in about 2-5 min, common practice, no source; ``actuator_s``: every
    valve's time instead), the boiler's defaults with a 240 s valve opening time (the
    slowest actuator as built)."""
    radiator = 150.0 if actuator_s is None else actuator_s
    manifold = 240.0 if actuator_s is None else actuator_s
    rooms = [
        _room("office", "hydronic", "hydronic", radiator),
        _room("showroom", "underfloor", "underfloor", manifold),
    ]
    if name == "three-zone":
        rooms.append(_room("meeting", "hydronic", "hydronic", radiator))
    elif name != "two-zone":
        raise KeyError(name)
    source = SourceSettings(
        name="boiler", kind="boiler", zones=tuple(r.name for r in rooms), valve_opening_s=240.0
    )
    return Estate(name, tuple(rooms), source)


def estate_from_site(
    site: Site, source_name: str, *, actuator_s: float | None = None
) -> tuple[Estate, tuple[str, ...]]:
    """The estate of one heat source of a site: every local zone it serves, each with its own
    settings at its own comfort and economy set points and its heating type's built-in plant;
    and the remote zones it serves (not simulated: another site runs them).

    ``actuator_s`` is how long the valves really take (default: the source's
    ``valve_opening_s``, i.e. the configuration is right). ``KeyError`` for an unknown source.
    """
    config = next((hs for hs in site.heat_sources if hs.name == source_name), None)
    if config is None:
        raise KeyError(source_name)
    source = SourceSettings.from_config(config)
    actuator = source.valve_opening_s if actuator_s is None else actuator_s
    rooms = []
    for name in config.local_zones:
        zone = ZoneSettings.from_site(site, name)
        settings = protocol_settings(zone, comfort_c=zone.comfort_c, economy_c=zone.economy_c)
        rooms.append(_room_of(settings, PLANT_FOR_HEATING[zone.heating], actuator))
    local = tuple(r.name for r in rooms)
    return (
        Estate(f"{site.name}/{source_name}", tuple(rooms),
               dataclasses.replace(source, zones=local)),
        tuple(config.remote_zones),
    )


__all__ = [
    "COMFORT_C",
    "ECONOMY_C",
    "ESTATES",
    "Estate",
    "EstateResult",
    "Room",
    "builtin_estate",
    "estate_from_site",
    "run_estate",
]
