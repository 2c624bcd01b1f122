"""Droop compensation ``b``: removes the steady offset the anticipator causes under load.

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

from ..settings import ZoneSettings


def faded(droop_k: float, recovering: int, relay_on: bool, decay: float) -> float:
    """``b`` at the start of the tick: fading with the anticipator while resting after a
    set-back (``decay`` is the anticipator's over the elapsed tick)."""
    if recovering < 0 and not relay_on:
        return droop_k * decay
    return droop_k


def integrated(
    s: ZoneSettings, droop_k: float, setpoint: float, temperature: float, dt: float
) -> float:
    """``b`` after an ordinary tick of ``dt`` seconds at ``T``, clamped to ``[0, G]``."""
    if not s.droop_compensation or dt <= 0.0:
        return droop_k
    b = droop_k + (setpoint - temperature) * dt / s.droop_time_s
    if b < 0.0:
        return 0.0
    if b > s.anticipator_gain_k:
        return s.anticipator_gain_k
    return b
