"""Droop compensation ``b``: removes the steady offset the anticipator causes under load.

A fresh zone starts ``b`` (and the anticipator) at ``G x`` the fail-safe duty, so the room
does not sag under the set point while ``b`` integrates up from zero (:func:`start_k`);
while the relay is saturated on, ``b`` integrates at half rate (anti-windup,
:func:`integrated`). The cooling call (:mod:`.cooling`) uses the same functions with its
own tuning and the error's sign reversed.

The anticipator's mean over a steady cycle is ``G x duty``, so without ``b`` the room
would settle about that much below ``S`` (REFERENCES.md [derived]). ``b`` integrates
``(S - T) dt / droop_time_s`` (the raw ``T``: the same mean, and no smoothing lag
winding it up after a recovery), clamped to ``[0, G]``, and converges to that bias.
Anti-windup: ``b`` is frozen while recovering from a set-point change, in fail-safe,
while coasting, in mode ``off``, during protection and while short-cycle protection
holds the relay. While the relay rests after a set-back, ``b`` fades with the
anticipator: ``b`` cancels the anticipator's mean, and after a long rest that mean is
gone; a stale ``b`` from the old set point would overshoot the next recovery.
"""

from __future__ import annotations

from typing import Protocol


class DroopTuning(Protocol):
    """A call's droop and anticipator tuning (the zone's heating settings, or its cooling
    settings): what the droop term of either call is started and integrated with."""

    @property
    def droop_compensation(self) -> bool: ...
    @property
    def droop_time_s(self) -> float: ...
    @property
    def anticipator_gain_k(self) -> float: ...


def start_k(s: DroopTuning, duty: float) -> float:
    """The anticipator and the droop term of a fresh call: ``G x duty`` (``duty``: the
    zone's fail-safe duty, the on-fraction assumed before anything is learned), 0 without
    droop compensation. The two cancel in the switching temperature; ``b`` then does not
    have to integrate up from 0 for hours while the room sags ``G x duty`` off the set
    point."""
    return s.anticipator_gain_k * duty if s.droop_compensation else 0.0


def faded(droop_k: float, recovering: int, relay_on: bool, decay: float) -> float:
    """``b`` at the start of the tick: fading with the anticipator while resting after a
    set-back (``decay`` is the anticipator's over the elapsed tick)."""
    if recovering < 0 and not relay_on:
        return droop_k * decay
    return droop_k


SATURATED_RATE = 0.5
"""The fraction of its rate at which ``b`` integrates while the relay is saturated on."""


def integrated(
    s: DroopTuning,
    droop_k: float,
    error_k: float,
    dt: float,
    *,
    saturated: bool = False,
) -> float:
    """``b`` after an ordinary tick of ``dt`` seconds, clamped to ``[0, G]``.

    ``error_k``: how far the room is short of the set point on the call's side, ``S - T``
    for the heating call and ``T - Sc`` for the cooling call (:mod:`.cooling`), whose ``b``
    follows the same law with the sign reversed.

    ``saturated``: the relay has been on for longer than a whole cycle. A saturated relay
    cannot give more heat (or cooling), so while the room is still short of the set point
    ``b`` integrates
    at only ``SATURATED_RATE`` of its rate (a softened conditional integration, the usual
    anti-windup of a PI controller: K. J. Astrom, T. Hagglund, "Advanced PID Control", ISA
    2006, its chapter on windup [recalled from memory]): after a load step that a slow
    emitter answers only hours later (a thick slab at full output) a full-rate ``b`` winds
    up towards ``G`` and overshoots once the room arrives; a frozen one is too low when the
    relay starts cycling again. The factor 0.5 is from a sweep (0, 0.25, 0.35, 0.5, 0.65,
    1) on the underfloor and thick-slab plants (tests/bench/control_quality.py) [no source].
    """
    if not s.droop_compensation or dt <= 0.0:
        return droop_k
    error = error_k
    if saturated and error > 0.0:
        error *= SATURATED_RATE
    b = droop_k + error * dt / s.droop_time_s
    if b < 0.0:
        return 0.0
    if b > s.anticipator_gain_k:
        return s.anticipator_gain_k
    return b
