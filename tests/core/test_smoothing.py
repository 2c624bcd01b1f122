"""The switching temperature (T smoothed over about one cycle) and the regulation's guards.

Sources: the first-order low-pass filter ``tau dy/dt = x - y`` and its closed-form answers
to a ramp and to a sine [textbook result, derived]; everything else is the controller's own
design (roomloop/core/controller.py, steps 6 and 10).
"""

from __future__ import annotations

import json
import math
from dataclasses import replace

import pytest

from roomloop.core import ZoneController, ZoneState
from roomloop.core.optimum_start import Level
from roomloop.core.settings import SettingsError, ZoneSettings
from roomloop.core.stages.constants import LawConstants
from roomloop.core.stages.regulation import regulated
from roomloop.core.state import StateFormatError

from .helpers import FAST_POINT, FirstOrderPlant, run, sample, settings

S = 20.0


def _quiet(**changes: object) -> ZoneController:
    """A forced-air zone (cycle 720 s) without droop, limits or regulation, any jump accepted."""
    values: dict[str, object] = {
        "inputs": (FAST_POINT,),
        "droop_compensation": False,
        "cycle_rate_regulation": False,
        "min_on_s": 0.0,
        "min_off_s": 0.0,
        "max_cycles_per_hour": 60,
    }
    values.update(changes)
    return ZoneController(settings(**values))


@pytest.mark.parametrize(("heating", "periods"), [("forced-air", 3.0), ("electric", 1.0)])
def test_default_smoothing_is_the_heating_types_cycle_periods_and_bad_values_are_refused(
    heating: str, periods: float
) -> None:
    s = replace(ZoneSettings.for_heating_type(heating), inputs=(FAST_POINT,))
    assert s.smoothing_s is None and s.smoothing_periods == periods
    tau = periods * 3600.0 / s.cycle_rate_cph  # forced air 3 x 720 s, electric 400 s
    controller = ZoneController(s)
    # a ramp inside the band: y(t) = x(t) - r tau (1 - exp(-t / tau)) [derived]
    rate = 0.2 / 3600.0
    trace = run(controller, lambda now, on: S + rate * now, end=3600.0, tick=10.0)
    first_now = trace[0][0]
    for now, _, state in trace[1:]:
        t = now - first_now
        expected = S + rate * now - rate * tau * (1.0 - math.exp(-t / tau))
        assert state.smoothed_c == pytest.approx(expected, abs=1e-9)
    with pytest.raises(SettingsError, match="smoothing_s"):
        settings(smoothing_s=-1.0)
    with pytest.raises(SettingsError, match="smoothing_s"):
        settings(smoothing_s=math.nan)


@pytest.mark.parametrize("tick", [1.0, 10.0, 60.0])
def test_smoothing_of_a_ramp_does_not_depend_on_the_tick(tick: float) -> None:
    """Solved exactly for a reading linear between two ticks: any tick gives the same value."""
    controller = _quiet(smoothing_s=900.0)
    rate = -0.3 / 3600.0
    trace = run(controller, lambda now, on: S + 0.1 + rate * now, end=3600.0, tick=tick)
    state = trace[-1][2]
    t = 3600.0 - tick  # the smoothing starts at the first reading
    expected = S + 0.1 + rate * 3600.0 - rate * 900.0 * (1.0 - math.exp(-t / 900.0))
    assert state.smoothed_c == pytest.approx(expected, abs=1e-9)


def test_smoothing_damps_the_rooms_ripple_like_a_first_order_filter() -> None:
    """A 0.2 K ripple at the cycle period comes out at 0.2 / sqrt(1 + (w tau)^2) [derived]."""
    period, tau, amplitude = 720.0, 720.0, 0.2
    controller = _quiet(smoothing_s=tau, anticipator_gain_k=60.0)  # the relay stays on

    def reading(now: float, on: bool) -> float:
        return S + amplitude * math.sin(2.0 * math.pi * now / period)

    trace = run(controller, reading, end=12 * 3600.0, tick=10.0)
    settled = [state.smoothed_c for now, _, state in trace if now > 6 * 3600.0]
    assert all(v is not None for v in settled)
    swing = (max(settled) - min(settled)) / 2.0  # type: ignore[type-var, operator]
    expected = amplitude / math.sqrt(1.0 + (2.0 * math.pi * tau / period) ** 2)
    assert swing == pytest.approx(expected, rel=0.02)
    assert swing < amplitude / 4.0


def test_a_real_departure_is_not_smoothed_away() -> None:
    """The switching temperature stays within D of the reading: a sudden 3 K drop (a window
    opened) cuts the relay in at once, although the smoothed value still remembers 20 C."""
    controller = _quiet()
    # settle cycling at the set point with a gently rippling reading
    trace = run(controller, lambda now, on: S + 0.05 * math.sin(now / 120.0), end=4 * 3600.0,
                tick=10.0)
    now, _, state = trace[-1]
    while state.relay_on:  # bounded by the anticipator's cycle
        now += 10.0
        state, _ = controller.step(state, sample(S, now), now)
    now += 10.0
    state, out = controller.step(state, sample(S - 3.0, now), now)
    assert state.smoothed_c is not None and state.smoothed_c > S - 0.5
    assert out.demand and out.reason == "cut-in"


def test_no_smoothing_for_a_plain_hysteresis_and_none_during_a_recovery() -> None:
    plain = _quiet(anticipator_gain_k=0.0)
    for _, out, state in run(plain, lambda now, on: 19.0 + now / 3600.0, end=3600.0, tick=10.0):
        assert state.smoothed_c == out.temperature
    controller = _quiet()
    # start-up far below the set point: a recovery, switched on the reading itself
    trace = run(controller, lambda now, on: 15.0 + now / 1800.0, end=4 * 3600.0, tick=10.0)
    recovering = [(out, st) for _, out, st in trace if st.recovering > 0]
    assert len(recovering) > 100
    # from the second tick of the recovery on, the smoothing restarts from each reading
    assert all(st.smoothed_c == out.temperature for out, st in recovering[1:])
    # a slow rise: the anticipator cuts the recovery's run out below the band, and the
    # smoothing starts from the reading
    end = next(i for i, (_, _, st) in enumerate(trace) if st.recovering == 0)
    _, out, st = trace[end]
    assert out.reason == "cut-out" and st.smoothed_c == out.temperature
    # a fast rise: the recovery ends as T enters the band, and the smoothing starts at the
    # band's edge at the moment of the crossing (reading linear between the ticks)
    trace = run(controller, lambda now, on: 15.0 if now < 100.0 else 19.8, end=200.0, tick=10.0)
    end = next(i for i, (_, _, st) in enumerate(trace) if st.recovering == 0)
    _, out, st = trace[end]
    assert out.reason != "cut-out" and st.smoothed_c is not None
    # crossing 19.75 at 4.75 / 4.8 of the last 10 s tick, then 0.1 s of smoothing (forced
    # air's 3 cycle periods: 2160 s)
    since = 10.0 * (1.0 - 4.75 / 4.8)
    expected = 19.8 - 0.05 * (2160.0 / since) * (1.0 - math.exp(-since / 2160.0))
    assert st.smoothed_c == pytest.approx(expected, abs=1e-9)
    assert S - 0.25 <= st.smoothed_c < 19.8


def _lagged_run(level: Level, hours: float) -> ZoneState:
    controller = ZoneController(settings())
    plant = FirstOrderPlant(3 * 3600.0, 0.0, 45.0, start=20.0, delay=240.0)
    state = controller.initial_state(0.0)
    now = 0.0
    for _ in range(round(hours * 360)):
        now += 10.0
        inputs = replace(sample(plant.temperature, now), scheduled_level=level)
        state, out = controller.step(state, inputs, now)
        plant.advance(10.0, out.demand)
    return state


def test_regulation_adapts_only_at_the_default_level() -> None:
    """A long dead time slows the cycle; at comfort (the default level) regulation shortens
    the time constant, in a set-back it leaves it alone (issue 4 protocol lesson: a time
    constant shortened at a low on-fraction races the relay into the cycle limit)."""
    assert _lagged_run("comfort", 8.0).tau_scale < 0.9
    assert _lagged_run("economy", 8.0).tau_scale == 1.0


def test_regulation_never_shortens_the_time_constant_past_the_rate_plus_one() -> None:
    law = LawConstants.of(settings())  # forced-air: 5 cph, cycle 720 s
    # a slow cycle (900 s against 720 s) asks for a shorter time constant
    slow = 900.0
    assert regulated(law, 1.0, slow, ons_in_hour=5) < 1.0
    assert regulated(law, 1.0, slow, ons_in_hour=6) == 1.0
    # lengthening is always allowed (it lowers the rate)
    assert regulated(law, 1.0, 500.0, ons_in_hour=6) > 1.0


def test_state_with_and_without_the_smoothed_temperature_loads() -> None:
    controller = _quiet()
    trace = run(controller, lambda now, on: 19.9, end=600.0, tick=10.0)
    state = trace[-1][2]
    assert state.smoothed_c == pytest.approx(19.9)
    assert ZoneState.from_json(state.to_json()) == state
    # a state saved before the smoothing existed (same version 1) loads with none
    data = json.loads(state.to_json())
    del data["smoothed_c"]
    old = ZoneState.from_json(json.dumps(data))
    assert old.smoothed_c is None
    assert old == replace(state, smoothed_c=None)
    # and the controller restarts the smoothing from the next reading
    now = trace[-1][0] + 10.0
    after, _ = controller.step(old, sample(19.8, now), now)
    assert after.smoothed_c == 19.8
    data["smoothed_c"] = "warm"
    with pytest.raises(StateFormatError, match="smoothed_c"):
        ZoneState.from_json(json.dumps(data))
