"""Zone alarms, pure: raised and cleared on a simulated clock (time is an argument)."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace
from typing import Any

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from roomloop.core.alarms import (
    ALARM_KINDS,
    AckRejected,
    AlarmInputs,
    AlarmSettings,
    AlarmState,
    acknowledge,
    evaluate,
)

G36 = AlarmSettings()  # the defaults: the Guideline 36 numbers


def inputs(temperature: float | None, setpoint: float = 20.0, **kw: Any) -> AlarmInputs:
    base = AlarmInputs(temperature=temperature, setpoint=setpoint, mode="auto",
                       reliability=(("t1", "ok"),), output_confirmed=True)
    return replace(base, **kw)


def run(
    sequence: Sequence[tuple[float, AlarmInputs]], state: AlarmState | None = None,
    alarm_settings: AlarmSettings = G36,
) -> tuple[AlarmState, list[tuple[float, str, bool]]]:
    state = state or AlarmState.initial()
    log = []
    for now, facts in sequence:
        state, events = evaluate(alarm_settings, state, facts, now)
        log += [(now, e.alarm.kind, e.raised) for e in events]
    return state, log


def test_guideline_36_numbers() -> None:
    # ASHRAE Guideline 36 zone temperature alarms (REFERENCES.md [published]): 2 C beyond
    # the set point for 10 minutes is a level 3 alarm; suppressed after a set-point change
    # for 1080 s per K of the step, at most 2 h (that this is "10 minutes per F" is recalled
    # from memory, not re-read in the Guideline's text).
    assert (G36.cold_band_k, G36.warm_band_k, G36.delay_s) == (2.0, 2.0, 600.0)
    assert G36.suppression_s(1.0) == 1080.0
    assert G36.suppression_s(-4.0) == 4320.0
    assert G36.suppression_s(10.0) == 7200.0  # capped at 2 h


def test_too_cold_after_the_delay_and_cleared_with_hysteresis() -> None:
    ticks = [(t, inputs(17.9)) for t in range(0, 601, 10)]
    state, log = run(ticks)
    assert log == [(600, "too-cold", True)]  # 2.1 K below for exactly 600 s
    alarm = state.get("too-cold")
    assert alarm.active and alarm.since == 600 and alarm.value == 17.9
    assert "below" in alarm.text and state.bits == 0b1
    # inside the band but not by clear_k (0.5 K) yet: still active
    state, log = run([(610, inputs(18.4))], state)
    assert log == [] and state.get("too-cold").active
    state, log = run([(620, inputs(18.6))], state)
    assert log == [(620, "too-cold", False)]
    assert not state.get("too-cold").active and state.get("too-cold").since == 620
    assert state.bits == 0


def test_exactly_on_the_band_is_no_alarm_and_an_interruption_restarts_the_delay() -> None:
    _, log = run([(t, inputs(18.0)) for t in range(0, 1201, 10)])
    assert log == []
    seq = [(t, inputs(17.5)) for t in range(0, 500, 10)] + [(500, inputs(19.0))]
    seq += [(t, inputs(17.5)) for t in range(510, 1111, 10)]
    _, log = run(seq)
    assert log == [(1110, "too-cold", True)]  # 600 s after the condition came back


def test_too_warm() -> None:
    _, log = run([(t, inputs(22.5)) for t in range(0, 700, 10)])
    assert log == [(600, "too-warm", True)]


def test_suppressed_after_a_set_point_step_for_time_proportional_to_the_step() -> None:
    """A set-back from 16 to 20 C (+4 K): 4 x 1080 s = 4320 s before a too-cold alarm."""
    state, _ = run([(0, inputs(16.0, setpoint=16.0))])
    seq = [(t, inputs(17.0, setpoint=20.0)) for t in range(10, 6000, 10)]
    state, log = run(seq, state)
    assert log == [(10 + 4320, "too-cold", True)]
    # a 1 K step waits 1080 s; the delay (600 s) had already run out
    state, _ = run([(0, inputs(20.0, setpoint=19.0))])
    _, log = run([(t, inputs(17.0, setpoint=20.0)) for t in range(10, 3000, 10)], state)
    assert log == [(1090, "too-cold", True)]


def test_mode_off_and_no_temperature_judge_no_temperature_alarm() -> None:
    state, log = run([(t, inputs(10.0)) for t in range(0, 601, 10)])
    assert log == [(600, "too-cold", True)]
    state, log = run([(605, inputs(None))], state)
    assert log == [] and state.get("too-cold").active  # unknown is not "ended"
    state, log = run([(610, inputs(10.0, mode="off"))], state)
    assert log == [(610, "too-cold", False)]
    _, log = run([(t, inputs(None)) for t in range(0, 2000, 10)])
    assert all(kind != "too-cold" for _, kind, _ in log)


def test_sensor_fault_output_fail_safe_frost_and_lockout() -> None:
    bad = inputs(20.0, reliability=(("t1", "comm-failure"), ("t2", "ok")))
    _, log = run([(t, bad) for t in range(0, 901, 10)])
    assert log == [(900, "sensor-fault", True)]
    unconfirmed = inputs(20.0, output_confirmed=False)
    state, log = run([(t, unconfirmed) for t in range(0, 121, 10)])
    assert log == [(120, "output-unconfirmed", True)]
    assert state.get("output-unconfirmed").active
    # unknown read-back (no read-back configured) is not a mismatch
    _, log = run([(t, inputs(20.0, output_confirmed=None)) for t in range(0, 1000, 10)])
    assert log == []
    state, log = run([(0, inputs(None, fail_safe=True, fail_safe_reason="no reading"))])
    assert log == [(0, "fail-safe", True)]
    assert state.get("fail-safe").value == "no reading"
    state, log = run([(5, inputs(6.0, frost_protection=True, mode="off"))], state)
    assert (5, "frost-protection", True) in log and (5, "fail-safe", False) in log
    state, log = run([(6, inputs(20.0, source_lockout=True))], state)
    assert (6, "source-lockout", True) in log and (6, "frost-protection", False) in log
    assert state.bits == 1 << ALARM_KINDS.index("source-lockout")


def test_from_a_decision_protection_is_frost_protection() -> None:
    facts = AlarmInputs.of(
        temperature=4.0, setpoint=7.0, mode="off", reliability={"t1": "ok"},
        reason="protection", fail_safe=False,
    )
    assert facts.frost_protection and facts.reliability == (("t1", "ok"),)


def test_acknowledge() -> None:
    state, _ = run([(t, inputs(15.0)) for t in range(0, 601, 10)])
    with pytest.raises(AckRejected, match="not active"):
        acknowledge(state, "too-warm")
    with pytest.raises(AckRejected, match="not an alarm kind"):
        acknowledge(state, "smoke")
    state = acknowledge(state, "all")
    assert state.get("too-cold").acknowledged
    state, _ = run([(610, inputs(20.0)), (620, inputs(15.0))], state)
    state, log = run([(t, inputs(15.0)) for t in range(630, 1300, 10)], state)
    assert log == [(1220, "too-cold", True)]
    assert not state.get("too-cold").acknowledged  # a new raise wants a new acknowledgement
    with pytest.raises(AckRejected, match="no active alarm"):
        acknowledge(AlarmState.initial(), "all")


@settings(max_examples=60, deadline=None)
@given(
    st.lists(
        st.tuples(
            st.one_of(st.none(), st.floats(min_value=10, max_value=30)),
            st.sampled_from([16.0, 20.0, 21.0]),
            st.sampled_from(["ok", "stale"]),
            st.booleans(),
            st.sampled_from([True, False, None]),
        ),
        min_size=1, max_size=120,
    ),
    st.integers(min_value=1, max_value=400),
)
def test_raises_and_clears_alternate_and_bits_match(steps: list[tuple[Any, ...]], dt: int) -> None:
    state = AlarmState.initial()
    last: dict[str, bool] = {}
    settings_ = AlarmSettings(delay_s=300, sensor_fault_s=200, output_unconfirmed_s=100)
    for i, (temp, setpoint, verdict, fail_safe, confirmed) in enumerate(steps):
        facts = inputs(temp, setpoint=setpoint, reliability=(("t1", verdict),),
                       fail_safe=fail_safe, output_confirmed=confirmed)
        before = state
        state, events = evaluate(settings_, state, facts, i * dt)
        again, events_again = evaluate(settings_, before, facts, i * dt)
        assert (again, events_again) == (state, events)  # pure: same in, same out
        for event in events:
            assert last.get(event.alarm.kind, False) != event.raised
            last[event.alarm.kind] = event.raised
        active = {a.kind for a in state.alarms if a.active}
        assert active == {k for k, v in last.items() if v}
        assert state.bits == sum(1 << ALARM_KINDS.index(k) for k in active)
