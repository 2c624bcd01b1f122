"""The standard protocol, its figures, and relay cycling against closed-form results."""

from __future__ import annotations

import dataclasses
import itertools
import math

import pytest

from roomloop.core.controller import ZoneController
from roomloop.core.settings import ZoneSettings
from roomloop.core.types import PointSample, ZoneInputs
from roomloop.plant.baselines import ElectromechanicalController, PlainController, bimetal_settings
from roomloop.plant.figures import window_figures
from roomloop.plant.loader import load_plant
from roomloop.plant.model import PlantSimulation
from roomloop.plant.protocol import (
    DURATION_S,
    EPOCH,
    SCHEDULE,
    protocol_settings,
    run_protocol,
)
from roomloop.plant.spec import PlantSpec


def single_node(capacity: float, power: float = 2000.0, loss: float = 50.0) -> PlantSpec:
    """One node, no emitter, no mass, an ideal sensor: the textbook relay plant."""
    return PlantSpec.model_validate(
        {
            "name": "single-node",
            "heater_w": power,
            "emitter": None,
            "room": {"capacity_j_per_k": capacity, "loss_w_per_k": loss},
            "mass": None,
        }
    )


def drive(
    controller: object,
    sim: PlantSimulation,
    hours: float,
    skip_hours: float,
    name: str = "temperature",
) -> tuple[list[float], list[bool]]:
    """Step ``controller`` against ``sim`` every 10 s; room air and relay after ``skip_hours``."""
    step = controller.step  # type: ignore[attr-defined]
    state = controller.initial_state(EPOCH)  # type: ignore[attr-defined]
    temps: list[float] = []
    relay: list[bool] = []
    for k in range(round(hours * 360)):
        now = EPOCH + k * 10.0
        inputs = ZoneInputs(samples=(PointSample(name, sim.read_sensor(), now),))
        state, out = step(state, inputs, now)
        if k >= skip_hours * 360:
            temps.append(sim.room_c)
            relay.append(out.demand)
        sim.advance(10.0, out.demand)
    return temps, relay


def switch_ons(relay: list[bool]) -> int:
    return sum(1 for a, b in itertools.pairwise(relay) if b and not a)


@pytest.mark.parametrize("duty", [0.3, 0.5, 0.7])
def test_cycles_per_hour_without_anticipation(duty: float) -> None:
    # REFERENCES.md: without anticipation N = D(1 - D) P / (C Delta) [derived]: the room ramps
    # up at (P - L) / C and down at L / C across the band Delta, L = D P. Single node,
    # P = 2 kW, C = 2 MJ/K, Delta = 0.5 K; the exponential curvature (band 0.5 K against
    # 20 K to either asymptote) and the 10 s tick stay within 3 %.
    power, capacity, delta = 2000.0, 2.0e6, 0.5
    spec = single_node(capacity, power)
    settings = dataclasses.replace(
        ZoneSettings.for_heating_type("hydronic"), differential_k=delta, min_on_s=0.0, min_off_s=0.0
    )
    sim = PlantSimulation(spec, outdoor_c=spec.outdoor_for_load_c(duty), room_c=20.0)
    _, relay = drive(PlainController(settings), sim, hours=26, skip_hours=2)
    measured = switch_ons(relay) / 24.0
    expected = duty * (1 - duty) * power / (capacity * delta) * 3600.0
    assert measured == pytest.approx(expected, rel=0.03)


def test_anticipator_cycle_rate_matches_its_sizing_on_a_slow_plant() -> None:
    # DESIGN.md "Cycle-rate sizing": at 50 % on-time on a nearly steady room the relay cycles
    # at the rate the anticipator time constant was derived from (REFERENCES.md [derived]).
    # A room of 200 MJ/K barely moves within a cycle; tolerance 5 %.
    spec = single_node(2.0e8)
    base = ZoneSettings.for_heating_type("hydronic")  # 3 cph, the preset's G, D 0.5 K
    settings = dataclasses.replace(
        base, min_on_s=0.0, min_off_s=0.0, max_cycles_per_hour=60, droop_compensation=False
    )
    # Start where the anticipator's mean bias G x 0.5 puts the room, so it cycles at once.
    room = 20.0 - base.anticipator_gain_k * 0.5
    sim = PlantSimulation(spec, outdoor_c=spec.outdoor_for_load_c(0.5), room_c=room)
    _, relay = drive(
        ZoneController(settings), sim, hours=12, skip_hours=2, name=settings.inputs[0].name
    )
    on_fraction = sum(relay) / len(relay)
    assert on_fraction == pytest.approx(0.5, abs=0.05)
    assert switch_ons(relay) / 10.0 == pytest.approx(base.cycle_rate_cph, rel=0.05)


def test_bimetal_droops_by_gain_times_duty() -> None:
    # REFERENCES.md: with a first-order anticipator of gain G the mean bias over a steady cycle
    # is G x on-fraction, so the room droops by about G x duty [derived]. Slow single node,
    # 60 % load, G = 1 K: the room sits about 0.6 K low (0.1 K tolerance: the band is 0.5 K).
    spec = single_node(2.0e8)
    settings = ZoneSettings.for_heating_type("hydronic")
    controller = ElectromechanicalController(settings, bimetal_settings(settings, gain_k=1.0))
    sim = PlantSimulation(spec, outdoor_c=spec.outdoor_for_load_c(0.6), room_c=19.4)
    temps, relay = drive(controller, sim, hours=30, skip_hours=20)
    duty = sum(relay) / len(relay)
    assert duty == pytest.approx(0.6, abs=0.05)
    assert sum(temps) / len(temps) - 20.0 == pytest.approx(-1.0 * duty, abs=0.1)


def test_window_figures_by_hand() -> None:
    # Ticks of 10 s; window [20 s, 100 s) holds ticks 2..9.
    room = [0.0, 0.0, 19.8, 20.4, 20.2, 19.6, 20.0, 20.0, 20.2, 19.8, 30.0]
    relay = [False, True, True, False, False, True, True, True, False, False, True]
    f = window_figures(
        room, relay, tick_s=10.0, start_s=20.0, end_s=100.0, setpoint_c=20.0, heater_w=3600.0
    )
    mean = sum(room[2:10]) / 8
    assert f.setpoint_deviation_k == pytest.approx(mean - 20.0)
    assert f.control_variation_k == pytest.approx((20.4 - 19.6) / 2)
    assert f.control_accuracy_k == pytest.approx(abs(mean - 20.0) + 0.4)
    # One switch-on inside (tick 5) in 80 s.
    assert f.cycles_per_hour == pytest.approx(1 / (80 / 3600))
    assert f.on_fraction == pytest.approx(4 / 8)
    # Complete runs inside: off 3..4 (20 s), on 5..7 (30 s), off 8..9 ends at 10 (20 s).
    assert f.shortest_on_s == 30.0
    assert f.shortest_off_s == 20.0
    assert f.energy_kwh == pytest.approx(3600.0 * 40.0 / 3.6e6)
    step = window_figures(
        room,
        relay,
        tick_s=10.0,
        start_s=20.0,
        end_s=100.0,
        setpoint_c=20.0,
        heater_w=3600.0,
        step_response=True,
    )
    assert step.overshoot_k == pytest.approx(0.4)
    assert step.settle_s == 0.0


def test_schedule_is_the_designed_49_hours() -> None:
    assert DURATION_S == 49 * 3600
    assert [s.name for s in SCHEDULE if s.scored] == ["low-load", "high-load", "recovery"]
    assert [(s.start_s / 3600, s.end_s / 3600) for s in SCHEDULE if s.scored] == [
        (16, 24),
        (29, 37),
        (43, 49),
    ]
    for a, b in itertools.pairwise(SCHEDULE):
        assert a.end_s == b.start_s


@pytest.fixture(scope="module")
def hydronic_run() -> object:
    settings = protocol_settings(ZoneSettings.for_heating_type("hydronic"))
    return run_protocol(
        ZoneController(settings),
        load_plant("hydronic"),
        seed=3,
        sensor_names=[p.name for p in settings.inputs],
        controller_name="anticipator",
    )


def test_protocol_drives_loads_and_setpoints(hydronic_run: object) -> None:
    spec = load_plant("hydronic")
    trace = hydronic_run.trace  # type: ignore[attr-defined]
    at = {round(t): k for k, t in enumerate(trace.time_s)}
    assert trace.outdoor_c[at[20 * 3600]] == pytest.approx(spec.outdoor_for_load_c(0.3))
    assert trace.outdoor_c[at[33 * 3600]] == pytest.approx(spec.outdoor_for_load_c(0.6))
    assert trace.outdoor_c[at[round(24.5 * 3600)]] == pytest.approx(spec.outdoor_for_load_c(0.45))
    assert trace.setpoint_c[at[40 * 3600]] == 17.0
    assert trace.setpoint_c[at[44 * 3600]] == 20.0
    # The economy phase really lowered the room, and recovery brought it back.
    assert min(trace.room_c[at[41 * 3600] : at[43 * 3600]]) < 19.0
    assert hydronic_run.phases["recovery"].settle_s is not None  # type: ignore[attr-defined]


def test_same_seed_same_figures_other_seed_other_noise(hydronic_run: object) -> None:
    settings = protocol_settings(ZoneSettings.for_heating_type("hydronic"))
    again = run_protocol(
        ZoneController(settings),
        load_plant("hydronic"),
        seed=3,
        sensor_names=[p.name for p in settings.inputs],
        controller_name="anticipator",
    )
    assert again.to_dict() == hydronic_run.to_dict()  # type: ignore[attr-defined]
    other = run_protocol(
        ZoneController(settings),
        load_plant("hydronic"),
        seed=4,
        sensor_names=[p.name for p in settings.inputs],
        controller_name="anticipator",
    )
    assert other.trace.sensor_c != again.trace.sensor_c
    assert math.isfinite(other.overall.control_accuracy_k)
