"""The cooling call and the changeover between heating and cooling (zones with a cooling call).

**The cooling anticipator.** The classic thermostat's cooling anticipator is a fixed
resistor that heats the element while the cooling is *off*, so the cooling starts earlier
(REFERENCES.md [trade]: common practice, no source). Its term ``h`` rises toward ``G`` while
cooling is off and decays while on. Its mirror ``c = G - h`` obeys the heating
anticipator's first-order law unchanged (:mod:`.anticipator`): it rises toward ``G`` with
``tau`` while the cooling runs and decays toward 0 while it rests, and ``T + h`` and
``T - c`` differ by the constant ``G`` only, so both switch at the same instants once the
droop term has taken up that constant. roomloop uses ``c``: the call switches on when
``Ts - c + b >= Sc + D/2`` and off when ``Ts - c + b <= Sc - D/2``. After a long rest ``c``
is 0, so a zone that has not cooled for hours does not start cooling ``G`` below its
cooling set point (with ``h`` it would, which in ``auto`` eats the dead band). The relay
cycle is the heating one with the sign of the temperature reversed, so the sizing formula
is the same: at 50 % on-time on = off = ``tau ln((G + D)/(G - D))``, and the cooling type's
``tau`` comes from its cycle rate by :func:`roomloop.config.presets.time_constant_for_cycle_rate`.
Such a derived ``tau`` is regulated as the heating one is (:mod:`.regulation`, the cooling
call's own scale in :class:`~roomloop.core.state.CoolingState`), so the plant really cycles at
the cooling cycle rate.

``Ts`` is the zone's switching temperature (:mod:`.smoothing`), shared with the heating call;
a zone that only cools smooths it over the cooling call's own cycle period
(:class:`~.constants.LawConstants`).

**Droop compensation.** ``b`` integrates ``(T - Sc) dt / droop_time_s``, clamped to
``[0, G]``, and so converges to the anticipator's mean ``G x duty``, by the heating call's
functions with the error's sign reversed (:mod:`.droop`), so the same rules hold: a fresh
call starts ``c`` and ``b`` together at ``G x`` the zone's fail-safe duty (they cancel in
the switching temperature, and the room does not sit ``G x duty`` above ``Sc`` while ``b``
integrates up from 0); ``b`` integrates at half rate while the call is saturated on (it has
run for longer than a whole cooling cycle period while the room is still above ``Sc``); it
is frozen while recovering from a set-point change, in fail-safe, while the temperature is
missing, in mode ``off``, during an overheat run, while short-cycle protection holds the
call and while the changeover locks it; while resting after a set-up (a raised cooling set
point) it fades with the anticipator.

**Changeover.** ``heat``, ``cool`` or ``auto`` (commands set it). The zone is set up for one
call at a time, its *side*: ``heat`` or ``cool`` when the changeover says so, in ``auto``
``cool`` once the temperature reaches the cooling band's lower edge ``Sc - Dc/2`` and
``heat`` again once it falls to the heating band's upper edge ``Sh + Dh/2`` (the dead band,
at least 3 K (ASHRAE Standard 90.1), keeps the two apart). Below the protection set point
the side is ``heat`` and above the overheat limit ``cool`` whatever the changeover. In
``auto`` the cooling set point is kept at least the dead band above the heating one. A call
may start only on its side, only when the other call has been off for ``changeover_s`` and,
with a changeover output, only when that output has sat in the side's position for
``hold_s``; the changeover output switches only while both calls are off. The heating call
is locked by the ``changeover`` rule of :data:`.relay.RELAY_PRECEDENCE`, the cooling call by
the same rule here, so the two are never on together.

**Cooling precedence** (highest first): changeover lock (off at once); overheat limit (on;
short-cycle protection still holds it off: a compressor's minimum off time is never cut
short); mode ``off`` (off at once); fail-safe (off: the safe state of cooling); no
temperature yet (off); the band. Short-cycle protection: the cooling type's ``min_on_s``,
``min_off_s`` and ``max_cycles_per_hour`` (starts per sliding hour).
"""

from __future__ import annotations

from ..settings import CoolingSettings
from ..state import CoolingState
from ..types import CallName, Reason
from .droop import start_k
from .short_cycle import logged

_COASTING: dict[str, Reason] = {
    "cut-in": "last-temperature:cut-in",
    "cut-out": "last-temperature:cut-out",
    "on-to-cut-out": "last-temperature:on-to-cut-out",
    "off-to-cut-in": "last-temperature:off-to-cut-in",
}


def initial(cs: CoolingSettings, duty: float) -> CoolingState:
    """A fresh cooling part: call off, the configured changeover, the anticipator and the
    droop term at ``G x duty`` (``duty``: the zone's fail-safe duty, :func:`.droop.start_k`)."""
    side = first_side(cs, cs.initial_changeover)
    k = start_k(cs, duty)
    return CoolingState(
        changeover=cs.initial_changeover,
        hold_setpoint=None,
        side=side,
        valve=None,
        valve_at=None,
        relay_on=False,
        switched_at=None,
        switches=(),
        anticipator_k=k,
        droop_k=k,
        tau_scale=1.0,
        cycle_clean=False,
        last_setpoint=None,
        recovering=0,
        overheat_run=False,
    )


def first_side(cs: CoolingSettings, changeover: str) -> CallName:
    """The side a changeover starts from while the temperature is unknown."""
    if not cs.heating or changeover == "cool":
        return "cool"
    return "heat"


def side(  # noqa: PLR0911, PLR0917 - one return per rule of the side, in order
    cs: CoolingSettings,
    c: CoolingState,
    temperature: float | None,
    heat_setpoint: float | None,
    cool_setpoint: float | None,
    heat_half_k: float,
    protection_c: float,
) -> CallName:
    """The call the zone is set up for this tick, judged on the last trusted temperature and
    the set points of the last tick."""
    heat_ok = cs.heating and c.changeover != "cool"
    cool_ok = c.changeover != "heat"
    if temperature is not None:
        if cs.heating and temperature < protection_c:
            return "heat"
        if cs.overheat_c is not None and temperature > cs.overheat_c:
            return "cool"
    if not heat_ok:
        return "cool"
    if not cool_ok:
        return "heat"
    if temperature is None:
        return "heat" if c.side == "heat" else "cool"
    half = cs.differential_k / 2.0
    if c.side == "heat":
        if cool_setpoint is not None and temperature >= cool_setpoint - half:
            return "cool"
        return "heat"
    if heat_setpoint is not None and temperature <= heat_setpoint + heat_half_k:
        return "heat"
    return "cool"


def valve(
    cs: CoolingSettings, c: CoolingState, to: CallName, calls_off: bool, now: float
) -> tuple[bool | None, float | None]:
    """The changeover output's position (True: cooling) and when it last moved: it moves to
    the side ``to`` only while both calls are off."""
    if not cs.changeover_output:
        return None, None
    wanted = to == "cool"
    if c.valve == wanted or not calls_off:
        return c.valve, c.valve_at
    return wanted, now


def ready(
    cs: CoolingSettings, position: bool | None, moved_at: float | None, to: CallName, now: float
) -> bool:
    """The changeover output has sat in ``to``'s position for ``hold_s`` (always, without one)."""
    if not cs.changeover_output:
        return True
    return position == (to == "cool") and moved_at is not None and now - moved_at >= cs.hold_s


def lock(  # noqa: PLR0917 - the facts the lock is judged on
    cs: CoolingSettings,
    to: CallName,
    call: CallName,
    other_on: bool,
    other_switched_at: float | None,
    position: bool | None,
    moved_at: float | None,
    now: float,
) -> Reason | None:
    """Why ``call`` may not run this tick (None: it may): the zone is set up for the other side
    (``changeover``), or the other call ran within ``changeover_s`` or the changeover output is
    not yet held in place (``changeover-time``)."""
    if to != call:
        return "changeover"
    if other_on or (
        other_switched_at is not None and now - other_switched_at < cs.changeover_s
    ):
        return "changeover-time"
    if not ready(cs, position, moved_at, call, now):
        return "changeover-time"
    return None


def setpoint(
    cs: CoolingSettings,
    c: CoolingState,
    mode: str,
    level: str,
    heat_setpoint: float,
    *,
    limits: tuple[float, float],
) -> float | None:
    """The cooling set point in force (None: no cooling wanted), clamped to the limits (the
    overheat limit is not), at least the dead band above the heating set point in ``auto``."""
    low, high = limits
    held = c.hold_setpoint if mode == "hold" else None
    if mode == "off" or (held is None and level == "protection"):
        value = cs.overheat_c
        if value is None:
            return None
    else:
        configured = cs.setpoint_for(level) if held is None else held
        if configured is None:
            return None
        value = min(max(configured, low), high)
    if c.changeover == "auto" and cs.heating and value < heat_setpoint + cs.dead_band_k:
        value = heat_setpoint + cs.dead_band_k
    return value


def recovery(
    half_k: float,
    c: CoolingState,
    sp: float | None,
    temperature: float | None,
    last_temperature: float | None,
) -> int:
    """The cooling recovery: +1 pulling down into the band after a new or lowered cooling set
    point, -1 resting up to a raised one; it ends when ``T`` enters the band."""
    if sp is None:
        return 0
    if c.last_setpoint is None or sp != c.last_setpoint:
        ref = temperature if temperature is not None else last_temperature
        if ref is None:
            return 0
        return 1 if ref > sp + half_k else -1 if ref < sp - half_k else 0
    recovering = c.recovering
    if temperature is not None and (
        (recovering > 0 and temperature <= sp + half_k)
        or (recovering < 0 and temperature >= sp - half_k)
    ):
        return 0
    return recovering


def overheat(
    cs: CoolingSettings, c: CoolingState, temperature: float | None
) -> bool:
    """Above the overheat limit the call runs, and the run lasts down to ``limit - D/2``."""
    limit = cs.overheat_c
    if limit is None or temperature is None:
        return False
    return temperature > limit or (
        c.relay_on and c.overheat_run and temperature > limit - cs.differential_k / 2.0
    )


def band(
    sensed: float, sp: float, half_k: float, relay_on: bool, coasting: bool
) -> tuple[bool, Reason]:
    """The cooling band on ``sensed = Ts - c + b``: on at ``Sc + D/2``, off at ``Sc - D/2``."""
    if relay_on:
        if sensed <= sp - half_k:
            return False, _COASTING["cut-out"] if coasting else "cut-out"
        return True, _COASTING["on-to-cut-out"] if coasting else "on-to-cut-out"
    if sensed >= sp + half_k:
        return True, _COASTING["cut-in"] if coasting else "cut-in"
    return False, _COASTING["off-to-cut-in"] if coasting else "off-to-cut-in"


__all__ = [
    "band",
    "first_side",
    "initial",
    "lock",
    "logged",
    "overheat",
    "ready",
    "recovery",
    "setpoint",
    "side",
    "valve",
]
