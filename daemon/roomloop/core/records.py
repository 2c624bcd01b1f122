"""Constructors for the frozen records the step builds on every tick, cheaper than ``__init__``.

A frozen dataclass's generated ``__init__`` must store each field through
``object.__setattr__`` (the class refuses plain assignment); the zone state has 31
fields and is replaced on every tick of every zone. Each record here has a *draft*: a
plain class with the very same slots, whose ``__init__`` stores the fields with plain
assignment and then makes the object the frozen record (``__class__`` assignment,
which Python allows between classes of the same slot layout and checks). The result
is the same object one built by ``__init__`` would be (tests/core/test_state.py).
The constructors take the fields in the groups the stages produce them in (a keyword
per field would cost as much as ``__init__``), each group a tuple in field order.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import fields
from typing import Any, cast

from .failsafe import Bucket
from .state import CoolingState, DualZoneState, PointState, ZoneState
from .types import CoolingOutputs, DualZoneOutputs, Reason, Reliability, ZoneOutputs

Setter = Callable[[object, Any], None]


def slot_setters(cls: type) -> tuple[Setter, ...]:
    """The ``__set__`` of each field's slot descriptor, in field order."""
    if not hasattr(cls, "__slots__") or not hasattr(cls, "__dataclass_fields__"):
        raise TypeError(f"{cls.__name__} is not a slotted dataclass")
    return tuple(getattr(cls, f.name).__set__ for f in fields(cls))


def _slots_of(cls: type) -> tuple[str, ...]:
    """A record's slots, for its draft: the field names in order (what ``__class__``
    assignment compares)."""
    slots = tuple(getattr(cls, "__slots__", ()))
    if slots != tuple(f.name for f in fields(cls)):
        raise TypeError(f"{cls.__name__}'s slots are not its fields in order")
    return slots


_new = object.__new__
_STATE_COPY = tuple(
    (getattr(ZoneState, f.name).__get__, setter)
    for f, setter in zip(fields(ZoneState), slot_setters(ZoneState), strict=True)
)
_S_COOLING = slot_setters(DualZoneState)[-1]
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


class _PointStateDraft:
    """A :class:`PointState` being built (see the module docstring)."""

    __slots__ = _slots_of(PointState)

    def __init__(
        self, name: str, judgement: Judgement, accepted: Accepted, stillness: Stillness,
        trust: Trust,
    ) -> None:
        self.name = name
        self.reliability, self.verdict = judgement
        self.value, self.value_at, self.seen_at = accepted
        self.still_value, self.still_on_s = stillness
        self.good_since, self.faulted = trust
        self.__class__ = PointState  # type: ignore[assignment]


point_state = cast(
    "Callable[[str, Judgement, Accepted, Stillness, Trust], PointState]", _PointStateDraft
)
"""A :class:`PointState` from its field groups."""


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


class _ZoneStateDraft:
    """A :class:`ZoneState` being built (see the module docstring)."""

    __slots__ = _slots_of(ZoneState)

    def __init__(  # noqa: PLR0917 - one argument per section of the record
        self,
        commands: CommandFields,
        terms: TermFields,
        relay: RelayFields,
        times: TimeFields,
        temperature: TemperatureFields,
        fail_safe: FailSafeFields,
        duty: DutyFields,
        points: PointFields,
    ) -> None:
        (self.mode, self.hold_setpoint, self.hold_level, self.hold_until, self.level_override,
         self.scheduled_level) = commands
        self.anticipator_k, self.droop_k, self.tau_scale, self.cycle_clean = terms
        self.relay_on, self.switched_at, self.protection_run, self.switches = relay
        self.started_at, self.last_step_at, self.last_setpoint, self.recovering = times
        self.temperature, self.good_at, self.good_since, self.normal = temperature
        (self.fail_safe, self.fail_safe_since, self.fail_safe_duty,
         self.fail_safe_reason) = fail_safe
        self.duty_buckets, self.duty_current = duty
        self.points, self.backup, self.smoothed_c = points
        self.__class__ = ZoneState  # type: ignore[assignment]


zone_state = cast(
    "Callable[[CommandFields, TermFields, RelayFields, TimeFields, TemperatureFields, "
    "FailSafeFields, DutyFields, PointFields], ZoneState]",
    _ZoneStateDraft,
)
"""A :class:`ZoneState` from its sections, each in field order."""


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


class _ZoneOutputsDraft:
    """A :class:`ZoneOutputs` being built (see the module docstring)."""

    __slots__ = _slots_of(ZoneOutputs)

    def __init__(
        self,
        decision: DecisionFields,
        shown: ShownFields,
        reliability: dict[str, Reliability],
        fail_safe: FailSafeShown,
        figures: Figures,
    ) -> None:
        self.demand, self.reason = decision
        (self.temperature, self.setpoint, self.level, self.mode, self.anticipator_k,
         self.droop_k) = shown
        self.reliability = reliability
        self.fail_safe, self.fail_safe_policy, self.fail_safe_reason = fail_safe
        self.on_fraction_1h, self.cycles_1h = figures
        self.__class__ = ZoneOutputs  # type: ignore[assignment]


zone_outputs = cast(
    "Callable[[DecisionFields, ShownFields, dict[str, Reliability], FailSafeShown, Figures], "
    "ZoneOutputs]",
    _ZoneOutputsDraft,
)
"""A :class:`ZoneOutputs` from its groups, each in field order."""
