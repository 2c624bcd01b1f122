"""What a zone's settings imply for every step, computed once per controller."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

from ..settings import CoolingSettings, ZoneSettings
from ..types import Reason
from .regulation import GUARD_CPH
from .setpoint import level_setpoints
from .short_cycle import HOUR_S


def smoothing_time_s(s: ZoneSettings) -> float:
    """The time constant of the switching temperature's smoothing (0: none), see :mod:`.smoothing`.

    Only where the anticipator cycles the relay by itself (``G > D``): a plain hysteresis (or
    a weak anticipator) needs the room's own ripple to switch. Left out (``smoothing_s``
    None) it is ``smoothing_periods`` heating cycle periods; a zone that only cools smooths
    over its cooling call's own period, and a zone with both calls over one heating period
    (they share the switching temperature, and the heating type's longer smoothing was
    chosen on heating plants alone).
    """
    cooling = s.cooling
    if cooling is not None and not cooling.heating and s.smoothing_s is None:
        strong = cooling.anticipator_gain_k > cooling.differential_k
        return HOUR_S / cooling.cycle_rate_cph if strong else 0.0
    if s.anticipator_gain_k <= s.differential_k:
        return 0.0
    if s.smoothing_s is not None:
        return s.smoothing_s
    return HOUR_S / s.cycle_rate_cph * (s.smoothing_periods if cooling is None else 1.0)


@dataclass(frozen=True, slots=True)
class LawConstants:
    """Per-settings constants of the control law (a frozen record, read on every tick)."""

    half_k: float
    """Half the differential: the band is ``S -/+ half_k``."""
    gain_k: float
    time_constant_s: float
    """The anticipator's configured time constant (before cycle-rate regulation)."""
    smoothing_s: float
    """Time constant of the switching temperature's smoothing; 0: none (see :mod:`.smoothing`)."""
    max_lag_k: float
    """How far the smoothed temperature may lag the reading (the differential)."""
    proportional: float
    """The proportional gain ``P`` of the band (see :mod:`.switching`); 0: none."""
    regulate: bool
    """Cycle-rate regulation is on (see :mod:`.regulation`)."""
    target_period_s: float
    guard_ons: float
    """Switch-ons in the sliding hour at which regulation stops shortening the time constant."""
    learn_s: float
    protection_c: float
    protection_in_off: bool
    default_level: str
    level_setpoints: Mapping[str, float]
    """Each level's set point, clamped to the zone's limits."""
    fail_safe_reason: Reason
    """The reason published while fail-safe drives the relay (``fail-safe:<policy>``)."""

    @classmethod
    def of(cls, s: ZoneSettings) -> LawConstants:
        strong = s.anticipator_gain_k > s.differential_k
        target_period = HOUR_S / s.cycle_rate_cph
        reasons: dict[str, Reason] = {
            "off": "fail-safe:off",
            "fixed-duty": "fail-safe:fixed-duty",
            "learned-duty": "fail-safe:learned-duty",
        }
        return cls(
            half_k=s.differential_k / 2.0,
            gain_k=s.anticipator_gain_k,
            time_constant_s=s.anticipator_time_constant_s,
            smoothing_s=smoothing_time_s(s),
            max_lag_k=s.differential_k,
            proportional=s.proportional_gain,
            regulate=s.cycle_rate_regulation and strong,
            target_period_s=target_period,
            guard_ons=s.cycle_rate_cph + GUARD_CPH,
            learn_s=s.learn_hours * HOUR_S,
            protection_c=s.protection_c,
            protection_in_off=s.protection_in_off,
            default_level=s.default_level,
            level_setpoints=level_setpoints(s),
            fail_safe_reason=reasons[s.fail_safe_policy],
        )


@dataclass(frozen=True, slots=True)
class CoolingLaw:
    """Per-settings constants of the cooling call (a zone with a cooling call only)."""

    regulate: bool
    """Cycle-rate regulation of the cooling anticipator is on (see :mod:`.regulation`)."""
    target_period_s: float
    """The cooling cycle period ``3600 / cycle_rate_cph``; a call on for longer is saturated
    (see :mod:`.droop`)."""
    guard_ons: float
    """Switch-ons in the sliding hour at which regulation stops shortening the time constant."""
    default_level: str
    """The zone's default level (regulation adapts only there)."""

    @classmethod
    def of(cls, s: ZoneSettings, cs: CoolingSettings) -> CoolingLaw:
        return cls(
            regulate=cs.cycle_rate_regulation and cs.anticipator_gain_k > cs.differential_k,
            target_period_s=HOUR_S / cs.cycle_rate_cph,
            guard_ons=cs.cycle_rate_cph + GUARD_CPH,
            default_level=s.default_level,
        )
