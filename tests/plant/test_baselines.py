"""The baseline controllers' rules, tick by tick."""

from __future__ import annotations

import dataclasses
import math
from typing import Any

import pytest

from roomloop.core.settings import ZoneSettings
from roomloop.core.types import PointSample, ZoneInputs
from roomloop.plant.baselines import (
    ElectromechanicalController,
    PiSettings,
    PlainController,
    TimeProportionalController,
    bimetal_settings,
)
from roomloop.plant.controllers import CONTROLLER_NAMES, make_controller

T0 = 1_767_225_600.0


def inputs(value: float | None, level: str = "comfort") -> ZoneInputs:
    return ZoneInputs(samples=(PointSample("temperature", value, T0),), scheduled_level=level)  # type: ignore[arg-type]


def settings(**changes: Any) -> ZoneSettings:
    base = dataclasses.replace(ZoneSettings.for_heating_type("hydronic"), comfort_c=20.0)
    return dataclasses.replace(base, **changes)


def test_plain_switches_at_the_band_edges_and_keeps_min_times() -> None:
    c = PlainController(settings(min_on_s=60.0, min_off_s=60.0))
    state = c.initial_state(T0)
    state, out = c.step(state, inputs(19.8), T0)
    assert not out.demand  # inside the band 19.75 .. 20.25
    state, out = c.step(state, inputs(19.75), T0 + 10)
    assert out.demand and out.reason == "cut-in"
    state, out = c.step(state, inputs(20.3), T0 + 30)
    assert out.demand and out.reason == "min-on"
    state, out = c.step(state, inputs(20.3), T0 + 70)
    assert not out.demand and out.reason == "cut-out"
    state, out = c.step(state, inputs(19.0), T0 + 80)
    assert not out.demand and out.reason == "min-off"
    state, out = c.step(state, inputs(None), T0 + 200)
    assert not out.demand


def test_plain_follows_the_scheduled_level() -> None:
    c = PlainController(settings(economy_c=17.0))
    state = c.initial_state(T0)
    _, out = c.step(state, inputs(18.0, "economy"), T0)
    assert out.setpoint == 17.0 and not out.demand


def test_bimetal_anticipator_is_an_exact_first_order_rise() -> None:
    s = settings()
    b = bimetal_settings(s, gain_k=1.0)
    c = ElectromechanicalController(s, b)
    state = c.initial_state(T0)
    state, out = c.step(state, inputs(19.0), T0)
    assert out.demand
    for k in range(1, 31):
        state, out = c.step(state, inputs(19.0), T0 + 10 * k)
        expected = 1.0 * (1 - math.exp(-10 * k / b.anticipator_time_constant_s))
        if out.demand:
            assert out.anticipator_k == pytest.approx(expected, rel=1e-9)
    assert out.droop_k == 0.0  # no droop compensation


def test_bimetal_time_constant_gives_the_rated_cycle_rate() -> None:
    # DESIGN.md sizing: on = off = tau ln((G + D) / (G - D)) at 50 % on-time.
    s = settings()
    b = bimetal_settings(s, gain_k=1.0)
    half_cycle = b.anticipator_time_constant_s * math.log(1.5 / 0.5)
    assert 3600 / (2 * half_cycle) == pytest.approx(s.cycle_rate_cph)


def pi(**changes: float) -> PiSettings:
    base = PiSettings(
        gain_per_k=0.5, integral_time_s=3600.0, cycle_s=1200.0, min_on_s=180.0, min_off_s=180.0
    )
    return dataclasses.replace(base, **changes)


def test_time_proportional_pulse_is_duty_times_cycle() -> None:
    c = TimeProportionalController(settings(), pi())
    state = c.initial_state(T0)
    on_ticks = 0
    for k in range(120):  # one 1200 s cycle at a steady 1 K error: duty 0.5 + a little integral
        state, out = c.step(state, inputs(19.0), T0 + 10 * k)
        on_ticks += out.demand
    assert state.duty == pytest.approx(0.5)
    assert on_ticks == 60


def test_time_proportional_skips_pulses_below_min_on_and_fills_short_pauses() -> None:
    c = TimeProportionalController(settings(), pi(gain_per_k=0.1))
    state = c.initial_state(T0)
    state, out = c.step(state, inputs(19.0), T0)  # duty 0.1 -> 120 s < 180 s min on
    assert not out.demand
    c = TimeProportionalController(settings(), pi(gain_per_k=0.9))
    state = c.initial_state(T0)
    state, out = c.step(state, inputs(19.0), T0)  # duty 0.9 -> 120 s pause < 180 s min off
    assert out.demand and state.on_until == T0 + 1200.0


def test_time_proportional_does_not_wind_up_while_saturated() -> None:
    c = TimeProportionalController(settings(), pi())
    state = c.initial_state(T0)
    for k in range(3 * 360):  # 3 h, 5 K below: output saturated at 100 %
        state, _ = c.step(state, inputs(15.0), T0 + 10 * k)
    assert state.integral_k_s == 0.0
    # Back above the set point: the pulse stops at the next cycle, no stored integral to unwind.
    for k in range(3 * 360, 3 * 360 + 130):
        state, out = c.step(state, inputs(20.5), T0 + 10 * k)
    assert not out.demand


@pytest.mark.parametrize("name", CONTROLLER_NAMES)
def test_every_controller_runs_from_zone_settings(name: str) -> None:
    c = make_controller(name, ZoneSettings.for_heating_type("electric"))
    state = c.initial_state(T0)
    state, out = c.step(state, inputs(15.0), T0)
    state, out = c.step(state, inputs(15.0), T0 + 10)
    assert out.demand
    assert out.setpoint == pytest.approx(20.0)
