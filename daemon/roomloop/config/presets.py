"""Heating-type presets: the tuning defaults a zone gets for its kind of plant.

This module imports nothing of roomloop: :mod:`roomloop.config.models` reads the presets
(``resolve_tuning``) and this module never reads the models, so there is no import cycle.

Sources (../shared/REFERENCES.md):
- cycle rates: forced-air gas/oil 5-6, hot water / radiant 3, steam or gravity 1,
  electric 9 cycles per hour [trade, common practice, no single source];
- differential about 0.5 K [trade, common practice, no source];
- minimum on/off times are common practice, no source: they keep a burner or pump
  from short runs without eating much of the cycle;
- the maximum cycles per hour is the cycle rate + 1, a backstop above the rate the
  anticipator is sized and regulated for [common practice, no source];
- the anticipator gain and the droop time have no outside source: the gain is a few
  times the differential so that the anticipator, not the room's slow response, sets
  the cycle (it also sets how hard the relay's on-fraction answers a deviation: about
  100 % per (G - D) kelvin), and the droop time is how fast the droop term follows a
  change of load. Both were picked by a sweep on the heating type's built-in plant
  (gains 1-6 K, droop times 40 min-3 h; tests/bench/control_quality.py, seeds 1-3,
  lowest worst-phase control accuracy, then lowest recovery overshoot), as the
  baselines' PI tuning was (roomloop/plant/baselines.py). Steam has no built-in
  plant: it keeps the plain choices (gain 1.5 K, droop time 3 h).

The anticipator time constant is derived from the cycle rate with the formula of
../shared/DESIGN.md ("Cycle-rate sizing"): at 50 % on-time the relay oscillates
with on-time = off-time = tau ln((G + D) / (G - D)), hence
tau = 3600 / (2 cph ln((G + D) / (G - D))).
"""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass(frozen=True)
class Preset:
    cycle_rate_cph: float
    differential_k: float
    anticipator_gain_k: float
    min_on_s: float
    min_off_s: float
    max_cycles_per_hour: int
    droop_time_s: float
    proportional_gain: float = 0.0
    """How much the room's own offset from the set point adds to the switching temperature
    (heating only; see :mod:`roomloop.core.stages.switching`)."""
    smoothing_periods: float = 1.0
    """The switching temperature's smoothing when ``smoothing_s`` is left out, in cycle
    periods, in a zone that only heats (a zone that also cools smooths over one heating
    period; one that only cools over its cooling period: see
    :func:`roomloop.core.stages.constants.smoothing_time_s`)."""


PRESETS: dict[str, Preset] = {
    # A fast air heater: 5 cph (gas/oil forced air 5-6 [trade]); gain 2.5 K and droop
    # time 1 h from the sweep on the forced-air plant [no source]. Smoothing over 3 cycle
    # periods: a light room swings by most of a kelvin within each cycle, and one period
    # let a share of that ripple into the switching temperature, which beat with the
    # anticipator into runs that lengthened and shortened over an hour or so (the sweep of
    # 1-4 periods, tests/bench/control_quality.py, seeds 1-3: oversized-air high-load CA
    # 1.23 -> 1.05 K, forced-air 0.43 -> 0.43 K, recovery overshoot 0.46 -> 0.44 K) [no source].
    "forced-air": Preset(5.0, 0.5, 2.5, 120.0, 120.0, 6, 3600.0, smoothing_periods=3.0),
    # Panel radiators on a boiler: 3 cph (hot water [trade]); gain 2.5 K and droop time
    # 1 h from the sweep on the hydronic plant [no source]; smoothing over 3 periods from the
    # same sweep as forced air's (CA 0.117 -> 0.114 K, overshoot 0.11 -> 0.08 K) [no source].
    "hydronic": Preset(3.0, 0.5, 2.5, 180.0, 180.0, 4, 3600.0, smoothing_periods=3.0),
    # Radiant floor: 3 cph (radiant [trade]); longer minimum times for the slow loop.
    # Gain 1.5 K (a higher gain lets the slow screed drift) and droop time 3 h (a few
    # hours, like the screed's own time constant) from the sweep on the underfloor plant
    # [no source]. Proportional gain 1: the room's offset counts twice in the switching
    # temperature, so a slow emitter answers a load change at once instead of waiting
    # for the droop term (a sweep of 0-2 on the underfloor and thick-slab plants,
    # tests/bench/control_quality.py, seeds 1-3: thick slab high-load CA 0.33 -> 0.25 K,
    # underfloor 0.045 -> 0.074 K, flat between 0.5 and 2) [no source].
    "underfloor": Preset(3.0, 0.5, 1.5, 300.0, 300.0, 4, 10800.0, 1.0),
    # Convector or panel heater: 9 cph (electric [trade]); gain 2.5 K and droop time 1 h
    # from the sweep on the electric plant [no source].
    "electric": Preset(9.0, 0.5, 2.5, 60.0, 60.0, 10, 3600.0),
    # Steam or gravity: 1 cph [trade]; a steam boiler needs long runs. Smoothing over 4
    # periods from the sweep of 1-4 on the steam plant (high-load CA 1.15 -> 0.90 K) [no source];
    # the underfloor and electric plants did best with one period (slower emitters: a longer
    # smoothing lags their load changes; 9 cph: the ripple is small).
    "steam": Preset(1.0, 0.5, 1.5, 600.0, 600.0, 2, 10800.0, smoothing_periods=4.0),
}

COOLING_PRESETS: dict[str, Preset] = {
    # A compressor (split system, packaged unit, heat pump in cooling): 3 cph and at most
    # 4 starts an hour (3-4 starts per hour for small compressors, REFERENCES.md [trade]:
    # common practice, no source); minimum off 5 min (compressor anti-short-cycle of at least
    # 3-5 min off between starts [trade]: common practice, no source) so the refrigerant
    # pressures equalise before a restart; minimum on 3 min (oil return: recalled from
    # memory). Differential 0.5 K as in heating [common practice, no source]; gain 1.5 K and
    # droop time 1 h as the plain heating choices [no source; not swept on a cooling plant].
    "direct-expansion": Preset(3.0, 0.5, 1.5, 180.0, 300.0, 4, 3600.0),
    # Fan coils and chilled ceilings on a chilled-water loop: a valve (or fan) switches, not
    # a compressor: 4 cph, 2 min on and off, at most 6 starts an hour [common practice, no
    # source]; gain and droop time as for direct expansion [no source].
    "chilled-water": Preset(4.0, 0.5, 1.5, 120.0, 120.0, 6, 3600.0),
}
"""Cooling-type presets: the cooling call's tuning defaults (same keys and checks as heating)."""

COMPRESSOR_MIN_OFF_S = 180.0
"""The least minimum off time a ``direct-expansion`` call may be given: a compressor needs
at least 3-5 min off between starts (REFERENCES.md [trade]: common practice, no source)."""

PRESET_KEYS = (
    "cycle_rate_cph",
    "differential_k",
    "anticipator_gain_k",
    "min_on_s",
    "min_off_s",
    "max_cycles_per_hour",
    "droop_time_s",
)


def time_constant_for_cycle_rate(
    cycle_rate_cph: float, gain_k: float, differential_k: float
) -> float:
    """Anticipator time constant (s) that gives ``cycle_rate_cph`` at 50 % on-time.

    DESIGN.md: tau = 3600 / (2 cph ln((G + D) / (G - D))). Needs G > D: with a gain at
    or below the differential the anticipator alone can never switch the relay.
    """
    if cycle_rate_cph <= 0:
        raise ValueError("cycle rate must be positive")
    if gain_k <= differential_k:
        raise ValueError(
            f"anticipator gain {gain_k:g} K must exceed the differential {differential_k:g} K "
            "to derive a time constant from the cycle rate"
        )
    return 3600.0 / (
        2.0 * cycle_rate_cph * math.log((gain_k + differential_k) / (gain_k - differential_k))
    )
