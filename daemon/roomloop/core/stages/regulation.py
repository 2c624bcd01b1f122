"""Cycle-rate regulation: the anticipator's time constant adapted so the plant cycles at the rate.

The sizing formula (:mod:`roomloop.core.sizing`) assumes a room that stands still, but
a real room moves with each burst of heat (shorter cycles) and lags behind it (longer
cycles). After every ordinary cycle (no recovery, protection, fail-safe or
short-cycle hold in it) the time constant is scaled by
``(3600 / cycle_rate / period) ** 0.2`` within [0.5, 2], so the plant settles at the
configured cycle rate whatever its on-fraction; the floor of 0.5 keeps the
anticipator from racing at very low on-fractions. On when the time constant was
derived from the cycle rate (``cycle_rate_regulation``) and ``G > D``. The cooling call
(:mod:`.cooling`) is regulated the same way with its own cycle rate, time constant and scale.

Two guards keep the cycle limit a backstop: regulation adapts only at the zone's
default level (a set-back runs at a low on-fraction, and a time constant shortened
there races the relay into the limit when the comfort level returns), and it never
shortens the time constant after a switch-on that brings the sliding hour to
``cycle_rate + 1`` switch-ons.
"""

from __future__ import annotations

from typing import Protocol

from ..types import Reason
from .short_cycle import HOUR_S, Switches, ons_since

MIN_TAU_SCALE = 0.5
MAX_TAU_SCALE = 2.0
REGULATION_EXPONENT = 0.2
GUARD_CPH = 1.0


class RegulationLaw(Protocol):
    """A call's regulation constants (the zone's :class:`~.constants.LawConstants` for the
    heating call, :class:`~.constants.CoolingLaw` for the cooling call)."""

    @property
    def regulate(self) -> bool: ...
    @property
    def target_period_s(self) -> float: ...
    @property
    def guard_ons(self) -> float: ...
    @property
    def default_level(self) -> str: ...


class RegulatedCall(Protocol):
    """What a call's state keeps for regulation (the zone's state, or its cooling state)."""

    @property
    def tau_scale(self) -> float: ...
    @property
    def cycle_clean(self) -> bool: ...
    @property
    def switches(self) -> Switches: ...


def clamped(scale: float) -> float:
    """A scale (a restored one, say) within [MIN_TAU_SCALE, MAX_TAU_SCALE]."""
    return min(max(scale, MIN_TAU_SCALE), MAX_TAU_SCALE)


def at_switch_on(
    k: RegulationLaw,
    state: RegulatedCall,
    now: float,
    *,
    ordinary: bool,
    reason: Reason,
    level: str,
) -> tuple[float, bool]:
    """(time-constant scale, the new cycle is ordinary so far) at a switch-on at ``now``.

    ``ordinary``: this tick was ordinary control (no recovery, protection, fail-safe or
    short-cycle hold). A cycle runs from one band switch-on (``cut-in``) to the next; one
    that was ordinary throughout, at the zone's default level, adjusts the scale. ``state``
    is the call's state before this switch-on (the heating call's or the cooling call's).
    """
    cut_in = reason == "cut-in"
    switches = state.switches
    if (
        cut_in
        and ordinary
        and state.cycle_clean
        and k.regulate
        and level == k.default_level
        and len(switches) >= 2
        and not switches[-1][1]
        and switches[-2][1]
    ):
        scale = regulated(
            k, state.tau_scale, now - switches[-2][0], ons_since(switches, now - HOUR_S) + 1
        )
        return scale, True
    return state.tau_scale, ordinary and cut_in


def regulated(k: RegulationLaw, scale: float, period: float, ons_in_hour: int = 0) -> float:
    """The scale after one ordinary cycle of ``period`` seconds (on to on).

    Scaled by ``(target period / measured period) ** 0.2`` per cycle (a gentle integral
    action in log scale), within [MIN_TAU_SCALE, MAX_TAU_SCALE]; not shortened once
    ``ons_in_hour`` (this switch-on included) reaches ``cycle_rate + 1``.
    """
    if period <= 0.0:
        return scale
    factor = (k.target_period_s / period) ** REGULATION_EXPONENT
    if factor < 1.0 and ons_in_hour >= k.guard_ons:
        return scale
    scale *= factor
    return min(max(scale, MIN_TAU_SCALE), MAX_TAU_SCALE)
