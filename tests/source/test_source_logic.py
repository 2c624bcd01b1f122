"""The heat source's step on hand-made scenarios: each rule of core/source.py once."""

from __future__ import annotations

from typing import Any

import pytest
from source_helpers import T0, first, local, run

from roomloop.core.source import (
    SourceInputs,
    SourceLogic,
    SourceMemory,
    SourceSettings,
    ZoneDemand,
)
from roomloop.core.state import StateFormatError

BOILER = SourceSettings(name="boiler", zones=("office", "showroom"))
"""The boiler defaults: valve 180 s, pre-run 0, overrun 180 s, min on 120 s, min off 180 s,
6 starts per hour."""


def test_fires_once_the_first_calling_zone_valve_had_its_opening_time() -> None:
    def demands(now: float) -> list[ZoneDemand]:
        return [
            local("office", T0 + 100 <= now < T0 + 1000, now),
            local("showroom", T0 + 200 <= now < T0 + 1200, now),
        ]

    ticks = run(BOILER, demands, ticks=200)
    waiting = first(ticks, lambda t: t.now == T0 + 150).out
    assert waiting.reason == "valve-opening"
    assert waiting.waiting_for == "office"
    assert waiting.waiting_until == T0 + 280
    assert not waiting.enable and not waiting.pump
    start = first(ticks, lambda t: t.out.enable)
    assert start.now == T0 + 280  # office called at T0+100, valve opening 180 s
    assert start.out.pump and start.out.pump_reason == "firing"
    assert start.out.calling == ("office", "showroom")
    assert start.out.starts_1h == 1
    # office stops at T0+1000, showroom at T0+1200: the source stops with the last call
    stop = first(ticks, lambda t: t.now > start.now and not t.out.enable)
    assert stop.now == T0 + 1200
    assert stop.out.pump and stop.out.pump_reason == "overrun"
    pump_off = first(ticks, lambda t: t.now > stop.now and not t.out.pump)
    assert pump_off.now == T0 + 1200 + 180


def test_minimum_on_time_holds_the_source_after_the_call_ends() -> None:
    ticks = run(BOILER, lambda now: [local("office", now < T0 + 190, now)], ticks=40)
    start = first(ticks, lambda t: t.out.enable)
    assert start.now == T0 + 180
    held = first(ticks, lambda t: t.now == T0 + 250).out
    assert held.enable and held.reason == "min-on" and held.lockout == "min-on"
    assert held.lockout_until == T0 + 300
    stop = first(ticks, lambda t: t.now > start.now and not t.out.enable)
    assert stop.now == T0 + 300


def test_zones_keep_calling_through_the_minimum_off_time_and_the_source_waits() -> None:
    def demands(now: float) -> list[ZoneDemand]:
        return [local("office", now < T0 + 400 or now >= T0 + 410, now)]

    ticks = run(BOILER, demands, ticks=100)
    assert first(ticks, lambda t: t.out.enable).now == T0 + 180
    stop = first(ticks, lambda t: t.now > T0 + 180 and not t.out.enable)
    assert stop.now == T0 + 400
    # the office calls again at T0+410; its valve is open by T0+590, the minimum off time
    # (180 s from T0+400) ended at T0+580
    waiting = first(ticks, lambda t: t.now == T0 + 500).out
    assert waiting.reason == "valve-opening"
    restart = first(ticks, lambda t: t.now > stop.now and t.out.enable)
    assert restart.now == T0 + 590
    # with a long valve time already over, the minimum off time alone holds it
    quick = SourceSettings(name="b", zones=("office",), valve_opening_s=0.0)
    ticks = run(quick, demands, ticks=100)
    held = first(ticks, lambda t: t.now == T0 + 450).out
    assert held.reason == "min-off" and held.lockout_until == T0 + 580
    assert first(ticks, lambda t: t.now > T0 + 400 and t.out.enable).now == T0 + 580


def test_starts_per_hour_sliding_and_lifted_by_frost_protection() -> None:
    settings = SourceSettings(
        name="b", zones=("office",), valve_opening_s=0, min_on_s=0, min_off_s=0,
        max_starts_per_hour=3, pump_overrun_s=0,
    )

    def pulses(protection: bool):  # type: ignore[no-untyped-def]
        # a 60 s call every 600 s
        return lambda now: [local("office", (now - T0) % 600 < 60, now, protection)]

    ticks = run(settings, pulses(False), ticks=720)
    starts = [t.now for t in ticks if t.out.enable and t.state.running_since == t.now]
    assert starts[:4] == [T0, T0 + 600, T0 + 1200, T0 + 3600]
    held = first(ticks, lambda t: t.now == T0 + 1800).out
    assert held.reason == "max-starts" and held.lockout_until == T0 + 3600
    assert held.starts_1h == 3
    ticks = run(settings, pulses(True), ticks=720)
    starts = [t.now for t in ticks if t.out.enable and t.state.running_since == t.now]
    assert starts[:4] == [T0, T0 + 600, T0 + 1200, T0 + 1800]
    assert first(ticks, lambda t: t.now == T0 + 1800).out.protection


def test_pump_pre_run_before_a_heat_pump_fires() -> None:
    settings = SourceSettings(name="hp", kind="heat-pump", zones=("office",),
                              valve_opening_s=120, pump_pre_run_s=60, pump_overrun_s=0)
    ticks = run(settings, lambda now: [local("office", True, now)], ticks=30)
    pre = first(ticks, lambda t: t.out.pump)
    assert pre.now == T0 + 120 and pre.out.reason == "pre-run" and not pre.out.enable
    assert first(ticks, lambda t: t.out.enable).now == T0 + 180


def test_no_pump_configured_reports_it() -> None:
    settings = SourceSettings(name="e", zones=("office",), has_pump=False, valve_opening_s=0)
    ticks = run(settings, lambda now: [local("office", True, now)], ticks=3)
    assert ticks[0].out.enable and not ticks[0].out.pump
    assert ticks[0].out.pump_reason == "no-pump"


def test_pump_exercise_after_a_long_idle_period() -> None:
    settings = SourceSettings(name="b", zones=("office",), pump_exercise_after_s=7200,
                              pump_exercise_s=60)
    ticks = run(settings, lambda now: [local("office", False, now)], ticks=800, tick_s=10)
    runs = [t.now for t in ticks if t.out.pump]
    assert runs[0] == T0 + 7200 and ticks[720].out.pump_reason == "exercise"
    assert runs[:6] == [T0 + 7200 + 10 * k for k in range(6)]
    assert T0 + 7260 not in runs  # one minute, then idle again
    assert not any(t.out.enable for t in ticks)


def test_start_up_counts_as_a_stop() -> None:
    """A restart may follow a run: the minimum off time and the pump overrun apply."""
    logic = SourceLogic(BOILER)
    state = logic.initial_state(T0)
    demands = SourceInputs((local("office", True, T0), local("showroom", False, T0)))
    state, out = logic.step(state, demands, T0)
    assert out.pump and out.pump_reason == "overrun"
    for k in range(1, 40):
        now = T0 + 10 * k
        state, out = logic.step(
            state, SourceInputs((local("office", True, now), local("showroom", False, now))), now
        )
        if out.enable:
            break
    assert now == T0 + 180 and out.enable


LIMITED = SourceSettings(
    name="b", zones=("office",), valve_opening_s=0, min_on_s=120, min_off_s=60,
    max_starts_per_hour=2, pump_overrun_s=0,
)


def _calling(logic: SourceLogic, state: Any, now: float) -> Any:
    return logic.step(state, SourceInputs((local("office", True, now),)), now)


def test_a_restart_found_off_keeps_the_last_hours_starts() -> None:
    """Two starts saved, the limit is two: after the restart the minimum off time passes and
    the source still waits until the first saved start leaves the hour."""
    logic = SourceLogic(LIMITED)
    now = T0 + 1000
    memory = SourceMemory("boiler", stopped_at=T0 + 900, starts=(T0 - 4000, T0, T0 + 800))
    state = logic.resume(False, False, now, memory)
    assert state.starts == (T0, T0 + 800)  # the one older than an hour is gone
    assert state.stopped_at == now  # start-up still counts as a stop (conservative)
    state, out = _calling(logic, state, now + 30)
    assert (out.enable, out.lockout, out.starts_1h) == (False, "min-off", 2)
    state, out = _calling(logic, state, now + 120)
    assert (out.enable, out.lockout, out.lockout_until) == (False, "max-starts", T0 + 3600)
    state, out = _calling(logic, state, T0 + 3599)
    assert (out.enable, out.reason) == (False, "max-starts")
    state, out = _calling(logic, state, T0 + 3600)  # the hour is (now - 3600, now]
    assert (out.enable, out.reason, out.starts_1h) == (True, "firing", 2)
    # without a memory (as before the state file kept it) the restart forgot both starts
    state, out = _calling(logic, logic.resume(False, False, now), now + 120)
    assert (out.enable, out.starts_1h) == (True, 1)


def test_a_restart_found_firing_keeps_its_saved_run() -> None:
    logic = SourceLogic(LIMITED)
    now = T0 + 100
    memory = SourceMemory("boiler", running=True, running_since=T0 + 50, starts=(T0 - 100, T0 + 50))
    state = logic.resume(True, True, now, memory)
    assert (state.running, state.running_since) == (True, T0 + 50)
    assert state.starts == (T0 - 100, T0 + 50)  # no start of the restart's own
    # the call ends: the minimum on time counts from the real start (T0 + 50), not the restart
    state, out = logic.step(state, SourceInputs((local("office", False, now),)), now)
    assert (out.enable, out.lockout, out.lockout_until) == (True, "min-on", T0 + 170)
    assert out.starts_1h == 2
    state, out = logic.step(state, SourceInputs((local("office", False, T0 + 170),)), T0 + 170)
    assert not out.enable
    # a run saved long ago: still no extra start, and its start has left the hour
    old = SourceMemory("boiler", running=True, running_since=T0 - 7200, starts=())
    assert logic.resume(True, False, now, old).starts == ()
    # found firing but saved off: its run counts as a start now, beside the saved ones
    off = SourceMemory("boiler", stopped_at=T0 + 60, starts=(T0 + 10,))
    state = logic.resume(True, False, now, off)
    assert (state.running_since, state.starts) == (now, (T0 + 10, now))


def test_a_saved_source_state_round_trips_and_garbage_is_refused() -> None:
    memory = SourceMemory("boiler", True, T0 - 30, T0 - 500, (T0 - 900, T0 - 30))
    assert SourceMemory.from_dict(memory.to_dict(), kind="boiler", now=T0) == memory
    good = memory.to_dict()
    bad: list[tuple[Any, str]] = [
        ([1, 2], "not an object"),
        ({**good, "pump": True}, "unknown keys: pump"),
        ({**good, "kind": "heat-pump"}, "kind 'heat-pump'"),
        ({**good, "running": "yes"}, "running must be"),
        ({**good, "running_since": None}, "running without running_since"),
        ({**good, "stopped_at": T0 + 10}, "stopped_at"),  # after the restart
        ({**good, "starts": [T0 - 10, T0 + 3000]}, "after the restart"),
        ({**good, "starts": [True]}, "starts must be POSIX"),
        ({**good, "starts": ["x"]}, "starts must be POSIX"),
        ({**good, "starts": [float("nan")]}, "starts must be POSIX"),
        ({**good, "starts": [-1e300]}, "starts must be POSIX"),
        ({**good, "starts": [None]}, "null"),
        ({**good, "starts": {"a": 1}}, "list"),
        ({**good, "starts": [T0 - 1] * 4000}, "list"),
    ]
    for raw, fragment in bad:
        with pytest.raises(StateFormatError, match=fragment):
            SourceMemory.from_dict(raw, kind="boiler", now=T0)
    # unsorted starts are put in order; missing keys are the defaults
    assert SourceMemory.from_dict(
        {"kind": "boiler", "starts": [T0 - 5, T0 - 50]}, kind="boiler", now=T0
    ).starts == (T0 - 50, T0 - 5)


REMOTE = SourceSettings(name="b", zones=("north/office",), valve_opening_s=0, min_on_s=0,
                        min_off_s=0, stale_timeout_s=300)


@pytest.mark.parametrize(
    ("demand", "stale"),
    [
        (ZoneDemand("north/office", True, heard_at=T0, online=True), False),
        (ZoneDemand("north/office", True, heard_at=T0, online=False), True),  # last will
        (ZoneDemand("north/office", True, heard_at=T0 - 301, online=True), True),  # silent
        (ZoneDemand("north/office", None, heard_at=T0, online=True), True),  # nothing yet
        (ZoneDemand("north/office", True, heard_at=None, online=True), True),
    ],
)
def test_remote_zone_goes_stale(demand: ZoneDemand, stale: bool) -> None:
    for policy, fires in (("ignore", False), ("assume-calling", True)):
        settings = SourceSettings(**{**_fields(REMOTE), "stale_policy": policy})
        logic = SourceLogic(settings)
        _, out = logic.step(logic.initial_state(T0 - 3600), SourceInputs((demand,)), T0)
        assert out.stale == (("north/office",) if stale else ())
        assert out.enable is (fires if stale else True)
        assert out.stale_policy == policy


def test_missing_remote_zone_is_stale_and_fixed_duty_runs_a_duty_cycle() -> None:
    settings = SourceSettings(**{**_fields(REMOTE), "stale_duty": 0.25, "stale_period_s": 1200})
    ticks = run(settings, lambda now: [], ticks=360)  # an hour, nothing heard
    on = [t.now - T0 for t in ticks if t.out.enable]
    assert on == [s for s in range(0, 3600, 10) if s % 1200 < 300]
    assert all(t.out.stale == ("north/office",) for t in ticks)


def _fields(settings: SourceSettings) -> dict[str, Any]:
    return {name: getattr(settings, name) for name in settings.__slots__}


def test_local_demand_from_controller_outputs() -> None:
    from roomloop.core.source import local_demand

    assert local_demand("office", True, "protection", T0) == ZoneDemand(
        "office", True, heard_at=T0, online=True, protection=True
    )
    assert local_demand("office", True, "last-temperature:protection", T0).protection
    assert not local_demand("office", True, "cut-in", T0).protection
    assert not local_demand("office", False, "protection", T0).protection  # held off: no call
