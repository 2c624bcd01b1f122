"""Restarts at random instants (SIGKILL and start again) keep short-cycle protection exact.

The pure core is driven the way the service drives it: a step every tick, the relay
following each decision, each switch recorded durably before the device is written
(the state store's switch journal), the whole state saved every 300 s. At random
instants the process dies (the relay stays as it was; a kill just after a switch may
come before the device's write, or even before the switch's record), stays down a
random time, and starts again: ``resume`` gets the saved state and the relay as read from
the device (or ``None``, unknown, and then the service writes the safe state at
start). On the relay's real timeline every switch roomloop makes must respect the
minimum on and off times and the cycle limit; the only switch it does not choose is
the safe-state write at a start with an unreadable relay, and that one is never
followed by a pulse.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, replace

from hypothesis import given, settings
from hypothesis import strategies as st

from roomloop.core import PointSample, ZoneController, ZoneInputs, ZoneSettings
from roomloop.core.state import ZoneState

from .helpers import FAST_POINT, POINT

TICK_S = 10.0
PERIODIC_SAVE_S = 300.0  # as the service (service/app.py PERIODIC_SAVE_S)
HEATING = ("forced-air", "hydronic", "underfloor", "electric", "steam")


@dataclass(frozen=True)
class Restart:
    after_tick: int
    down_s: float
    read_back: bool  # the output's state could be read at the start
    write_lost: bool  # the kill came after a switch's record, before the device's write
    record_lost: bool  # ... or even before the record (then the device was not written)


@dataclass(frozen=True)
class Switch:
    at: float
    on: bool
    by_roomloop: bool  # False: the safe-state write at a start with an unknown relay


def _inputs(value: float, now: float) -> ZoneInputs:
    return ZoneInputs((PointSample(POINT, value, now),))


def _simulate(
    s: ZoneSettings, readings: list[float], restarts: list[Restart], safe_on: bool
) -> list[Switch]:
    """The relay's real switchings over the run, restarts included."""
    c = ZoneController(s)
    state = c.initial_state(0.0)
    saved: ZoneState = state
    saved_at = 0.0
    relay = False  # the device
    timeline: list[Switch] = []
    by_tick = {r.after_tick: r for r in restarts}
    now = 0.0
    for i, value in enumerate(readings):
        now += TICK_S
        before = state
        state, out = c.step(state, _inputs(value, now), now)
        restart = by_tick.get(i)
        switched = state.relay_on != before.relay_on
        write_lost = restart is not None and restart.write_lost and switched
        record_lost = write_lost and restart is not None and restart.record_lost
        if switched and not record_lost:  # the journal line, as persist.py applies it
            assert state.switched_at is not None
            saved = replace(
                saved,
                relay_on=state.relay_on,
                switched_at=state.switched_at,
                switches=(*saved.switches, (state.switched_at, state.relay_on)),
            )
        if out.demand != relay and not write_lost:
            relay = out.demand
            timeline.append(Switch(now, relay, True))
        if now - saved_at >= PERIODIC_SAVE_S and restart is None:
            saved, saved_at = ZoneState.from_json(state.to_json()), now
        if restart is None:
            continue
        # killed just after this tick; down for a while; the relay stays as it was
        now += restart.down_s
        if restart.read_back:
            state = c.resume(saved, now, relay, safe_on=safe_on)
        else:
            state = c.resume(saved, now, None, safe_on=safe_on)
            if relay != safe_on:  # the service writes the safe state at start
                relay = safe_on
                timeline.append(Switch(now, relay, False))
        assert state.relay_on == relay, "resume must start from the relay as it is"
        saved, saved_at = state, now  # the first save after the start
        now += 0.5 - TICK_S  # the first step comes half a second after the start
    return timeline


def _check_protection(s: ZoneSettings, timeline: list[Switch]) -> None:
    for previous, switch in itertools.pairwise(timeline):
        if not switch.by_roomloop:
            continue
        run_s = switch.at - previous.at
        if switch.on:
            assert run_s >= s.min_off_s - 1e-6, f"off for {run_s:.1f} s before {switch}"
        else:
            assert run_s >= s.min_on_s - 1e-6, f"on for {run_s:.1f} s before {switch}"
    ons = [sw.at for sw in timeline if sw.on]
    for sw in timeline:
        if sw.on and sw.by_roomloop:
            in_hour = sum(1 for t in ons if sw.at - 3600.0 < t <= sw.at)
            assert in_hour <= s.max_cycles_per_hour, f"{in_hour} switch-ons in the hour to {sw}"


restarts_strategy = st.lists(
    st.builds(
        Restart,
        after_tick=st.integers(0, 719),
        down_s=st.one_of(st.floats(0.5, 60.0), st.floats(60.0, 4000.0)),
        read_back=st.booleans(),
        write_lost=st.booleans(),
        record_lost=st.booleans(),
    ),
    max_size=8,
    unique_by=lambda r: r.after_tick,
)


@given(
    heating=st.sampled_from(HEATING),
    levels=st.lists(st.floats(18.5, 21.5), min_size=1, max_size=48),
    restarts=restarts_strategy,
    safe_on=st.booleans(),
)
@settings(max_examples=60, deadline=None)
def test_random_restarts_never_cut_a_minimum_time_or_exceed_the_cycle_limit(
    heating: str, levels: list[float], restarts: list[Restart], safe_on: bool
) -> None:
    """Readings that jump between random levels (held 15 ticks each) over two hours."""
    s = replace(ZoneSettings.for_heating_type(heating), inputs=(FAST_POINT,))
    readings = [levels[(i // 15) % len(levels)] for i in range(720)]
    timeline = _simulate(s, readings, restarts, safe_on)
    _check_protection(s, timeline)


def _saw_tooth(n: int) -> list[float]:
    """A room that keeps the relay busy: down through the band and up again, 0.2 K a tick."""
    return [19.0 + abs((i % 16) - 8) * 0.2 for i in range(n)]


@given(
    heating=st.sampled_from(HEATING),
    restarts=restarts_strategy,
    safe_on=st.booleans(),
)
@settings(max_examples=60, deadline=None)
def test_a_busy_relay_restarted_at_random_instants_keeps_its_protection(
    heating: str, restarts: list[Restart], safe_on: bool
) -> None:
    s = replace(ZoneSettings.for_heating_type(heating), inputs=(FAST_POINT,))
    timeline = _simulate(s, _saw_tooth(720), restarts, safe_on)
    assert sum(1 for sw in timeline if sw.on) >= 2  # the relay did cycle
    _check_protection(s, timeline)


def test_a_lost_write_then_the_safe_state_counts_the_switch_from_the_write() -> None:
    """A case the search above found: a switch on recorded at 70.5 s whose device write died
    with the process; the restart cannot read the relay and writes the safe state (on) at
    72.5 s. The cycle limit must count that switch-on from 72.5 s, when the relay really
    closed: counted from 70.5 s it left the hour 2 s early and allowed a seventh start."""
    s = replace(ZoneSettings.for_heating_type("forced-air"), inputs=(FAST_POINT,))
    restarts = [
        Restart(after_tick=0, down_s=1.0, read_back=True, write_lost=False, record_lost=False),
        Restart(after_tick=7, down_s=1.0, read_back=False, write_lost=True, record_lost=False),
        Restart(after_tick=8, down_s=887.0, read_back=True, write_lost=False, record_lost=False),
        Restart(after_tick=9, down_s=17.0, read_back=False, write_lost=False, record_lost=False),
        Restart(after_tick=13, down_s=33.0, read_back=False, write_lost=False, record_lost=False),
    ]
    timeline = _simulate(s, _saw_tooth(720), restarts, safe_on=True)
    assert timeline[0] == Switch(72.5, True, False)
    _check_protection(s, timeline)


def test_a_kill_mid_run_then_a_restart_serves_the_rest_of_min_on() -> None:
    """The case of the fault-injection run: min_on 60 s, killed 30 s into a run."""
    s = replace(ZoneSettings.for_heating_type("electric"), inputs=(FAST_POINT,))
    assert s.min_on_s == 60.0
    c = ZoneController(s)
    state = c.initial_state(0.0)
    state, out = c.step(state, _inputs(19.0, 10.0), 10.0)
    assert out.demand and state.switched_at == 10.0
    saved = ZoneState.from_json(state.to_json())  # saved at the switch
    state, out = c.step(state, _inputs(19.1, 40.0), 40.0)  # last_step_at 40, not saved
    # killed at 40 s; started again at 45 s; the relay reads on
    resumed = c.resume(saved, 45.0, True, safe_on=False)
    assert resumed.relay_on and resumed.switched_at == 10.0 and resumed.switches == saved.switches
    state, out = c.step(resumed, _inputs(25.0, 45.5), 45.5)  # far above the band
    assert out.demand and out.reason == "min-on"
    state, out = c.step(state, _inputs(25.0, 70.0), 70.0)
    assert not out.demand and out.reason == "cut-out"


def test_an_unreadable_relay_is_the_safe_state_and_a_switch_at_the_restart() -> None:
    s = replace(ZoneSettings.for_heating_type("electric"), inputs=(FAST_POINT,))
    c = ZoneController(s)
    state, out = c.step(c.initial_state(0.0), _inputs(19.0, 10.0), 10.0)
    assert state.relay_on
    saved = ZoneState.from_json(state.to_json())
    # down for 10 minutes, last_step_at (10 s) is old; the safe state (off) is written now
    resumed = c.resume(saved, 610.0, None, safe_on=False)
    assert not resumed.relay_on
    assert resumed.switched_at == 610.0 and resumed.switches[-1] == (610.0, False)
    state, out = c.step(resumed, _inputs(19.0, 610.4), 610.4)  # wants heat at once
    assert not out.demand and out.reason == "min-off"  # no 0.4 s off pulse
    # unknown, but the safe state is what was saved: no switch is logged, yet the minimum
    # off time runs from the restart (a switch-on lost with the old process could have
    # been undone by the safe write just now)
    off = replace(saved, relay_on=False, switches=saved.switches[:-1], switched_at=None)
    again = c.resume(off, 610.0, None, safe_on=False)
    assert again.switches == off.switches and again.switched_at == 610.0


def test_a_relay_found_switched_while_down_counts_from_the_restart() -> None:
    s = replace(ZoneSettings.for_heating_type("forced-air"), inputs=(FAST_POINT,))
    c = ZoneController(s)
    fresh = c.initial_state(0.0)
    resumed = c.resume(fresh, 500.0, True)  # no saved state, the relay reads on
    assert resumed.relay_on and resumed.switched_at == 500.0
    assert resumed.switches == ((500.0, True),)
    _, out = c.step(resumed, _inputs(25.0, 501.0), 501.0)
    assert out.demand and out.reason == "min-on"
    same = c.resume(fresh, 500.0, False)
    assert same.switches == () and same.switched_at is None
