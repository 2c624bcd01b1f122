"""Short-cycle protection: minimum on and off times and a cap on switch-ons per sliding hour.

It holds the relay where it is (``min-on``, ``min-off``, ``max-cycles``) when a rule
that allows it (:mod:`.relay`) wants a switch too soon; the cycle limit counts the
switch-ons in ``(now - 3600, now]``. The switch log it counts from keeps the last
hour's switchings, bounded.
"""

from __future__ import annotations

from typing import Protocol

from ..types import Reason

HOUR_S = 3600.0
MAX_SWITCH_LOG = 128
"""Bound of the switch log (the last hour's switchings; 60 cycles at most are allowed)."""

Switches = tuple[tuple[float, bool], ...]


class Timing(Protocol):
    """A call's short-cycle limits (the zone's heating settings, or its cooling settings)."""

    @property
    def min_on_s(self) -> float: ...
    @property
    def min_off_s(self) -> float: ...
    @property
    def max_cycles_per_hour(self) -> int: ...


class CallRecord(Protocol):
    """What a call's state keeps of its relay (the zone's state, or its cooling state)."""

    @property
    def relay_on(self) -> bool: ...
    @property
    def switched_at(self) -> float | None: ...
    @property
    def switches(self) -> Switches: ...


def hold(
    s: Timing, state: CallRecord, want: bool, reason: Reason, now: float
) -> tuple[bool, bool, Reason]:
    """(relay, held by short-cycle protection, reason) for a wish to switch a call's relay:
    the heating call's or the cooling call's, each with its own limits."""
    if want == state.relay_on:
        return want, False, reason
    since = HOUR_S * 1e6 if state.switched_at is None else now - state.switched_at
    if want:
        if since < s.min_off_s:
            return False, True, "min-off"
        if ons_since(state.switches, now - HOUR_S) >= s.max_cycles_per_hour:
            return False, True, "max-cycles"
    elif since < s.min_on_s:
        return True, True, "min-on"
    return want, False, reason


def ons_since(switches: Switches, horizon: float) -> int:
    """Switch-ons strictly after ``horizon``."""
    count = 0
    for t_switch, switched_on in reversed(switches):
        if t_switch <= horizon:
            break
        if switched_on:
            count += 1
    return count


def logged(switches: Switches, now: float, relay_on: bool) -> Switches:
    """The switch log with a switching at ``now``, the part older than an hour dropped."""
    horizon = now - HOUR_S
    if switches and switches[0][0] <= horizon:
        switches = tuple(sw for sw in switches if sw[0] > horizon)
    switches = (*switches, (now, relay_on))
    if len(switches) > MAX_SWITCH_LOG:
        switches = switches[-MAX_SWITCH_LOG:]
    return switches
