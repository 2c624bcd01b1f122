"""The switching temperature ``Ts``: the zone temperature smoothed over a cycle or more.

Why: the anticipator stands in for the room's response within a cycle; the room's
own ripple, seen through a lagging sensor with 0.1 K steps, only jitters the
switching points (one run ends a quantisation step early, the next one late), and
uneven runs widen the room's swing at the same cycle rate. With ``T`` averaged over
a cycle or more the relay runs an even on-fraction cycle after cycle (the
anticipator then works as a pulse-width modulator driven by ``S - Ts + b``), and the
sensor's noise dithers its steps into a finer average.

How: exponential smoothing with time constant ``smoothing_s`` (default the heating type's
number of cycle periods of ``3600 / cycle_rate_cph``: 3 on air heat and radiators, whose
rooms ripple most within a cycle, 4 on steam, 1 on screeds and electric heaters; see
:mod:`roomloop.config.presets`), solved exactly for a temperature linear between
two readings, so the tick length does not matter; only when ``G > D`` (a plain
hysteresis needs the room's ripple to switch at all). It restarts from ``T`` at
start-up and during a recovery (which switches on ``T`` itself), and from the band's
edge when a recovery ends. The band (:mod:`.switching`) keeps ``Ts`` within ``D`` of
``T``: a real departure from the band is no ripple and passes at once. A limit:
after a large real departure (a window opened) ``Ts`` catches up over about
``smoothing_s`` and the relay switches up to ``D`` away from the reading meanwhile.
"""

from __future__ import annotations

from math import exp

from ..state import ZoneState


def smooth(
    smoothing_s: float, state: ZoneState, temperature: float | None, dt: float
) -> float | None:
    """``Ts`` after this tick's reading (kept as it was while there is none)."""
    smoothed = state.smoothed_c
    if temperature is None:
        return smoothed
    if smoothed is None or smoothing_s <= 0.0 or state.recovering != 0:
        return temperature
    if dt <= 0.0:
        return smoothed
    decay = exp(-dt / smoothing_s)
    previous = state.temperature
    if previous is not None and state.good_at == state.last_step_at:
        # exact for a temperature linear between the two readings
        ramp = (smoothing_s / dt) * (1.0 - decay)
        return temperature + (smoothed - previous) * decay - (temperature - previous) * ramp
    return smoothed + (temperature - smoothed) * (1.0 - decay)


def from_edge(
    smoothing_s: float, state: ZoneState, temperature: float, edge: float, dt: float
) -> float:
    """``Ts`` restarted where ``T`` crossed into the band, advanced to now.

    A recovery ends when ``T`` enters the band; the smoothing starts there, at the band's
    edge, at the moment of the crossing (``T`` taken linear between the two readings), so
    the result does not depend on the tick length. Without a usable previous reading it
    starts from ``T``.
    """
    previous = state.temperature if state.good_at == state.last_step_at else None
    if previous is None or dt <= 0.0 or temperature == previous:
        return temperature
    fraction = (edge - previous) / (temperature - previous)
    if not 0.0 <= fraction <= 1.0:
        return temperature
    since = (1.0 - fraction) * dt
    if since <= 0.0:
        return temperature
    decay = exp(-since / smoothing_s)
    return temperature - (temperature - edge) * (smoothing_s / since) * (1.0 - decay)
