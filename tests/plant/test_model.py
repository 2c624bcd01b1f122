"""The plant model against outside references: Newton's law of cooling and scipy's solve_ivp."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import solve_ivp

from roomloop.plant.loader import load_plant
from roomloop.plant.model import PlantSimulation
from roomloop.plant.spec import PlantSpec, en442_output_w


def single_node(**sensor: float) -> PlantSpec:
    return PlantSpec.model_validate(
        {
            "name": "single-node",
            "heater_w": 2000,
            "emitter": None,
            "room": {"capacity_j_per_k": 2.0e6, "loss_w_per_k": 50},
            "mass": None,
            "sensor": sensor,
        }
    )


def test_a_spec_too_stiff_to_simulate_is_refused_not_sub_stepped_for_minutes() -> None:
    # Built without the loader (which refuses it first): the model's own last guard.
    stiff = PlantSpec.model_validate(
        {
            "name": "stiff",
            "heater_w": 2000,
            "emitter": None,
            "room": {"capacity_j_per_k": 1.0, "loss_w_per_k": 50},
            "mass": None,
        }
    )
    with pytest.raises(ValueError, match="too short to simulate"):
        PlantSimulation(stiff, outdoor_c=0.0)


def test_single_node_cools_by_newtons_law() -> None:
    # REFERENCES.md: a lumped first-order room cools as T(t) = T_a + (T0 - T_a) e^(-t/tau)
    # (Newton's law of cooling) [published]; tau = C / H = 2e6 / 50 = 40000 s.
    spec = single_node()
    sim = PlantSimulation(spec, outdoor_c=0.0, room_c=20.0)
    tau = 2.0e6 / 50.0
    for hour in range(1, 25):
        for _ in range(360):
            sim.advance(10.0, False)
        expected = 0.0 + (20.0 - 0.0) * math.exp(-hour * 3600.0 / tau)
        assert sim.room_c == pytest.approx(expected, abs=1e-6)


def test_single_node_heats_toward_its_steady_state() -> None:
    # Same closed form with the heater on: T_inf = T_a + P / H = 0 + 2000 / 50 = 40 C [derived].
    spec = single_node()
    sim = PlantSimulation(spec, outdoor_c=0.0, room_c=20.0)
    for _ in range(3 * 360):
        sim.advance(10.0, True)
    expected = 40.0 + (20.0 - 40.0) * math.exp(-3 * 3600.0 / 40000.0)
    assert sim.room_c == pytest.approx(expected, abs=1e-6)


def _relay_pattern(k: int) -> bool:
    """An irregular relay pattern: on-times and off-times of 2-25 min."""
    return (k * 7919 // 97) % 11 < 4 if k % 150 < 90 else k % 40 < 13


def _reference(spec: PlantSpec, outdoor_c: float, hours: float, tick_s: float) -> list[float]:
    """Room air every hour, by solve_ivp (RK45, rtol 1e-10) on the same equations, integrated
    piecewise between the input's switch times so that the discontinuities are exact."""
    emitter = spec.emitter
    mass = spec.mass
    assert emitter is not None and mass is not None

    def phi(excess: float) -> float:
        if emitter.conductance_w_per_k is not None:
            return emitter.conductance_w_per_k * excess
        assert emitter.rated_output_w is not None and emitter.exponent is not None
        return en442_output_w(emitter.rated_output_w, emitter.exponent, excess)

    def rhs(_t: float, y: list[float], q: float) -> list[float]:
        te, tr, tm = y
        p = phi(te - tr)
        return [
            (q - p) / emitter.capacity_j_per_k,
            (
                p
                + spec.internal_gains_w
                - spec.room.loss_w_per_k * (tr - outdoor_c)
                - mass.conductance_w_per_k * (tr - tm)
            )
            / spec.room.capacity_j_per_k,
            mass.conductance_w_per_k * (tr - tm) / mass.capacity_j_per_k,
        ]

    ticks = round(hours * 3600 / tick_s)
    delay = spec.transport_delay_s
    # The heat input switches one transport delay after the relay does.
    events: list[tuple[float, float]] = []
    last = False
    for k in range(ticks):
        on = _relay_pattern(k)
        if on != last:
            events.append((k * tick_s + delay, spec.heater_w if on else 0.0))
            last = on
    y = [20.0 + spec.emitter_excess_for_output_k(0.3 * spec.heater_w), 20.0, 20.0]
    t, q = 0.0, 0.0
    out: list[float] = []
    marks = [h * 3600.0 for h in range(1, int(hours) + 1)]
    pending = sorted([(e, "q", v) for e, v in events] + [(m, "mark", 0.0) for m in marks])
    for when, kind, value in pending:
        if when > t:
            sol = solve_ivp(rhs, (t, when), y, args=(q,), method="RK45", rtol=1e-10, atol=1e-10)
            y = [float(v) for v in sol.y[:, -1]]
            t = when
        if kind == "q":
            q = value
        else:
            out.append(y[1])
    return out


@pytest.mark.parametrize("name", ["hydronic", "forced-air", "electric"])
def test_three_node_model_matches_solve_ivp_over_24_hours(name: str) -> None:
    # REFERENCES.md: scipy.integrate.solve_ivp is the reference integrator for multi-node
    # models [published]. Within 0.01 K over 24 h at the 10 s tick, for the linear emitters
    # (forced-air) and the EN 442 law (hydronic, electric), with the transport delay.
    spec = load_plant(name)
    outdoor = spec.outdoor_for_load_c(0.4)
    sim = PlantSimulation.at_steady_state(spec, load=0.3)
    sim.outdoor_c = outdoor
    ours: list[float] = []
    for k in range(24 * 360):
        sim.advance(10.0, _relay_pattern(k))
        if (k + 1) % 360 == 0:
            ours.append(sim.room_c)
    reference = _reference(spec, outdoor, 24, 10.0)
    worst = max(abs(a - b) for a, b in zip(ours, reference, strict=True))
    print(f"{name}: worst difference to solve_ivp over 24 h {worst:.1e} K")
    assert worst < 0.01
    # The run really moved: the hourly room temperatures spread over more than 0.5 K.
    assert max(reference) - min(reference) > 0.5


def test_tick_length_does_not_change_the_trajectory() -> None:
    # The relay held over 60 s equals six 10 s ticks: the integration splits at the delay.
    spec = load_plant("hydronic")
    coarse = PlantSimulation.at_steady_state(spec, load=0.3)
    fine = PlantSimulation.at_steady_state(spec, load=0.3)
    for k in range(600):
        on = (k // 7) % 3 == 0
        coarse.advance(60.0, on)
        for _ in range(6):
            fine.advance(10.0, on)
    assert coarse.room_c == pytest.approx(fine.room_c, abs=1e-6)
    assert coarse.emitter_c == pytest.approx(fine.emitter_c, abs=1e-6)


def test_transport_delay_holds_the_heat_back() -> None:
    spec = load_plant("hydronic")  # 180 s delay
    sim = PlantSimulation.at_steady_state(spec, load=0.3)
    sim.advance(170.0, True)
    assert sim.heat_input_w == 0.0
    sim.advance(10.0, True)
    assert sim.heat_input_w == spec.heater_w


def test_sensor_is_seeded_lagged_and_quantised() -> None:
    spec = single_node(time_constant_s=600.0, resolution_k=0.1, noise_k=0.05)
    a = PlantSimulation(spec, outdoor_c=0.0, room_c=20.0, seed=7)
    b = PlantSimulation(spec, outdoor_c=0.0, room_c=20.0, seed=7)
    c = PlantSimulation(spec, outdoor_c=0.0, room_c=20.0, seed=8)
    readings_a: list[float] = []
    readings_b: list[float] = []
    readings_c: list[float] = []
    for _ in range(200):
        for sim, out in ((a, readings_a), (b, readings_b), (c, readings_c)):
            sim.advance(10.0, True)
            out.append(sim.read_sensor())
    assert readings_a == readings_b
    assert readings_a != readings_c
    assert all(abs(r * 10 - round(r * 10)) < 1e-9 for r in readings_a)
    # Lag: after 2000 s of heating the room leads the sensor (first-order lag of 600 s).
    assert a.room_c - a.sensor_state_c > 0.05


@settings(max_examples=12, deadline=None)
@given(
    emitter_tau_s=st.floats(min_value=5.0, max_value=20000.0),
    room_capacity=st.floats(min_value=2.0e4, max_value=2.0e6),
    mass_capacity=st.floats(min_value=1.0e6, max_value=1.0e8),
    mass_conductance=st.floats(min_value=10.0, max_value=2000.0),
    en442=st.booleans(),
    delay_s=st.floats(min_value=0.0, max_value=600.0),
)
def test_any_plant_is_integrated_stably_and_accurately(
    *,
    emitter_tau_s: float,
    room_capacity: float,
    mass_capacity: float,
    mass_conductance: float,
    en442: bool,
    delay_s: float,
) -> None:
    # scipy.integrate.solve_ivp as reference (REFERENCES.md [published]) over 2 h of relay
    # cycling, for plants from a fast air heater to a slow screed, stiff or not: the sub-step
    # bound keeps RK4 within 0.01 K whatever the time constants.
    conductance = 100.0
    emitter: dict[str, float] = {"capacity_j_per_k": emitter_tau_s * conductance}
    if en442:
        emitter |= {"rated_output_w": 2000.0, "exponent": 1.3}
    else:
        emitter |= {"conductance_w_per_k": conductance}
    spec = PlantSpec.model_validate(
        {
            "name": "random-plant",
            "heater_w": 2000.0,
            "transport_delay_s": delay_s,
            "emitter": emitter,
            "room": {"capacity_j_per_k": room_capacity, "loss_w_per_k": 50.0},
            "mass": {"capacity_j_per_k": mass_capacity, "conductance_w_per_k": mass_conductance},
        }
    )
    outdoor = spec.outdoor_for_load_c(0.5)
    sim = PlantSimulation.at_steady_state(spec, load=0.3)
    sim.outdoor_c = outdoor
    ours: list[float] = []
    for k in range(2 * 360):
        sim.advance(10.0, _relay_pattern(k))
        if (k + 1) % 360 == 0:
            ours.append(sim.room_c)
    reference = _reference(spec, outdoor, 2, 10.0)
    assert max(abs(a - b) for a, b in zip(ours, reference, strict=True)) < 0.01
