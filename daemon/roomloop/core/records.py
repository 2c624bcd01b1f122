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
from .state import PointState, ZoneState
from .types import Reason, Reliability, ZoneOutputs

Setter = Callable[[object, Any], None]


def slot_setters(cls: type) -> tuple[Setter, ...]:
    """The ``__set__`` of each field's slot descriptor, in field order."""
    if not hasattr(cls, "__slots__") or not hasattr(cls, "__dataclass_fields__"):
        raise TypeError(f"{cls.__name__} is not a slotted dataclass")
    return tuple(getattr(cls, f.name).__set__ for f in fields(cls))


_new = object.__new__
_POINT = slot_setters(PointState)
_STATE = slot_setters(ZoneState)
_OUTPUTS = slot_setters(ZoneOutputs)


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
    (s_name, s_reliability, s_verdict, s_value, s_value_at, s_seen_at, s_still_value,
     s_still_on_s, s_good_since, s_faulted) = _POINT
    obj = _new(PointState)
    s_name(obj, name)
    s_reliability(obj, judgement[0])
    s_verdict(obj, judgement[1])
    s_value(obj, accepted[0])
    s_value_at(obj, accepted[1])
    s_seen_at(obj, accepted[2])
    s_still_value(obj, stillness[0])
    s_still_on_s(obj, stillness[1])
    s_good_since(obj, trust[0])
    s_faulted(obj, trust[1])
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
    (s_mode, s_hold_setpoint, s_hold_level, s_hold_until, s_level_override, s_scheduled_level,
     s_anticipator_k, s_droop_k, s_tau_scale, s_cycle_clean, s_relay_on, s_switched_at,
     s_protection_run, s_switches, s_started_at, s_last_step_at, s_last_setpoint, s_recovering,
     s_temperature, s_good_at, s_good_since, s_normal, s_fail_safe, s_fail_safe_since,
     s_fail_safe_duty, s_fail_safe_reason, s_duty_buckets, s_duty_current, s_points, s_backup,
     s_smoothed_c) = _STATE
    obj = _new(ZoneState)
    s_mode(obj, commands[0])
    s_hold_setpoint(obj, commands[1])
    s_hold_level(obj, commands[2])
    s_hold_until(obj, commands[3])
    s_level_override(obj, commands[4])
    s_scheduled_level(obj, commands[5])
    s_anticipator_k(obj, terms[0])
    s_droop_k(obj, terms[1])
    s_tau_scale(obj, terms[2])
    s_cycle_clean(obj, terms[3])
    s_relay_on(obj, relay[0])
    s_switched_at(obj, relay[1])
    s_protection_run(obj, relay[2])
    s_switches(obj, relay[3])
    s_started_at(obj, times[0])
    s_last_step_at(obj, times[1])
    s_last_setpoint(obj, times[2])
    s_recovering(obj, times[3])
    s_temperature(obj, temperature[0])
    s_good_at(obj, temperature[1])
    s_good_since(obj, temperature[2])
    s_normal(obj, temperature[3])
    s_fail_safe(obj, fail_safe[0])
    s_fail_safe_since(obj, fail_safe[1])
    s_fail_safe_duty(obj, fail_safe[2])
    s_fail_safe_reason(obj, fail_safe[3])
    s_duty_buckets(obj, duty[0])
    s_duty_current(obj, duty[1])
    s_points(obj, points[0])
    s_backup(obj, points[1])
    s_smoothed_c(obj, points[2])
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
    (s_demand, s_reason, s_temperature, s_setpoint, s_level, s_mode, s_anticipator_k, s_droop_k,
     s_reliability, s_fail_safe, s_fail_safe_policy, s_fail_safe_reason, s_on_fraction_1h,
     s_cycles_1h) = _OUTPUTS
    obj = _new(ZoneOutputs)
    s_demand(obj, decision[0])
    s_reason(obj, decision[1])
    s_temperature(obj, shown[0])
    s_setpoint(obj, shown[1])
    s_level(obj, shown[2])
    s_mode(obj, shown[3])
    s_anticipator_k(obj, shown[4])
    s_droop_k(obj, shown[5])
    s_reliability(obj, reliability)
    s_fail_safe(obj, fail_safe[0])
    s_fail_safe_policy(obj, fail_safe[1])
    s_fail_safe_reason(obj, fail_safe[2])
    s_on_fraction_1h(obj, figures[0])
    s_cycles_1h(obj, figures[1])
    return obj
