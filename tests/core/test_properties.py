"""Properties of the control law over random readings, tick lengths and tunings (hypothesis).

- minimum on/off times are never violated unless protection forces the relay on;
- never more switch-ons in any sliding hour than allowed (protection excepted);
- never on in mode ``off`` above the protection set point;
- fail-safe entered no later than ``sensor_timeout_s`` plus one tick after the last good
  reading;
- the same scenario ticked at 1 s and at 10 s switches within one tick.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

from hypothesis import event, given, settings
from hypothesis import strategies as st

from roomloop.core import (
    PointSample,
    ZoneController,
    ZoneInputs,
    ZoneOutputs,
    ZoneSettings,
    ZoneState,
)
from roomloop.core.settings import PointSettings

from .helpers import FAST_POINT
from .helpers import settings as base_settings

HOUR = 3600.0


@st.composite
def tunings(draw: st.DrawFn) -> ZoneSettings:
    diff = draw(st.floats(0.1, 1.5))
    return base_settings(
        differential_k=diff,
        anticipator_gain_k=draw(st.floats(0.0, 3.0)),
        anticipator_time_constant_s=draw(st.floats(60.0, 3000.0)),
        min_on_s=draw(st.sampled_from([0.0, 60.0, 120.0, 300.0, 900.0])),
        min_off_s=draw(st.sampled_from([0.0, 60.0, 180.0, 600.0])),
        max_cycles_per_hour=draw(st.integers(1, 12)),
        droop_compensation=draw(st.booleans()),
        cycle_rate_regulation=draw(st.booleans()),
        cycle_rate_cph=draw(st.floats(1.0, 12.0)),
        droop_time_s=draw(st.floats(300.0, 7200.0)),
        fail_safe_policy=draw(st.sampled_from(["off", "fixed-duty", "learned-duty"])),
        fail_safe_duty=draw(st.floats(0.0, 1.0)),
        fail_safe_period_s=draw(st.sampled_from([60.0, 600.0, 1200.0])),
        sensor_timeout_s=draw(st.floats(30.0, 1200.0)),
        fail_safe_recovery_s=draw(st.floats(0.0, 600.0)),
        initial_mode=draw(st.sampled_from(["auto", "hold", "off"])),
        protection_in_off=draw(st.booleans()),
        inputs=(PointSettings("temperature", max_rate_k_per_min=draw(st.floats(0.5, 50.0)),
                              recovery_s=draw(st.floats(0.0, 300.0))),),
    )


@dataclass
class Tick:
    now: float
    out: ZoneOutputs


@st.composite
def scenarios(draw: st.DrawFn) -> list[tuple[float, float | None]]:
    """(tick length, reading or None) pairs: a random walk around the set points and
    the protection set point, with dropouts."""
    n = draw(st.integers(50, 400))
    t = draw(st.floats(3.0, 25.0))
    steps = []
    for _ in range(n):
        dt = draw(st.sampled_from([1.0, 5.0, 10.0, 30.0, 60.0, 120.0]))
        t += draw(st.floats(-0.6, 0.6))
        t = min(max(t, 0.0), 30.0)
        value = None if draw(st.integers(0, 19)) == 0 else t
        steps.append((dt, value))
    return steps


def drive(s: ZoneSettings, steps: Sequence[tuple[float, float | None]]) -> list[Tick]:
    controller = ZoneController(s)
    state = controller.initial_state(0.0)
    now = 0.0
    ticks = []
    for dt, value in steps:
        now += dt
        sample = (PointSample("temperature", None, None, "comm-failure") if value is None
                  else PointSample("temperature", value, now))
        state, out = controller.step(state, ZoneInputs((sample,), "comfort"), now)
        ticks.append(Tick(now, out))
    return ticks


def switches(ticks: list[Tick]) -> list[Tick]:
    out, previous = [], False
    for tick in ticks:
        if tick.out.demand != previous:
            out.append(tick)
            previous = tick.out.demand
    return out


@given(s=tunings(), steps=scenarios())
@settings(max_examples=150, deadline=None)
def test_short_cycle_protection_and_mode_off(
    s: ZoneSettings, steps: list[tuple[float, float | None]]
) -> None:
    ticks = drive(s, steps)
    events = switches(ticks)
    for first, second in itertools.pairwise(events):
        run = second.now - first.now
        if first.out.demand:
            # an on-run: at least min_on unless protection started it (mode off lets it end)
            if first.out.reason != "protection":
                assert run >= s.min_on_s - 1e-9, (first, second)
        elif second.out.reason != "protection":
            assert run >= s.min_off_s - 1e-9, (first, second)
    ons = [e for e in events if e.out.demand]
    for on in ons:
        if on.out.reason == "protection":
            continue
        in_hour = [o for o in ons if on.now - HOUR < o.now <= on.now]
        assert len(in_hour) <= s.max_cycles_per_hour
    if not any(e.out.reason == "protection" for e in ons):
        for on in ons:  # any sliding hour, starting at a switch-on
            assert len([o for o in ons if on.now <= o.now < on.now + HOUR]) <= s.max_cycles_per_hour
    for tick in ticks:
        if tick.out.mode == "off" and tick.out.demand:
            assert tick.out.temperature is not None
            assert tick.out.temperature < s.protection_c
            assert s.protection_in_off and tick.out.reason == "protection"


@given(
    s=tunings(),
    good=st.lists(st.sampled_from([1.0, 10.0, 30.0, 60.0]), min_size=1, max_size=100),
    lost=st.lists(st.sampled_from([1.0, 7.0, 10.0, 30.0, 60.0, 120.0]), min_size=1, max_size=100),
    temperature=st.floats(10.0, 25.0),
)
@settings(max_examples=150, deadline=None)
def test_fail_safe_entered_in_time(
    s: ZoneSettings, good: list[float], lost: list[float], temperature: float
) -> None:
    steps = [(dt, temperature) for dt in good] + [(dt, None) for dt in lost]
    ticks = drive(s, steps)
    last_good = max(t.now for t in ticks if t.out.temperature is not None)
    for tick in ticks:
        if tick.now > last_good:
            assert tick.out.fail_safe == (tick.now - last_good >= s.sensor_timeout_s), tick
        else:
            assert not tick.out.fail_safe


@given(
    s=tunings(),
    base=st.floats(18.0, 21.0),
    extra_gain=st.floats(0.1, 2.0),
    amplitude=st.floats(0.0, 2.0),
    period=st.floats(600.0, 7200.0),
    drift=st.floats(-1.0 / HOUR, 1.0 / HOUR),
)
@settings(max_examples=40, deadline=None)
def test_one_second_and_ten_second_ticks_switch_within_one_tick(
    *,
    s: ZoneSettings, base: float, extra_gain: float, amplitude: float, period: float,
    drift: float,
) -> None:
    """For every switch of the 10 s run, the 1 s run started from the 10 s run's state one
    coarse tick earlier switches the same way within that tick. Droop compensation is off:
    its integral of the measured temperature is a sum over ticks (second-order in the tick).
    So is the smoothing: over the hours a heating type's periods give at one cycle an hour,
    the smoothed temperature is nearly flat, and a switch where it grazes the band moves by
    minutes with a tick-sized difference (hypothesis found a 548 s one at 3 h of smoothing)."""
    s = replace(
        s, inputs=(FAST_POINT,), droop_compensation=False, initial_mode="auto", smoothing_s=0.0,
        anticipator_gain_k=s.differential_k + extra_gain,
    )
    controller = ZoneController(s)

    def temperature(now: float) -> float:
        return base + amplitude * math.sin(2 * math.pi * now / period) + drift * now

    def step(state: ZoneState, now: float) -> tuple[ZoneState, ZoneOutputs]:
        return controller.step(
            state, ZoneInputs((PointSample("temperature", temperature(now), now),)), now
        )

    state = controller.initial_state(0.0)
    checked = 0
    for k in range(1, 3 * 360 + 1):
        now = 10.0 * k
        previous = state
        state, out = step(state, now)
        if out.demand == previous.relay_on or k == 1:
            continue
        fine = previous
        switched_at = None
        for j in range(1, 11):
            fine, fine_out = step(fine, now - 10.0 + j)
            if fine_out.demand != previous.relay_on:
                switched_at = now - 10.0 + j
                break
        assert switched_at is not None, (now, out.reason)
        assert now - 10.0 < switched_at <= now
        checked += 1
    if checked:
        event("switches compared")

    # Independent runs from the same first tick: the first switch after it agrees within
    # one coarse tick (this also catches an inexact anticipator update accumulating over a run).
    first: list[float] = []
    for tick in (10.0, 1.0):
        state, out = step(controller.initial_state(0.0), 10.0)
        initial, now = out.demand, 10.0
        while now < 4 * HOUR:
            now += tick
            state, out = step(state, now)
            if out.demand != initial:
                first.append(now)
                break
        else:
            first.append(math.inf)
    if first[0] != math.inf:
        # inclusive below: at the coarse tick before, both runs step at the same instant, and
        # when the switching temperature sits on the band's edge there the last bits of the
        # smoothing (a sum over 1 s or 10 s ticks) decide (hypothesis found T 1e-5 K from it)
        assert first[0] - 10.0 <= first[1] <= first[0]
        event("first switch compared")
    else:
        assert first[1] == math.inf or first[1] > 4 * HOUR - 10.0
