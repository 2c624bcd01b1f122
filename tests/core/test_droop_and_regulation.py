"""Droop compensation, its anti-windup, and cycle-rate regulation on a plant with lag.

The plant is the first-order room of REFERENCES.md ("Relay (on/off) control of a
first-order plant" [derived]): tau 3 h, 0 C outdoors, 45 C with the heat on, with a
dead time between relay and room.
"""

from __future__ import annotations

import itertools
from dataclasses import replace

import pytest

from roomloop.core import PointSample, ZoneController, ZoneInputs, ZoneOutputs, ZoneState
from roomloop.core.commands import apply_command
from roomloop.core.settings import ZoneSettings

from .helpers import FirstOrderPlant, settings

TICK = 10.0


def drive(controller: ZoneController, plant: FirstOrderPlant, state: ZoneState, start: float,
          hours: float) -> list[tuple[float, ZoneOutputs, ZoneState, float]]:
    trace = []
    now = start
    for _ in range(round(hours * 3600 / TICK)):
        now += TICK
        inputs = ZoneInputs((PointSample("temperature", plant.temperature, now),))
        state, out = controller.step(state, inputs, now)
        plant.advance(TICK, out.demand)
        trace.append((now, out, state, plant.temperature))
    return trace


def lagged_plant(delay: float = 120.0) -> FirstOrderPlant:
    return FirstOrderPlant(3 * 3600.0, 0.0, 45.0, start=20.0, delay=delay)


def steady(
    s: ZoneSettings, hours: float = 12.0, delay: float = 120.0
) -> list[tuple[float, ZoneOutputs, ZoneState, float]]:
    controller = ZoneController(s)
    return drive(controller, lagged_plant(delay), controller.initial_state(0.0), 0.0, hours)


def cycles_per_hour(trace: list[tuple[float, ZoneOutputs, ZoneState, float]]) -> float:
    ons = sum(1 for a, b in itertools.pairwise(trace) if b[1].demand and not a[1].demand)
    return ons / ((trace[-1][0] - trace[0][0]) / 3600.0)


def test_droop_compensation_removes_the_anticipators_offset() -> None:
    """Without compensation the room settles about G x on-fraction below the set point
    (REFERENCES.md [derived]); with it, at the set point."""
    base = replace(settings(), cycle_rate_regulation=False)
    plain = steady(replace(base, droop_compensation=False))[-2880:]  # last 8 h
    compensated = steady(base)[-2880:]
    duty = sum(o.demand for _, o, _, _ in plain) / len(plain)
    offset_plain = sum(t for *_, t in plain) / len(plain) - 20.0
    offset_comp = sum(t for *_, t in compensated) / len(compensated) - 20.0
    expected = -base.anticipator_gain_k * duty
    assert offset_plain == pytest.approx(expected, abs=0.35 * abs(expected))
    assert abs(offset_comp) < 0.1
    assert compensated[-1][1].droop_k == pytest.approx(-expected, abs=0.35 * abs(expected))


@pytest.mark.parametrize(
    ("delay", "smoothing", "direction"),
    [(120.0, 0.0, 1.0), (240.0, 0.0, -1.0), (120.0, 720.0, -1.0)],
)
def test_cycle_rate_regulation_brings_the_plant_to_the_cycle_rate(
    delay: float, smoothing: float | None, direction: float
) -> None:
    """Switching on the raw temperature, a room that moves with each burst of heat cycles
    faster than the anticipator alone (120 s dead time here); a long dead time makes it
    cycle slower (240 s). Switching on the temperature smoothed over one cycle period (720 s),
    the room's ripple no longer hurries the relay and the dead time slows it. Either way regulation
    scales the time constant until the configured cycle rate is met."""
    base = settings(smoothing_s=smoothing)
    unregulated = steady(replace(base, cycle_rate_regulation=False), delay=delay)[-1440:]
    regulated = steady(base, delay=delay)[-1440:]
    off_by = cycles_per_hour(unregulated) - base.cycle_rate_cph
    assert off_by * direction > 0.5
    assert cycles_per_hour(regulated) == pytest.approx(base.cycle_rate_cph, abs=0.25)
    assert (regulated[-1][2].tau_scale - 1.0) * direction > 0.1


def test_droop_is_frozen_while_recovering_and_fades_in_a_set_back() -> None:
    s = settings()
    controller = ZoneController(s)
    plant = lagged_plant()
    trace = drive(controller, plant, controller.initial_state(0.0), 0.0, 8.0)
    now, _, state, _ = trace[-1]
    b_before = state.droop_k
    assert b_before > 0.1
    # set-back to 16 C: the relay rests and b fades with the anticipator
    state = apply_command(s, state, "setpoint", 16.0, now)
    rest = drive(controller, plant, state, now, 2.0)
    recovering = [(o, st) for _, o, st, _ in rest if st.recovering < 0 and not o.demand]
    assert len(recovering) > 100
    drops = [b.droop_k for _, b in recovering]
    assert all(x >= y for x, y in itertools.pairwise(drops))
    assert drops[-1] < 0.5 * b_before
    # back up to 20 C: b is frozen until the relay first cuts out by itself
    now, _, state, _ = rest[-1]
    state = apply_command(s, state, "setpoint", 20.0, now)
    up = drive(controller, plant, state, now, 2.0)
    frozen = [st.droop_k for _, _, st, _ in up if st.recovering > 0]
    assert len(frozen) > 10 and len(set(frozen)) == 1
    end = next(i for i, (_, _, st, _) in enumerate(up) if st.recovering == 0)
    assert up[end][1].reason == "cut-out"
