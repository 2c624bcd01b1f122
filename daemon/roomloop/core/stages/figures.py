"""The published figures of the last hour: switch-ons and the relay's on-time fraction."""

from __future__ import annotations

from .short_cycle import HOUR_S, Switches


def last_hour(
    switches: Switches, relay_on: bool, started_at: float, now: float
) -> tuple[float, int]:
    """(on-time fraction, switch-ons) over the last hour, or since the start if shorter."""
    window_start = now - HOUR_S
    if started_at > window_start:  # noqa: PLR1730 - a branch is cheaper than max() here
        window_start = started_at
    cycles = 0
    on_time = 0.0
    relay = relay_on
    t_end = now
    for t_switch, switched_on in reversed(switches):
        if t_switch <= window_start:
            break
        if relay:
            on_time += t_end - t_switch
        if switched_on:
            cycles += 1
        relay = not switched_on
        t_end = t_switch
    if relay:
        on_time += t_end - window_start
    span = now - window_start
    return (on_time / span if span > 0.0 else (1.0 if relay_on else 0.0)), cycles
