"""Cooling plants: ``cooler_w`` in the plant file and the model against closed-form results."""

from __future__ import annotations

import itertools
import math
from pathlib import Path
from typing import get_args

import pytest

from roomloop.config.models import CoolingType
from roomloop.core.settings import ZoneSettings
from roomloop.core.types import PointSample, ZoneInputs
from roomloop.errors import ConfigError
from roomloop.plant.baselines import CallTuning, PlainController
from roomloop.plant.loader import (
    ALL_PLANTS,
    BUILTIN_PLANTS,
    COOLING_PLANTS,
    PLANT_FOR_COOLING,
    load_plant,
)
from roomloop.plant.model import PlantSimulation
from roomloop.plant.spec import PlantSpec

T0 = 1_767_225_600.0


def single_node(cooler_w: float, capacity: float = 2.0e6, loss: float = 50.0) -> PlantSpec:
    """One node, no emitter, no mass, an ideal sensor; a heater and a cooler."""
    return PlantSpec.model_validate(
        {
            "name": "single-node",
            "heater_w": 2000,
            "cooler_w": cooler_w,
            "emitter": None,
            "room": {"capacity_j_per_k": capacity, "loss_w_per_k": loss},
            "mass": None,
        }
    )


def test_single_node_with_constant_cooling_follows_newtons_law() -> None:
    # REFERENCES.md: a lumped first-order room follows T(t) = T_inf + (T0 - T_inf) e^(-t/tau)
    # (Newton's law of cooling) [published]; with a constant heat sink P and gains G the
    # asymptote is T_inf = T_out + (G - P) / H [derived: the steady state of
    # C dT/dt = G - P - H (T - T_out)]. C = 2e6 J/K, H = 50 W/K: tau = 40000 s;
    # T_out = 30, P = 500 W, G = 300 W: T_inf = 30 + (300 - 500) / 50 = 26 C, from 30 C.
    sim = PlantSimulation(single_node(500.0), outdoor_c=30.0, room_c=30.0)
    sim.extra_gains_w = 300.0
    for hour in range(1, 13):
        for _ in range(360):
            sim.advance(10.0, False, True)
        expected = 26.0 + (30.0 - 26.0) * math.exp(-hour * 3600.0 / 40000.0)
        # RK4 sub-steps far below the node's time constant: agreement to 1e-6 K
        assert sim.room_c == pytest.approx(expected, abs=1e-6)
    assert sim.heat_input_w == -500.0


def test_cooling_and_heating_inputs_add_and_follow_the_transport_delay() -> None:
    spec = load_plant("chilled-water")  # 90 s delay
    assert spec.cooler_w is not None
    sim = PlantSimulation.at_steady_state(spec, load=0.3)
    sim.advance(80.0, False, True)
    assert sim.heat_input_w == 0.0
    sim.advance(10.0, False, True)
    assert sim.heat_input_w == -spec.cooler_w
    sim.advance(90.0, False, False)
    assert sim.heat_input_w == 0.0


def test_a_cooling_call_on_a_plant_without_a_cooler_is_refused() -> None:
    spec = load_plant("hydronic")
    assert not spec.can_cool
    sim = PlantSimulation.at_steady_state(spec, load=0.3)
    with pytest.raises(ValueError, match="no cooler_w"):
        sim.advance(10.0, False, True)
    with pytest.raises(ValueError, match="no cooler_w"):
        PlantSimulation.at_cooling_steady_state(spec, load=0.3, room_c=24.0, outdoor_c=30.0)


@pytest.mark.parametrize("name", COOLING_PLANTS)
def test_cooling_steady_state_holds_while_the_cooler_removes_the_load(name: str) -> None:
    # The steady state of the cooling protocol's start, checked on the model itself: a plant
    # whose cooler is scaled down to the load (30 % of cooler_w) and runs without a break
    # (and without the transport delay's first minute) must stay where
    # at_cooling_steady_state put every node [derived: the steady state of the RC
    # equations, all derivatives zero].
    spec = load_plant(name)
    assert spec.cooler_w is not None
    scaled = spec.model_copy(update={"cooler_w": 0.3 * spec.cooler_w, "transport_delay_s": 0.0})
    sim = PlantSimulation.at_cooling_steady_state(scaled, load=1.0, room_c=24.0, outdoor_c=30.0)
    emitter = sim.emitter_c
    assert emitter < 24.0  # a cold coil
    for _ in range(6 * 360):
        sim.advance(10.0, False, True)
    assert sim.room_c == pytest.approx(24.0, abs=1e-6)
    assert sim.emitter_c == pytest.approx(emitter, abs=1e-6)
    assert sim.mass_c == pytest.approx(24.0, abs=1e-6)


def cooling_call(differential_k: float = 0.5) -> CallTuning:
    return CallTuning(
        cooling=True,
        kind="direct-expansion",
        differential_k=differential_k,
        cycle_rate_cph=3.0,
        min_on_s=0.0,
        min_off_s=0.0,
        setpoints={"comfort": 20.0, "standby": 22.0, "economy": 23.0, "protection": None},
    )


def test_relay_cooling_of_a_first_order_room_matches_the_closed_form() -> None:
    """REFERENCES.md, relay control of a first-order plant [derived, textbook], with the sign
    reversed: while the cooler runs the room falls toward T_c, while it rests it rises toward
    T_a; band [T_lo, T_hi]: t_on = tau ln((T_hi - T_c) / (T_lo - T_c)) and
    t_off = tau ln((T_a - T_lo) / (T_a - T_hi)). The mirror of the check value there
    (tau = 3 h, asymptotes 0 and 40 C, band 19.75-20.25: 270.0 s each [computed]): C = 540 kJ/K,
    H = 50 W/K (tau = 10800 s), T_out = T_a = 40 C, cooler 2000 W: T_c = 40 - 2000 / 50 = 0 C.
    """
    spec = single_node(2000.0, capacity=540_000.0, loss=50.0)
    settings = ZoneSettings.for_heating_type("forced-air")
    controller = PlainController(settings, cooling_call())
    sim = PlantSimulation(spec, outdoor_c=40.0, room_c=20.0)
    state = controller.initial_state(T0)
    calls: list[bool] = []
    for k in range(4 * 360):
        now = T0 + 10.0 * k
        state, out = controller.step(state, ZoneInputs((PointSample("temperature",
                                                                    sim.read_sensor(), now),)), now)
        assert not out.demand  # the heating call stays off
        assert out.cooling is not None
        calls.append(out.cooling.demand)
        sim.advance(10.0, False, out.cooling.demand)
    runs: dict[bool, list[int]] = {True: [], False: []}
    for value, group in itertools.groupby(calls[360:]):  # after the first hour
        runs[value].append(len(list(group)))
    on = runs[True][1:-1]
    off = runs[False][1:-1]
    assert len(on) >= 10 and len(off) >= 10
    # Each switch comes at the first 10 s tick past the band edge, so every run lasts the
    # closed form's 270 s plus up to one tick (the band overshot by one tick's fall or rise).
    assert 270.0 <= 10.0 * sum(on) / len(on) <= 290.0
    assert 270.0 <= 10.0 * sum(off) / len(off) <= 290.0


def write(tmp: Path, text: str) -> Path:
    path = tmp / "plant.yaml"
    path.write_text(text)
    return path


PLANT = (
    "name: a-room\nheater_w: 1500\n{cooler}emitter: null\nmass: null\n"
    "room: {{capacity_j_per_k: 2.0e5, loss_w_per_k: 40}}\n"
)


def test_cooler_w_is_optional_and_must_be_positive(tmp_path: Path) -> None:
    assert load_plant(write(tmp_path, PLANT.format(cooler=""))).cooler_w is None
    assert load_plant(write(tmp_path, PLANT.format(cooler="cooler_w: 900\n"))).cooler_w == 900
    with pytest.raises(ConfigError) as err:
        load_plant(write(tmp_path, PLANT.format(cooler="cooler_w: -5\n")))
    (problem,) = err.value.problems
    assert problem.line == 3 and problem.path == "cooler_w"


def test_builtin_cooling_plants_cool_and_heat_and_the_heating_ones_only_heat() -> None:
    assert set(ALL_PLANTS) == set(BUILTIN_PLANTS) | set(COOLING_PLANTS)
    # one built-in cooling plant per cooling type, named after it
    assert set(get_args(CoolingType)) == set(PLANT_FOR_COOLING) == set(COOLING_PLANTS)
    for name in COOLING_PLANTS:
        spec = load_plant(name)
        assert spec.name == name and spec.can_cool and spec.heater_w > 0
        # the design cooling load (80 % of cooler_w, the heating plants' 1.25x margin) sits
        # within the 50-100 W/m2 of offices and sunny rooms [recalled from memory]
        assert spec.floor_area_m2 is not None and spec.cooler_w is not None
        assert 50.0 <= 0.8 * spec.cooler_w / spec.floor_area_m2 <= 100.0
    assert not any(load_plant(name).can_cool for name in BUILTIN_PLANTS)
