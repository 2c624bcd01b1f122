"""The cooling call against closed-form solutions, and the changeover's invariants (hypothesis).

Sources (../shared/REFERENCES.md and DESIGN.md):
- anticipator sizing at 50 % on-time, on = off = tau ln((G + D)/(G - D)) with the room held
  steady [derived]; in cooling the anticipator is the heating one with the temperature's
  sign reversed (core/stages/cooling.py), so the same formula holds;
- relay control of a first-order plant, t_on = tau ln((T_inf - T_lo)/(T_inf - T_hi)),
  t_off = tau ln((T_hi - T_a)/(T_lo - T_a)) [derived, textbook], with the sign reversed for
  cooling: the call pulls the room toward a cold T_c, the warm surroundings T_w push it back,
  t_on = tau ln((T_hi - T_c)/(T_lo - T_c)) and t_off = tau ln((T_w - T_lo)/(T_w - T_hi));
  tau = 3 h, T_c = 0, T_w = 40, band 19.75-20.25 gives 270.0 s each, and with a dead time of
  300 s 854.8 s each, peak 20.791, trough 19.209 [derived; computed], the heating check
  values mirrored about 20 C;
- the dead band of at least 3 K between heating and cooling set points in automatic
  changeover [published: ASHRAE Standard 90.1, zone thermostatic controls].
"""

from __future__ import annotations

import itertools
import math
from dataclasses import replace

import pytest
from hypothesis import event, given, settings
from hypothesis import strategies as st

from roomloop.core import ZoneController
from roomloop.core.commands import CommandRejected, apply_command
from roomloop.core.settings import CoolingSettings, ZoneSettings
from roomloop.core.state import StateFormatError, ZoneState, check_for_zone, with_cooling_state

from .helpers import FAST_POINT, FirstOrderPlant, sample
from .helpers import settings as base_settings

G = 1.5
D = 0.5


def cooling_zone(heating: bool = False, **cooling: object) -> ZoneController:
    """A cooling-only zone (or one with both calls); the heating side without smoothing."""
    values: dict[str, object] = {
        "anticipator_gain_k": G,
        "differential_k": D,
        "min_on_s": 0.0,
        "min_off_s": 0.0,
        "max_cycles_per_hour": 60,
        "droop_compensation": False,
    }
    values.update(cooling)
    cs = CoolingSettings.for_cooling_type("direct-expansion", heating=heating, **values)  # type: ignore[arg-type]
    zone = base_settings(
        inputs=(FAST_POINT,), smoothing_s=0.0, cooling=cs, limit_max_c=30.0,
    )
    return ZoneController(zone)


def switchings(
    controller: ZoneController, temperature: float, end: float, tick: float
) -> list[tuple[float, bool]]:
    state = controller.initial_state(0.0)
    times: list[tuple[float, bool]] = []
    previous = False
    for i in range(1, round(end / tick) + 1):
        now = i * tick
        state, out = controller.step(state, sample(temperature, now), now)
        assert out.cooling is not None
        if out.cooling.demand != previous:
            times.append((now, out.cooling.demand))
            previous = out.cooling.demand
    return times


def runs(times: list[tuple[float, bool]], on: bool) -> list[float]:
    return [b[0] - a[0] for a, b in itertools.pairwise(times) if a[1] == on][1:]


@pytest.mark.parametrize("cph", [2.0, 3.0, 6.0])
def test_cooling_anticipator_sized_from_the_cycle_rate_on_a_steady_room(cph: float) -> None:
    """The room held at Sc + G/2: the call cycles at 50 % with on = off = tau ln((G+D)/(G-D)).

    REFERENCES.md, anticipator sizing at 50 % on-time [derived]: in cooling the call runs
    while ``T - c`` is above the band, ``c`` rising toward G while it runs; with T - Sc = G/2
    ``c`` swings between (G - D)/2 and (G + D)/2, the heating case mirrored. The time
    constant comes from the cooling cycle rate with the heating formula, so on = off =
    1800 / cph; computed independently here: tau ln(4/2) with tau = 3600/(2 cph ln 2).
    """
    tau = 3600.0 / (2.0 * cph * math.log((G + D) / (G - D)))
    expected = tau * math.log((G + D) / (G - D))
    assert expected == pytest.approx(1800.0 / cph, rel=1e-12)
    controller = cooling_zone(cycle_rate_cph=cph, anticipator_time_constant_s=tau)
    tick = 2.0
    times = switchings(controller, 24.0 + G / 2.0, end=4 * 3600.0, tick=tick)
    on_runs, off_runs = runs(times, True), runs(times, False)
    assert len(on_runs) >= 4 and len(off_runs) >= 4
    for run_s in on_runs + off_runs:
        assert run_s == pytest.approx(expected, abs=tick + 0.5)  # one tick of quantisation


@pytest.mark.parametrize(
    ("delay", "expected_run", "peak", "trough"),
    [
        # REFERENCES.md: tau = 3 h, band 19.75-20.25 -> 270.0 s [computed], sign reversed
        (0.0, 270.0, 20.25, 19.75),
        # REFERENCES.md: with L = 300 s -> 854.8 s, 20.791 / 19.209 [derived; computed]
        (300.0, 854.8, 20.791, 19.209),
    ],
)
def test_plain_cooling_hysteresis_on_a_first_order_plant(
    delay: float, expected_run: float, peak: float, trough: float
) -> None:
    """Gain 0, no droop: the cooling call is a plain hysteresis on [Sc - D/2, Sc + D/2]."""
    tick = 0.5  # 0.2 % of the shortest run: within the 1 % tolerance
    controller = cooling_zone(
        anticipator_gain_k=0.0, anticipator_time_constant_s=600.0, comfort_c=20.0
    )
    # the call drives the room toward 0 C, the surroundings toward 40 C
    plant = FirstOrderPlant(3 * 3600.0, 40.0, 0.0, start=20.0, delay=delay)
    state = controller.initial_state(0.0)
    times: list[tuple[float, bool]] = []
    temps: list[tuple[float, float]] = []
    previous = False
    for i in range(1, int(3 * 3600 / tick) + 1):
        now = i * tick
        state, out = controller.step(state, sample(plant.temperature, now), now)
        assert out.cooling is not None
        if out.cooling.demand != previous:
            times.append((now, out.cooling.demand))
            previous = out.cooling.demand
        plant.advance(tick, out.cooling.demand)
        temps.append((now + tick, plant.temperature))
    on_runs, off_runs = runs(times, True), runs(times, False)
    assert len(on_runs) >= 3 and len(off_runs) >= 3
    for run_s in on_runs + off_runs:
        assert run_s == pytest.approx(expected_run, rel=0.01)
    settled = [t for when, t in temps if when > times[2][0]]
    assert max(settled) == pytest.approx(peak, abs=0.01)
    assert min(settled) == pytest.approx(trough, abs=0.01)


# ---------------------------------------------------------------------------- commands


def dual_settings() -> ZoneSettings:
    cs = CoolingSettings.for_cooling_type("direct-expansion", heating=True)
    return base_settings(cooling=cs)


def test_commands_keep_the_dead_band_in_auto() -> None:
    """ASHRAE Standard 90.1 (zone thermostatic controls): at least 3 K between the heating
    and cooling set points in automatic changeover [published]."""
    s = dual_settings()
    controller = ZoneController(s)
    state = controller.initial_state(0.0)
    with pytest.raises(CommandRejected, match="dead band 3 K"):
        apply_command(s, state, "cooling_setpoint", 22.5, 0.0)  # heating comfort 20
    with pytest.raises(CommandRejected, match="dead band"):
        apply_command(s, state, "setpoint", 21.5, 0.0)  # cooling comfort 24
    held = apply_command(s, state, "cooling_setpoint", 23.0, 0.0)  # exactly 3 K: allowed
    assert held.mode == "hold" and held.cooling is not None
    assert held.cooling.hold_setpoint == 23.0 and held.hold_setpoint == 20.0
    # in heat changeover the band does not apply; back to auto is refused while it is broken
    heat = apply_command(s, state, "changeover", "heat", 0.0)
    close = apply_command(s, heat, "setpoint", 22.0, 0.0)
    with pytest.raises(CommandRejected, match="ASHRAE"):
        apply_command(s, close, "changeover", "auto", 0.0)
    with pytest.raises(CommandRejected, match="not one of"):
        apply_command(s, state, "changeover", "summer", 0.0)
    with pytest.raises(CommandRejected, match="outside the zone's limits"):
        apply_command(s, state, "cooling_setpoint", 40.0, 0.0)
    heating_only = base_settings()
    plain = ZoneController(heating_only).initial_state(0.0)
    with pytest.raises(CommandRejected, match="no cooling"):
        apply_command(heating_only, plain, "changeover", "cool", 0.0)
    assert s.cooling is not None
    cooling_only = replace(s, cooling=replace(s.cooling, heating=False, initial_changeover="cool"))
    with pytest.raises(CommandRejected, match="only cool"):
        apply_command(cooling_only, state, "changeover", "heat", 0.0)


def test_a_cooling_hold_does_not_leak_into_later_holds() -> None:
    """A cooling hold ends with its hold: a later level hold uses that level's cooling set
    point, a later ``mode hold`` the one in force then, and a set-point hold taken in mode
    ``off`` the program's, not the overheat limit."""
    from roomloop.core.commands import current_cooling_setpoint

    s = dual_settings()
    assert s.cooling is not None
    cs = replace(s.cooling, overheat_c=32.0)
    s = replace(s, cooling=cs)
    state = ZoneController(s).initial_state(0.0)
    held = apply_command(s, state, "cooling_setpoint", 27.5, 0.0)
    back = apply_command(s, held, "mode", "auto", 1.0)
    economy = apply_command(s, back, "level", "economy", 2.0, until=3600.0)
    assert current_cooling_setpoint(s, economy) == cs.economy_c
    hold = apply_command(s, back, "mode", "hold", 3.0)
    assert current_cooling_setpoint(s, hold) == cs.comfort_c
    at_economy = apply_command(s, held, "level", "economy", 4.0)
    level_hold = apply_command(s, at_economy, "mode", "hold", 5.0)
    assert current_cooling_setpoint(s, level_hold) == cs.economy_c
    off = apply_command(s, state, "mode", "off", 6.0)
    assert current_cooling_setpoint(s, off) == 32.0  # the overheat limit in mode off
    from_off = apply_command(s, off, "setpoint", 21.0, 7.0)
    assert current_cooling_setpoint(s, from_off) == cs.comfort_c


def test_state_with_cooling_round_trips_through_json() -> None:
    controller = ZoneController(dual_settings())
    state = controller.initial_state(0.0)
    for i in range(1, 200):
        state, _ = controller.step(state, sample(27.0, i * 10.0), i * 10.0)
    assert state.cooling is not None and state.cooling.switches
    assert ZoneState.from_json(state.to_json()) == state
    plain = ZoneController(base_settings()).initial_state(0.0)
    assert "cooling" not in plain.to_json()  # a heating-only zone's file is as before
    assert state.cooling is not None
    edited = with_cooling_state(state, replace(state.cooling, hold_setpoint=45.0))
    with pytest.raises(StateFormatError, match=r"cooling\.hold_setpoint 45"):
        check_for_zone(ZoneState.from_json(edited.to_json()), dual_settings())


# ---------------------------------------------------------------------------- properties


@st.composite
def scenarios(
    draw: st.DrawFn,
) -> tuple[ZoneSettings, list[tuple[float, float | None, str | None]]]:
    cs = CoolingSettings.for_cooling_type(
        draw(st.sampled_from(["direct-expansion", "chilled-water"])),
        heating=True,
        anticipator_gain_k=draw(st.floats(0.0, 3.0)),
        anticipator_time_constant_s=draw(st.floats(60.0, 3000.0)),
        cycle_rate_regulation=draw(st.booleans()),
        min_on_s=draw(st.sampled_from([0.0, 60.0, 180.0])),
        min_off_s=draw(st.sampled_from([180.0, 300.0, 600.0])),
        max_cycles_per_hour=draw(st.integers(1, 8)),
        droop_compensation=draw(st.booleans()),
        changeover_s=draw(st.sampled_from([0.0, 120.0, 600.0])),
        changeover_output=draw(st.booleans()),
        hold_s=draw(st.sampled_from([0.0, 30.0, 120.0])),
        overheat_c=draw(st.sampled_from([None, 27.0])),
    )
    s = base_settings(
        cooling=cs,
        min_on_s=draw(st.sampled_from([0.0, 120.0])),
        min_off_s=draw(st.sampled_from([0.0, 120.0])),
        inputs=(FAST_POINT,),
        limit_max_c=30.0,
    )
    steps = []
    temperature = draw(st.floats(15.0, 29.0))
    for _ in range(draw(st.integers(20, 120))):
        dt = draw(st.sampled_from([1.0, 10.0, 30.0, 120.0]))
        if draw(st.integers(0, 5)) == 0:  # a jump: quick reversals between the calls
            temperature = draw(st.floats(14.0, 30.0))
        else:
            temperature = min(35.0, max(0.0, temperature + draw(st.floats(-1.5, 1.5))))
        reading: float | None = temperature if draw(st.integers(0, 15)) else None
        command = draw(
            st.sampled_from([None] * 12 + ["heat", "cool", "auto", "setpoint", "off", "mode"])
        )
        steps.append((dt, reading, command))
    return s, steps


def _command(s: ZoneSettings, state: ZoneState, command: str, now: float) -> ZoneState:
    try:
        if command in ("heat", "cool", "auto"):
            return apply_command(s, state, "changeover", command, now)
        if command == "setpoint":
            return apply_command(s, state, "cooling_setpoint", 22.0, now)
        if command == "off":
            return apply_command(s, state, "mode", "off", now)
        return apply_command(s, state, "mode", "auto", now)
    except CommandRejected:
        return state


@settings(max_examples=40, deadline=None)
@given(scenarios())
def test_changeover_invariants(
    scenario: tuple[ZoneSettings, list[tuple[float, float | None, str | None]]],
) -> None:
    """Never both calls at once; the changeover time and the changeover output's hold before a
    call always hold, the changeover output moves only with both calls off; the cooling
    call's minimum off time (a compressor's protection) is never cut short; in ``auto`` the
    cooling set point is at least the dead band (3 K, ASHRAE Standard 90.1) above the
    heating one."""
    s, steps = scenario
    cs = s.cooling
    assert cs is not None
    controller = ZoneController(s)
    now = 0.0
    state = controller.initial_state(now)
    heat_off_at: float | None = None
    cool_off_at: float | None = None
    cool_on_prev = heat_on_prev = False
    valve_prev: bool | None = None
    valve_at: float | None = None
    calls: set[str] = set()
    for dt, reading, command in steps:
        if command is not None:
            state = _command(s, state, command, now)
        now += dt
        state, out = controller.step(state, sample(reading, now), now)
        c = out.cooling
        assert c is not None and state.cooling is not None
        heat_on, cool_on = out.demand, c.demand
        assert not (heat_on and cool_on)
        valve = state.cooling.valve
        if valve != valve_prev:
            # the changeover output moves only while both calls are (and were) off
            assert not (heat_on_prev or cool_on_prev)
            valve_at = now
        if heat_on and not heat_on_prev:
            if cool_off_at is not None:
                assert now - cool_off_at >= cs.changeover_s
            if cs.changeover_output:
                assert valve is False and valve_at is not None and now - valve_at >= cs.hold_s
        if cool_on and not cool_on_prev:
            if heat_off_at is not None:
                assert now - heat_off_at >= cs.changeover_s
            if cool_off_at is not None:
                assert now - cool_off_at >= cs.min_off_s  # compressor minimum off
            if cs.changeover_output:
                assert valve is True and valve_at is not None and now - valve_at >= cs.hold_s
        if heat_on_prev and not heat_on:
            heat_off_at = now
        if cool_on_prev and not cool_on:
            cool_off_at = now
        if c.changeover == "auto" and c.setpoint is not None and out.mode != "off":
            assert c.setpoint - out.setpoint >= cs.dead_band_k - 1e-9
        heat_on_prev, cool_on_prev, valve_prev = heat_on, cool_on, valve
        calls.add("heat" if heat_on else "cool" if cool_on else "none")
    event(f"calls: {', '.join(sorted(calls))}")


def test_too_warm_is_judged_against_the_cooling_set_point() -> None:
    """A room in the dead band (between heating 21 C and cooling 24 C) raises no alarm; 2 K
    above the cooling set point for 10 min does (ASHRAE Guideline 36 zone alarm numbers, the
    alarms' defaults [published])."""
    from roomloop.core.alarms import AlarmInputs, AlarmSettings, AlarmState, evaluate

    alarm_settings = AlarmSettings()

    def raised(temperature: float) -> set[str]:
        state = AlarmState.initial()
        kinds: set[str] = set()
        for i in range(0, 1300, 10):
            facts = AlarmInputs.of(
                temperature=temperature, setpoint=21.0, mode="auto", reliability={},
                reason="off-to-cut-in", fail_safe=False, warm_setpoint=24.0,
            )
            state, events = evaluate(alarm_settings, state, facts, float(i))
            kinds |= {e.alarm.kind for e in events if e.raised}
        return kinds

    assert raised(23.9) == set()  # 2.9 K above heating, in the dead band
    assert raised(26.6) == {"too-warm"}
    assert raised(18.8) == {"too-cold"}


def test_resume_keeps_the_compressor_minimum_off_across_a_restart() -> None:
    """A cooling call that stopped just before a restart may not start again inside its
    minimum off time; one found running though saved off counts as started at the restart."""
    s = dual_settings()
    assert s.cooling is not None
    controller = ZoneController(s)
    state = controller.initial_state(0.0)
    now = 0.0
    while state.cooling is None or not state.cooling.relay_on:
        now += 10.0
        state, _ = controller.step(state, sample(27.0, now), now)
        assert now < 3600.0
    while state.cooling is not None and state.cooling.relay_on:
        now += 10.0
        state, _ = controller.step(state, sample(21.0, now), now)
        assert now < 7200.0
    stopped = now
    saved = ZoneState.from_json(state.to_json())
    resumed = controller.resume(saved, stopped + 60.0, False, cooling_on=False)
    now = stopped + 60.0
    while now < stopped + s.cooling.min_off_s - 10.0:
        now += 10.0
        resumed, out = controller.step(resumed, sample(28.0, now), now)
        assert out.cooling is not None and not out.cooling.demand
    found_on = controller.resume(saved, stopped + 60.0, False, cooling_on=True)
    assert found_on.cooling is not None and found_on.cooling.switched_at == stopped + 60.0
    _, out = controller.step(found_on, sample(21.0, stopped + 70.0), stopped + 70.0)
    assert out.cooling is not None and out.cooling.demand and out.cooling.reason == "min-on"
