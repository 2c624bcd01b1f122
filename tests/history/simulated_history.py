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
import random
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

ONE_ZONE_SITE = """\
site: {{name: {site}, timezone: UTC, units: C, state_dir: {state}}}
links:
  - {{type: modbus-tcp, name: io, host: 127.0.0.1}}
points:
  - {{type: modbus-input, name: air, link: io, address: 0}}
  - {{type: modbus-output, name: valve, link: io, address: 0}}
zones:
  - {{name: {zone}, inputs: [air], output: valve, heating: {heating}{heater}}}
"""


def one_zone_site(
    state: object, *, heating: str = "hydronic", heater_w: float | None = None,
    zone: str = "den", site: str = "oak-flat",
) -> str:
    """An invented one-zone site (UTC, Celsius) for a simulated history's zone."""
    heater = "" if heater_w is None else f", heater_w: {heater_w:g}"
    return ONE_ZONE_SITE.format(site=site, state=state, zone=zone, heating=heating, heater=heater)


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
        assert h.outdoor is not None  # (set to [] above)
        for name, value, verdict in tick.points:
            h.points.setdefault(name, []).append((value, verdict))
        h.outdoor.append(sim.outdoor_c)
        out.outdoor.append(sim.outdoor_c)
        out.room_c.append(sim.room_c)
        sim.advance(tick_s, outputs.demand)
    return out


def random_plant(seed: int) -> tuple[PlantSpec, str]:
    """A seeded random plant in the plausible range, and the heating type whose tuning runs it.

    Time constants span minutes to days: an emitter of 2 min to 4 h (or none: the heat goes
    into the room air), room air of minutes, building mass of 2 to 20 h, a building (all
    capacity over the loss) of about 10 to 80 h; the heater covers the design load with a
    1.1 to 1.6 margin; a transport delay of 0 to 10 min and a sensor lag of 30 s to 5 min.
    Linear emitters, so every node's time constant is defined exactly.
    """
    rng = random.Random(seed)

    def log_uniform(lo: float, hi: float) -> float:
        return math.exp(rng.uniform(math.log(lo), math.log(hi)))

    heater_w = round(log_uniform(800.0, 4000.0), -1)
    loss = heater_w / rng.uniform(1.1, 1.6) / 30.0  # design load at 30 K below the room
    room_c = log_uniform(0.8e5, 4e5) * heater_w / 1500.0
    emitter_tau = log_uniform(120.0, 4 * 3600.0)
    heating = (
        "electric" if emitter_tau < 600 else "hydronic" if emitter_tau < 3600 else "underfloor"
    )
    ke = heater_w / rng.uniform(10.0, 40.0)  # full output at a 10-40 K emitter excess
    mass_tau = log_uniform(2 * 3600.0, 20 * 3600.0)
    building_tau = log_uniform(10 * 3600.0, 80 * 3600.0)
    cm = max(building_tau * loss - room_c - emitter_tau * ke, 5.0 * room_c)
    data = {
        "name": f"random-{seed}",
        "heater_w": heater_w,
        "transport_delay_s": round(rng.uniform(0.0, 600.0)),
        "emitter": {"capacity_j_per_k": emitter_tau * ke, "conductance_w_per_k": ke},
        "room": {"capacity_j_per_k": room_c, "loss_w_per_k": loss},
        "mass": {"capacity_j_per_k": cm, "conductance_w_per_k": cm / mass_tau},
        "sensor": {
            "time_constant_s": round(log_uniform(30.0, 300.0)),
            "resolution_k": 0.1,
            "noise_k": 0.02,
        },
        "internal_gains_w": 0.0,
    }
    return PlantSpec.model_validate(data), heating
