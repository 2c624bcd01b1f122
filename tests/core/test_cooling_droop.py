"""The cooling call's droop term under the heating call's rules (core/stages/droop.py).

Each check runs the heating call and the cooling call side by side, so the cooling call is
held to exactly the rule the heating call already follows: a fresh call starts its
anticipator and droop term at ``G x`` the fail-safe duty, and the droop term integrates at
half rate while the call has been on for longer than a whole cycle period (anti-windup).

The plant is the first-order room of REFERENCES.md ("Relay (on/off) control of a first-order
plant" [derived]) with the sign reversed for cooling: the call pulls the room toward 0 C, the
warm surroundings (40 C) push it back, tau 3 h, with a dead time between call and room.
"""

from __future__ import annotations

import pytest

from roomloop.core import ZoneController, ZoneOutputs
from roomloop.core.settings import CoolingSettings, ZoneSettings
from roomloop.core.stages.droop import SATURATED_RATE
from roomloop.core.state import ZoneState

from .helpers import FAST_POINT, FirstOrderPlant, sample
from .helpers import settings as base_settings

TICK = 10.0


def heating_zone(**changes: object) -> ZoneSettings:
    """A forced-air heating zone (gain 2.5 K, 5 cycles/h) without smoothing."""
    return base_settings(inputs=(FAST_POINT,), smoothing_s=0.0, **changes)


def cooling_zone(**cooling: object) -> ZoneSettings:
    """A cooling-only direct-expansion zone (gain 1.5 K, 3 cycles/h) without smoothing, its
    short-cycle limits out of the way."""
    values: dict[str, object] = {"min_on_s": 0.0, "min_off_s": 0.0, "max_cycles_per_hour": 60}
    values.update(cooling)
    cs = CoolingSettings.for_cooling_type("direct-expansion", **values)  # type: ignore[arg-type]
    return base_settings(inputs=(FAST_POINT,), smoothing_s=0.0, cooling=cs, limit_max_c=30.0)


def call(state: ZoneState, out: ZoneOutputs, cooling: bool) -> tuple[bool, float, float]:
    """(the call is on, its anticipator, its droop term) of the heating or the cooling call."""
    if not cooling:
        return out.demand, state.anticipator_k, state.droop_k
    assert state.cooling is not None
    return state.cooling.relay_on, state.cooling.anticipator_k, state.cooling.droop_k


@pytest.mark.parametrize("cooling", [False, True], ids=["heating", "cooling"])
def test_a_fresh_call_starts_its_terms_at_the_gain_times_the_fail_safe_duty(
    cooling: bool,
) -> None:
    """Both terms of a fresh call at ``G x duty`` (they cancel in the switching temperature);
    0 without droop compensation."""
    s = cooling_zone() if cooling else heating_zone()
    gain = s.cooling.anticipator_gain_k if s.cooling is not None else s.anticipator_gain_k
    fresh = ZoneController(s).initial_state(0.0)
    part = fresh.cooling if cooling else fresh
    assert part is not None
    assert part.anticipator_k == pytest.approx(gain * s.fail_safe_duty, rel=1e-12)
    assert part.droop_k == pytest.approx(gain * s.fail_safe_duty, rel=1e-12)
    without = cooling_zone(droop_compensation=False) if cooling else heating_zone(
        droop_compensation=False
    )
    plain = ZoneController(without).initial_state(0.0)
    part = plain.cooling if cooling else plain
    assert part is not None and part.anticipator_k == 0.0 and part.droop_k == 0.0


def test_a_fresh_cooling_zone_does_not_sit_above_its_set_point_for_hours() -> None:
    """On the first-order room at 24 C the cooling call runs at (40 - 24) / 40 = 40 % [derived],
    so its anticipator's mean is G x 0.4 = 0.6 K and, with the droop term starting from 0,
    the room sits up to that far above the set point until the term has integrated up
    (droop_time_s, 1 h, per kelvin it is short). Started at G x the fail-safe duty (0.3:
    0.45 K) it is short by about 0.15 K only, so the room's mean is within 0.1 K of 24 C in
    each of the first three hours (from 0: +0.28 K in the first, +0.19 K in the second)."""
    s = cooling_zone()
    controller = ZoneController(s)
    plant = FirstOrderPlant(3 * 3600.0, 40.0, 0.0, start=24.0, delay=120.0)
    state = controller.initial_state(0.0)
    hours: list[list[float]] = [[], [], []]
    now = 0.0
    for i in range(round(3 * 3600 / TICK)):
        now += TICK
        state, out = controller.step(state, sample(plant.temperature, now), now)
        assert out.cooling is not None
        plant.advance(TICK, out.cooling.demand)
        hours[i * round(TICK) // 3600].append(plant.temperature)
    for temps in hours:
        assert abs(sum(temps) / len(temps) - 24.0) < 0.1


@pytest.mark.parametrize("cooling", [False, True], ids=["heating", "cooling"])
def test_droop_integrates_at_half_rate_once_the_call_is_saturated(cooling: bool) -> None:
    """The room held 1 K short of the set point on the call's side (19 C against 20 C, 25 C
    against 24 C) with a gain that keeps the call on: for the first cycle period the droop
    term grows by 1 K x dt / droop_time_s a tick, afterwards by SATURATED_RATE (0.5) of that
    (a softened conditional integration; the rule's source is in core/stages/droop.py)."""
    droop_time = 36000.0  # b stays far from its clamp at G over the run
    if cooling:
        s = cooling_zone(droop_time_s=droop_time, anticipator_gain_k=0.9)
        assert s.cooling is not None
        period = 3600.0 / s.cooling.cycle_rate_cph
        at_setpoint, short = 24.0, 25.0
    else:
        s = heating_zone(droop_time_s=droop_time, anticipator_gain_k=0.9)
        period = 3600.0 / s.cycle_rate_cph
        at_setpoint, short = 20.0, 19.0
    controller = ZoneController(s)
    state = controller.initial_state(0.0)
    # in the band first: the call starts with no recovery running
    state, out = controller.step(state, sample(at_setpoint, TICK), TICK)
    now = TICK
    steps: list[tuple[float, float]] = []  # (time on, b's growth over the tick)
    on_at: float | None = None
    b_before = call(state, out, cooling)[2]
    while now < 3 * period:
        now += TICK
        state, out = controller.step(state, sample(short, now), now)
        on, _, b = call(state, out, cooling)
        assert on  # the call never cuts out: the run is saturated
        on_at = now if on_at is None else on_at
        steps.append((now - on_at, b - b_before))
        b_before = b
    full = 1.0 * TICK / droop_time
    early = [growth for since, growth in steps if since < period - TICK]
    late = [growth for since, growth in steps if since > period + TICK]
    assert early and late
    assert all(g == pytest.approx(full, rel=1e-9) for g in early)
    assert all(g == pytest.approx(SATURATED_RATE * full, rel=1e-9) for g in late)
