"""The switching band: on at ``Ts + a - b <= S - D/2``, off at ``Ts + a - b >= S + D/2``.

``Ts`` is the switching temperature (:mod:`.smoothing`), kept within ``D`` of the
reading; while recovering from a set-point change the band switches on ``T`` itself.

A zone with a proportional gain ``P > 0`` (the underfloor default) switches on
``Ts + a - b + P (Ts - S)`` outside a recovery: the room's own offset counts ``1 + P``
times. Averaged over a cycle the anticipator law sets the on-fraction to about
``(S - T + b) / G``, a proportional band of ``G`` kelvin; a slow emitter (a screed, a
thick slab) needs a narrower one, ``G / (1 + P)``, or a load change waits hours for the
droop term to catch up and then overshoots (tests/bench/control_quality.py, thick-slab).
It is the proportional action of a PI controller (K. J. Astrom, T. Hagglund, "Advanced
PID Control", ISA 2006 [recalled from memory]); the anticipator still sets the cycle.
In between the edges the relay stays where it is (``on-to-cut-out``,
``off-to-cut-in``). While readings are missing (before fail-safe starts) the band runs
on the last trusted temperature and its reasons read ``last-temperature:<reason>``.
"""

from __future__ import annotations

from ..types import BandReason, Reason

_COASTING: dict[BandReason, Reason] = {
    "cut-in": "last-temperature:cut-in",
    "cut-out": "last-temperature:cut-out",
    "on-to-cut-out": "last-temperature:on-to-cut-out",
    "off-to-cut-in": "last-temperature:off-to-cut-in",
}


def basis(
    temperature: float, smoothed: float | None, recovering: int, max_lag_k: float
) -> float:
    """The temperature the band compares: ``Ts``, never more than ``D`` from the reading."""
    if smoothed is None or recovering != 0:
        return temperature
    if -max_lag_k <= smoothed - temperature <= max_lag_k:
        return smoothed
    return temperature + max_lag_k if smoothed > temperature else temperature - max_lag_k


def band(
    sensed: float, setpoint: float, half_k: float, relay_on: bool
) -> tuple[bool, BandReason]:
    """(relay wanted, why) for the anticipated temperature ``sensed = Ts + a - b`` (plus
    ``P (Ts - S)`` with a proportional gain, outside a recovery)."""
    if relay_on:
        if sensed >= setpoint + half_k:
            return False, "cut-out"
        return True, "on-to-cut-out"
    if sensed <= setpoint - half_k:
        return True, "cut-in"
    return False, "off-to-cut-in"


def wish(
    sensed: float, setpoint: float, half_k: float, relay_on: bool, coasting: bool
) -> tuple[bool, Reason]:
    """The band's wish; ``coasting``: ``sensed`` comes from the last trusted reading."""
    if relay_on:
        if sensed >= setpoint + half_k:
            return False, _COASTING["cut-out"] if coasting else "cut-out"
        return True, _COASTING["on-to-cut-out"] if coasting else "on-to-cut-out"
    if sensed <= setpoint - half_k:
        return True, _COASTING["cut-in"] if coasting else "cut-in"
    return False, _COASTING["off-to-cut-in"] if coasting else "off-to-cut-in"
