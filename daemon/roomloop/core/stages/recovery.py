"""Recovery from a set-point change: the relay runs until the room reaches the band.

A recovery starts with a set-point change (and at start-up and when leaving
fail-safe) when ``T`` is outside the band: ``+1`` up to a raised set point, ``-1``
down to a lowered one. It ends when ``T`` first enters the band, or when the relay
first switches by itself (the first ``cut-out`` after a rise, the first ``cut-in``
after a drop): from then on the relay cycles normally. Meanwhile the relay switches
on ``T`` itself, the droop term is frozen (:mod:`.droop`) and regulation waits
(:mod:`.regulation`), so the long run of a recovery stays out of both.
"""

from __future__ import annotations

from ..state import ZoneState
from ..types import Reason


def track(
    half_k: float, state: ZoneState, setpoint: float, temperature: float | None, restart: bool
) -> tuple[int, float | None]:
    """(recovering, the band's edge ``T`` crossed if a recovery ended on it, else None).

    ``restart``: judge afresh whatever the set point (on leaving fail-safe). The
    switching temperature restarts at that edge (:func:`.smoothing.from_edge`).
    """
    recovering = state.recovering
    last_setpoint = state.last_setpoint
    if last_setpoint is None or setpoint != last_setpoint or restart:
        return started(half_k, last_setpoint, setpoint, temperature, state.temperature), None
    if recovering == 0 or temperature is None:
        return recovering, None
    if recovering > 0 and temperature >= setpoint - half_k:
        return 0, setpoint - half_k
    if recovering < 0 and temperature <= setpoint + half_k:
        return 0, setpoint + half_k
    return recovering, None


def started(
    half_k: float,
    last_setpoint: float | None,
    setpoint: float,
    temperature: float | None,
    last_temperature: float | None,
) -> int:
    """The recovery a (new) set point starts, judged on ``T`` (or the last trusted one)."""
    ref = temperature if temperature is not None else last_temperature
    if ref is None:
        return 1 if last_setpoint is None or setpoint > last_setpoint else -1
    if ref < setpoint - half_k:
        return 1
    if ref > setpoint + half_k:
        return -1
    return 0


def ended_by_switch(recovering: int, reason: Reason) -> int:
    """The relay switched by itself: a recovery in that direction is over."""
    if (recovering > 0 and reason == "cut-out") or (recovering < 0 and reason == "cut-in"):
        return 0
    return recovering
