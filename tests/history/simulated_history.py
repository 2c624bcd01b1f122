"""Simulated zone history for the history, report and tune tests and benchmarks.

A plant from :mod:`roomloop.plant` (the simulator's RC model) under roomloop's own
controller, driven exactly as the protocol drives it, with a daily program (comfort
06:00-22:00, economy at night, so every morning is a recovery step) and an outdoor
temperature that swings daily around the one for a mean load. Each tick becomes the
:class:`~roomloop.history.store.Tick` the service would record.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

from roomloop.core.controller import ZoneController
from roomloop.core.settings import ZoneSettings
from roomloop.core.types import PointSample, ZoneInputs
from roomloop.history.recorder import tick_from
from roomloop.history.store import Tick, ZoneHistory
from roomloop.plant.model import PlantSimulation
from roomloop.plant.spec import PlantSpec

EPOCH = 1_767_225_600.0
"""2026-01-01T00:00:00Z, a Thursday."""
DAY = 86400.0


@dataclass
class Simulated:
    ticks: list[Tick]
    history: ZoneHistory
    outdoor: list[float]
    room_c: list[float]
    """True room air (the model's node), per tick."""


def outdoor_at(
    plant: PlantSpec, t_s: float, *, mean_load: float = 0.45, swing: float = 0.15
) -> float:
    """Outdoor temperature: the one for ``mean_load`` at 20 C, swinging daily by ``swing``
    of the heater's output (coldest at 05:00), plus a slower three-day wave."""
    load = (
        mean_load
        + swing * math.cos(2 * math.pi * (t_s / DAY - 5 / 24))
        + 0.05 * math.sin(2 * math.pi * t_s / (3 * DAY))
    )
    return plant.outdoor_for_load_c(load, 20.0)


def level_at(t_s: float) -> str:
    hour = (t_s % DAY) / 3600.0
    return "comfort" if 6.0 <= hour < 22.0 else "economy"


def simulate(
    plant: PlantSpec,
    settings: ZoneSettings | None = None,
    *,
    days: float = 7.0,
    tick_s: float = 10.0,
    seed: int = 1,
    start_s: float = EPOCH,
    sensor_fault: tuple[float, float] | None = None,
    relay_override: bool | None = None,
) -> Simulated:
    """``days`` of history of ``plant`` under the zone ``settings`` (default: the heating
    type of the plant's name, comfort 20 C, economy 17 C). ``sensor_fault`` (from, to) in
    seconds after the start: the sensor gives no reading then (fail-safe after the
    timeout). ``relay_override``: the relay forced to that state (no switching at all)."""
    if settings is None:
        settings = ZoneSettings.for_heating_type(
            plant.name
            if plant.name in ("forced-air", "hydronic", "underfloor", "electric")
            else "hydronic"
        )
    settings = dataclasses.replace(settings, comfort_c=20.0, economy_c=17.0, tick_s=tick_s)
    controller = ZoneController(settings)
    sim = PlantSimulation.at_steady_state(plant, load=0.45, room_c=17.0, seed=seed)
    state = controller.initial_state(start_s)
    names = [p.name for p in settings.inputs]
    out = Simulated([], ZoneHistory(settings.name), [], [])
    out.history.outdoor = []
    for k in range(round(days * DAY / tick_s)):
        t = k * tick_s
        now = start_s + t
        sim.outdoor_c = outdoor_at(plant, t)
        reading: float | None = sim.read_sensor()
        if sensor_fault is not None and sensor_fault[0] <= t < sensor_fault[1]:
            reading = None
        samples = tuple(
            PointSample(
                n,
                reading,
                None if reading is None else now,
                "ok" if reading is not None else "comm-failure",
            )
            for n in names
        )
        inputs = ZoneInputs(samples=samples, scheduled_level=level_at(t))  # type: ignore[arg-type]
        state, outputs = controller.step(state, inputs, now)
        if relay_override is not None:
            outputs = dataclasses.replace(outputs, demand=relay_override)
        tick = tick_from(now, outputs, state)
        out.ticks.append(tick)
        h = out.history
        h.time.append(now)
        h.temperature.append(tick.temperature)
        h.setpoint.append(tick.setpoint)
        h.level.append(tick.level)
        h.mode.append(tick.mode)
        h.relay.append(tick.relay)
        h.anticipator_k.append(tick.anticipator_k)
        h.droop_k.append(tick.droop_k)
        h.fail_safe.append(tick.fail_safe)
        h.reason.append(tick.reason)
        for name, value, verdict in tick.points:
            h.points.setdefault(name, []).append((value, verdict))
        h.outdoor.append(sim.outdoor_c)
        out.outdoor.append(sim.outdoor_c)
        out.room_c.append(sim.room_c)
        sim.advance(tick_s, outputs.demand)
    return out
