"""The band's proportional gain ``P``: the switching temperature ``Ts + a - b + P (Ts - S)``.

Sources: the anticipator's first-order charge and discharge, ``a(t) = G + (a0 - G) e^(-t/tau)``
on and ``a0 e^(-t/tau)`` off, give the closed-form on and off times of the oscillation
between two levels of ``a`` [textbook result, derived]; the levels themselves follow from
the band (roomloop/core/stages/switching.py). Everything else is the controller's own design.
"""

from __future__ import annotations

import math
from dataclasses import replace

import pytest

from roomloop.core import ZoneController
from roomloop.core.settings import SettingsError

from .helpers import FAST_POINT, run, sample, settings, switch_times

S = 20.0


def _zone(p: float) -> ZoneController:
    """A forced-air zone (G 2.5 K, D 0.5 K) switching on the raw reading, nothing learned."""
    return ZoneController(
        settings(
            inputs=(FAST_POINT,),
            droop_compensation=False,
            cycle_rate_regulation=False,
            smoothing_s=0.0,
            min_on_s=0.0,
            min_off_s=0.0,
            max_cycles_per_hour=60,
            proportional_gain=p,
        )
    )


def test_the_offset_counts_one_plus_p_times() -> None:
    # 0.2 K under the set point, inside the band of 0.25 K: a plain band waits, P = 1 calls
    for p, wanted in ((0.0, False), (1.0, True)):
        zone = _zone(p)
        state = zone.initial_state(0.0)
        state, out = zone.step(state, sample(S - 0.2, 10.0), 10.0)
        state, out = zone.step(state, sample(S - 0.2, 20.0), 20.0)
        assert out.demand is wanted, p
    # above the set point, with the relay on: a plain band runs on, P = 1 cuts out
    for p, wanted in ((0.0, True), (1.0, False)):
        zone = _zone(p)
        state = replace(zone.initial_state(0.0), relay_on=True, switched_at=0.0, last_setpoint=S)
        _, out = zone.step(state, sample(S + 0.2, 10.0), 10.0)
        assert out.demand is wanted, (p, out.reason)


@pytest.mark.parametrize("p", [0.0, 0.5, 1.0, 2.0])
def test_cycle_on_a_steady_room_matches_the_closed_form(p: float) -> None:
    """A room held 0.3 K under the set point: ``a`` swings between ``(1 + P) e -/+ D/2``.

    On: ``a`` rises from ``lo`` to ``hi``: ``tau ln((G - lo) / (G - hi))``; off: it decays
    from ``hi`` to ``lo``: ``tau ln(hi / lo)`` [derived]."""
    zone = _zone(p)
    s = zone.settings
    e = 0.3
    lo = (1.0 + p) * e - s.differential_k / 2.0
    hi = (1.0 + p) * e + s.differential_k / 2.0
    tau = s.anticipator_time_constant_s
    g = s.anticipator_gain_k
    on_s = tau * math.log((g - lo) / (g - hi))
    off_s = tau * math.log(hi / lo)
    trace = run(zone, lambda now, on: S - e, end=4 * 3600.0, tick=1.0)
    ons, offs = switch_times(trace, True), switch_times(trace, False)
    # skip the first two cycles (a starts at 0, below lo, and the start is a recovery)
    runs = [off - on for on, off in zip(ons[2:], offs[2:], strict=False) if off > on]
    rests = [on - off for off, on in zip(offs[2:], ons[3:], strict=False) if on > off]
    assert len(runs) >= 3 and len(rests) >= 3
    # within 4 ticks: the switch falls on a tick at each end, and ``a`` passes each level by
    # up to one tick's change, which moves the other edge by about a tick more
    for measured in runs:
        assert measured == pytest.approx(on_s, abs=4.0)
    for measured in rests:
        assert measured == pytest.approx(off_s, abs=4.0)
    # the on-fraction rises with P: the mean of ``a`` over a cycle is G x duty [derived], and
    # it lies between lo and hi, so the duty is about (1 + P) e / G
    duty = sum(runs) / (sum(runs) + sum(rests[: len(runs)]))
    assert lo / g < duty < hi / g


def test_recovery_ignores_p() -> None:
    # a recovery to a raised set point, the room still 0.5 K under it and the anticipator at
    # 0.9 K: T + a = S + 0.4 >= S + D/2, the anticipator cuts the run out (and so ends the
    # recovery). Applied, P = 2 would take 2 x 0.5 K off and keep the relay on.
    for p in (0.0, 2.0):
        zone = _zone(p)
        state = replace(
            zone.initial_state(0.0), relay_on=True, switched_at=0.0, last_setpoint=S,
            recovering=1, anticipator_k=0.9,
        )
        _, out = zone.step(state, sample(S - 0.5, 10.0), 10.0)
        assert out.demand is False and out.reason == "cut-out", (p, out.reason)


def test_a_negative_or_unknown_number_is_refused() -> None:
    for bad in (-0.1, math.nan, math.inf):
        with pytest.raises(SettingsError, match="proportional_gain"):
            settings(proportional_gain=bad)
