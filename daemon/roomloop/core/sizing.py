"""Cycle-rate sizing: how gain, differential and time constant set the cycle.

Model (DESIGN.md "Cycle-rate sizing"; REFERENCES.md [derived]): with the room
temperature steady at ``T = S - c``, the relay switches on when the anticipator
``a`` falls to ``c - D/2`` and off when it rises to ``c + D/2``. ``a`` rises
toward ``G`` and decays toward 0 with time constant ``tau``, so

    on  = tau ln((G - c + D/2) / (G - c - D/2))
    off = tau ln((c + D/2) / (c - D/2))

for ``D/2 < c < G - D/2``. At 50 % on-time ``c = G/2`` and on = off =
``tau ln((G + D)/(G - D))``, the formula behind the heating-type presets
(:func:`time_constant_for_cycle_rate`). At any other on-fraction the band offset
``c`` is found by bisection (the on-fraction grows monotonically with ``c``).
"""

from __future__ import annotations

import math

__all__ = [
    "band_offset_for_on_fraction",
    "cycles_per_hour",
    "on_off_times",
    "on_off_times_at_offset",
    "time_constant_for_cycle_rate",
]


def time_constant_for_cycle_rate(
    cycle_rate_cph: float, gain_k: float, differential_k: float
) -> float:
    """Anticipator time constant (s) giving ``cycle_rate_cph`` at 50 % on-time.

    The presets' own function (:func:`roomloop.config.presets.time_constant_for_cycle_rate`),
    imported on first use so that importing the core does not import pydantic.
    """
    from roomloop.config.presets import time_constant_for_cycle_rate as presets_formula

    return presets_formula(cycle_rate_cph, gain_k, differential_k)


def _check(gain_k: float, differential_k: float, time_constant_s: float) -> None:
    if not differential_k > 0:
        raise ValueError("the differential must be positive")
    if not gain_k > differential_k:
        raise ValueError(
            f"anticipator gain {gain_k:g} K must exceed the differential {differential_k:g} K "
            "for the anticipator alone to cycle the relay"
        )
    if not time_constant_s > 0:
        raise ValueError("the time constant must be positive")


def on_off_times_at_offset(
    gain_k: float, differential_k: float, time_constant_s: float, offset_k: float
) -> tuple[float, float]:
    """On and off times (s) with the room held at ``S - offset_k``."""
    _check(gain_k, differential_k, time_constant_s)
    half = differential_k / 2.0
    if not half < offset_k < gain_k - half:
        raise ValueError(
            f"offset {offset_k:g} K is outside ({half:g}, {gain_k - half:g}) K: "
            "the relay would not cycle"
        )
    on = time_constant_s * math.log((gain_k - offset_k + half) / (gain_k - offset_k - half))
    off = time_constant_s * math.log((offset_k + half) / (offset_k - half))
    return on, off


def band_offset_for_on_fraction(
    gain_k: float, differential_k: float, time_constant_s: float, on_fraction: float
) -> float:
    """The steady offset ``c = S - T`` at which the relay runs at ``on_fraction`` (the droop)."""
    _check(gain_k, differential_k, time_constant_s)
    if not 0.0 < on_fraction < 1.0:
        raise ValueError("the on-fraction must lie strictly between 0 and 1")
    half = differential_k / 2.0
    low, high = half, gain_k - half
    for _ in range(200):
        mid = 0.5 * (low + high)
        if mid in (low, high):
            break
        on, off = on_off_times_at_offset(gain_k, differential_k, time_constant_s, mid)
        if on / (on + off) < on_fraction:
            low = mid
        else:
            high = mid
    return 0.5 * (low + high)


def on_off_times(
    gain_k: float, differential_k: float, time_constant_s: float, on_fraction: float
) -> tuple[float, float]:
    """On and off times (s) of the anticipator's relay cycle at ``on_fraction``."""
    if on_fraction == 0.5:
        _check(gain_k, differential_k, time_constant_s)
        t = time_constant_s * math.log((gain_k + differential_k) / (gain_k - differential_k))
        return t, t
    offset = band_offset_for_on_fraction(gain_k, differential_k, time_constant_s, on_fraction)
    return on_off_times_at_offset(gain_k, differential_k, time_constant_s, offset)


def cycles_per_hour(
    gain_k: float, differential_k: float, time_constant_s: float, on_fraction: float = 0.5
) -> float:
    """Cycles per hour for a gain, differential and time constant at ``on_fraction``.

    The inverse of :func:`time_constant_for_cycle_rate` at 50 %:
    ``cycles_per_hour(G, D, time_constant_for_cycle_rate(n, G, D)) == n``.
    """
    on, off = on_off_times(gain_k, differential_k, time_constant_s, on_fraction)
    return 3600.0 / (on + off)
