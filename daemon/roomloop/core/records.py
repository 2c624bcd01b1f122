"""Constructors for the frozen records the step builds on every tick, cheaper than ``__init__``.

A frozen dataclass's generated ``__init__`` must store each field through
``object.__setattr__`` (the class refuses plain assignment); the zone state has 31
fields and is replaced on every tick of every zone. These functions store the fields
through the slots' own descriptors instead: the same object, equal to one built by
``__init__`` (tests/core/test_state.py), in about half the time
(tests/bench/controller_step.py). They take the fields in the groups the stages
produce them in (a keyword per field would cost as much as ``__init__``), each group a
tuple in the dataclass's field order.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import fields
from typing import Any

from .failsafe import Bucket
from .state import CoolingState, DualZoneState, PointState, ZoneState
from .types import CoolingOutputs, DualZoneOutputs, Reason, Reliability, ZoneOutputs

Setter = Callable[[object, Any], None]


def slot_setters(cls: type) -> tuple[Setter, ...]:
    """The ``__set__`` of each field's slot descriptor, in field order."""
    if not hasattr(cls, "__slots__") or not hasattr(cls, "__dataclass_fields__"):
        raise TypeError(f"{cls.__name__} is not a slotted dataclass")
    return tuple(getattr(cls, f.name).__set__ for f in fields(cls))


_new = object.__new__
(_P_NAME, _P_RELIABILITY, _P_VERDICT, _P_VALUE, _P_VALUE_AT, _P_SEEN_AT, _P_STILL_VALUE,
 _P_STILL_ON_S, _P_GOOD_SINCE, _P_FAULTED) = slot_setters(PointState)
(_S_MODE, _S_HOLD_SETPOINT, _S_HOLD_LEVEL, _S_HOLD_UNTIL, _S_LEVEL_OVERRIDE, _S_SCHEDULED_LEVEL,
 _S_ANTICIPATOR_K, _S_DROOP_K, _S_TAU_SCALE, _S_CYCLE_CLEAN, _S_RELAY_ON, _S_SWITCHED_AT,
 _S_PROTECTION_RUN, _S_SWITCHES, _S_STARTED_AT, _S_LAST_STEP_AT, _S_LAST_SETPOINT, _S_RECOVERING,
 _S_TEMPERATURE, _S_GOOD_AT, _S_GOOD_SINCE, _S_NORMAL, _S_FAIL_SAFE, _S_FAIL_SAFE_SINCE,
 _S_FAIL_SAFE_DUTY, _S_FAIL_SAFE_REASON, _S_DUTY_BUCKETS, _S_DUTY_CURRENT, _S_POINTS, _S_BACKUP,
 _S_SMOOTHED_C) = slot_setters(ZoneState)
_STATE_COPY = tuple(
    (getattr(ZoneState, f.name).__get__, setter)
    for f, setter in zip(fields(ZoneState), slot_setters(ZoneState), strict=True)
)
_S_COOLING = slot_setters(DualZoneState)[-1]
(_O_DEMAND, _O_REASON, _O_TEMPERATURE, _O_SETPOINT, _O_LEVEL, _O_MODE, _O_ANTICIPATOR_K,
 _O_DROOP_K, _O_RELIABILITY, _O_FAIL_SAFE, _O_FAIL_SAFE_POLICY, _O_FAIL_SAFE_REASON,
 _O_ON_FRACTION_1H, _O_CYCLES_1H) = slot_setters(ZoneOutputs)
_OUTPUTS_COPY = tuple(
    (getattr(ZoneOutputs, f.name).__get__, setter)
    for f, setter in zip(fields(ZoneOutputs), slot_setters(ZoneOutputs), strict=True)
)
_O_COOLING = slot_setters(DualZoneOutputs)[-1]


# PointState's groups
Judgement = tuple[Reliability, Reliability]
"""(reliability, verdict)"""
Accepted = tuple[float | None, float | None, float | None]
"""(value, value_at, seen_at)"""
Stillness = tuple[float | None, float]
"""(still_value, still_on_s)"""
Trust = tuple[float | None, bool]
"""(good_since, faulted)"""


def point_state(
    name: str, judgement: Judgement, accepted: Accepted, stillness: Stillness, trust: Trust
) -> PointState:
    """A :class:`PointState` from its field groups."""
    obj = _new(PointState)
    _P_NAME(obj, name)
    _P_RELIABILITY(obj, judgement[0])
    _P_VERDICT(obj, judgement[1])
    _P_VALUE(obj, accepted[0])
    _P_VALUE_AT(obj, accepted[1])
    _P_SEEN_AT(obj, accepted[2])
    _P_STILL_VALUE(obj, stillness[0])
    _P_STILL_ON_S(obj, stillness[1])
    _P_GOOD_SINCE(obj, trust[0])
    _P_FAULTED(obj, trust[1])
    return obj


# ZoneState's groups (the sections of its field list)
CommandFields = tuple[str, float | None, str | None, float | None, str | None, str]
"""(mode, hold_setpoint, hold_level, hold_until, level_override, scheduled_level)"""
TermFields = tuple[float, float, float, bool]
"""(anticipator_k, droop_k, tau_scale, cycle_clean)"""
RelayFields = tuple[bool, float | None, bool, tuple[tuple[float, bool], ...]]
"""(relay_on, switched_at, protection_run, switches)"""
TimeFields = tuple[float, float, float | None, int]
"""(started_at, last_step_at, last_setpoint, recovering)"""
TemperatureFields = tuple[float | None, float, float | None, bool]
"""(temperature, good_at, good_since, normal)"""
FailSafeFields = tuple[bool, float | None, float | None, str | None]
"""(fail_safe, fail_safe_since, fail_safe_duty, fail_safe_reason)"""
DutyFields = tuple[tuple[Bucket, ...], Bucket]
"""(duty_buckets, duty_current)"""
PointFields = tuple[tuple[PointState, ...], PointState | None, float | None]
"""(points, backup, smoothed_c)"""


def zone_state(  # noqa: PLR0917 - one argument per section of the record
    commands: CommandFields,
    terms: TermFields,
    relay: RelayFields,
    times: TimeFields,
    temperature: TemperatureFields,
    fail_safe: FailSafeFields,
    duty: DutyFields,
    points: PointFields,
) -> ZoneState:
    """A :class:`ZoneState` from its sections, each in field order."""
    obj = _new(ZoneState)
    _S_MODE(obj, commands[0])
    _S_HOLD_SETPOINT(obj, commands[1])
    _S_HOLD_LEVEL(obj, commands[2])
    _S_HOLD_UNTIL(obj, commands[3])
    _S_LEVEL_OVERRIDE(obj, commands[4])
    _S_SCHEDULED_LEVEL(obj, commands[5])
    _S_ANTICIPATOR_K(obj, terms[0])
    _S_DROOP_K(obj, terms[1])
    _S_TAU_SCALE(obj, terms[2])
    _S_CYCLE_CLEAN(obj, terms[3])
    _S_RELAY_ON(obj, relay[0])
    _S_SWITCHED_AT(obj, relay[1])
    _S_PROTECTION_RUN(obj, relay[2])
    _S_SWITCHES(obj, relay[3])
    _S_STARTED_AT(obj, times[0])
    _S_LAST_STEP_AT(obj, times[1])
    _S_LAST_SETPOINT(obj, times[2])
    _S_RECOVERING(obj, times[3])
    _S_TEMPERATURE(obj, temperature[0])
    _S_GOOD_AT(obj, temperature[1])
    _S_GOOD_SINCE(obj, temperature[2])
    _S_NORMAL(obj, temperature[3])
    _S_FAIL_SAFE(obj, fail_safe[0])
    _S_FAIL_SAFE_SINCE(obj, fail_safe[1])
    _S_FAIL_SAFE_DUTY(obj, fail_safe[2])
    _S_FAIL_SAFE_REASON(obj, fail_safe[3])
    _S_DUTY_BUCKETS(obj, duty[0])
    _S_DUTY_CURRENT(obj, duty[1])
    _S_POINTS(obj, points[0])
    _S_BACKUP(obj, points[1])
    _S_SMOOTHED_C(obj, points[2])
    return obj


def with_cooling(state: ZoneState, cooling: CoolingState) -> DualZoneState:
    """``state``'s fields and the cooling part, as a :class:`DualZoneState`."""
    obj = _new(DualZoneState)
    for get, put in _STATE_COPY:
        put(obj, get(state))
    _S_COOLING(obj, cooling)
    return obj


def outputs_with_cooling(outputs: ZoneOutputs, cooling: CoolingOutputs) -> DualZoneOutputs:
    """``outputs``' fields and the cooling part, as :class:`DualZoneOutputs`."""
    obj = _new(DualZoneOutputs)
    for get, put in _OUTPUTS_COPY:
        put(obj, get(outputs))
    _O_COOLING(obj, cooling)
    return obj


# ZoneOutputs' groups
DecisionFields = tuple[bool, Reason]
"""(demand, reason)"""
ShownFields = tuple[float | None, float, str, str, float, float]
"""(temperature, setpoint, level, mode, anticipator_k, droop_k)"""
FailSafeShown = tuple[bool, str | None, str | None]
"""(fail_safe, fail_safe_policy, fail_safe_reason)"""
Figures = tuple[float, int]
"""(on_fraction_1h, cycles_1h)"""


def zone_outputs(
    decision: DecisionFields,
    shown: ShownFields,
    reliability: dict[str, Reliability],
    fail_safe: FailSafeShown,
    figures: Figures,
) -> ZoneOutputs:
    """A :class:`ZoneOutputs` from its groups, each in field order."""
    obj = _new(ZoneOutputs)
    _O_DEMAND(obj, decision[0])
    _O_REASON(obj, decision[1])
    _O_TEMPERATURE(obj, shown[0])
    _O_SETPOINT(obj, shown[1])
    _O_LEVEL(obj, shown[2])
    _O_MODE(obj, shown[3])
    _O_ANTICIPATOR_K(obj, shown[4])
    _O_DROOP_K(obj, shown[5])
    _O_RELIABILITY(obj, reliability)
    _O_FAIL_SAFE(obj, fail_safe[0])
    _O_FAIL_SAFE_POLICY(obj, fail_safe[1])
    _O_FAIL_SAFE_REASON(obj, fail_safe[2])
    _O_ON_FRACTION_1H(obj, figures[0])
    _O_CYCLES_1H(obj, figures[1])
    return obj
