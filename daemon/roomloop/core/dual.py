"""The controller of a zone with a cooling call: the heating law, a cooling call, the changeover.

:class:`DualZoneController` is what :class:`~roomloop.core.controller.ZoneController` builds
for settings with ``cooling`` (a heating-only zone keeps the plain heating step, unchanged).
Each tick, sans-IO:

1. the side (the call the zone is set up for) from the last trusted temperature and last
   tick's set points, and the changeover output, which moves only while both calls are off
   (:mod:`.stages.cooling`);
2. the heating step of :class:`ZoneController`, locked off by the changeover rule unless
   the zone is on the heating side, the cooling call has been off for ``changeover_s`` and
   the changeover output has been held in the heating position for ``hold_s``;
3. the cooling call on the same temperature, level and mode, with the mirror lock (the
   heating call's state *after* this tick's step), so the two are never on together; its
   anticipator, droop term and cycle-rate regulation by the heating call's stages
   (:mod:`.stages.anticipator`, :mod:`.stages.droop`, :mod:`.stages.regulation`) on the
   cooling call's own tuning and state.
"""

from __future__ import annotations

from .controller import ZoneController
from .records import outputs_with_cooling, with_cooling
from .settings import CoolingSettings, ZoneSettings
from .stages import anticipator, cooling, droop, figures, regulation, switching
from .stages.constants import CoolingLaw
from .stages.short_cycle import MAX_SWITCH_LOG, logged
from .stages.short_cycle import hold as short_cycle_hold
from .state import CoolingState, ZoneState, with_cooling_state
from .types import CallName, CoolingOutputs, Reason, ZoneInputs, ZoneOutputs

__all__ = ["DualZoneController"]


class DualZoneController(ZoneController):
    """Heating and cooling calls of one zone with changeover (conforms to ``types.Controller``)."""

    __slots__ = ("_cooling", "_cooling_law")

    def __init__(self, settings: ZoneSettings) -> None:
        super().__init__(settings)
        assert settings.cooling is not None
        self._cooling: CoolingSettings = settings.cooling
        self._cooling_law = CoolingLaw.of(settings, settings.cooling)

    def _fresh(self) -> CoolingState:
        """A fresh cooling part (its terms at ``G x`` the zone's fail-safe duty)."""
        return cooling.initial(self._cooling, self.settings.fail_safe_duty)

    # ------------------------------------------------------------------ state

    def initial_state(self, now: float) -> ZoneState:
        state = super().initial_state(now)
        return _replace_cooling(state, self._fresh())

    def resume(
        self,
        state: ZoneState,
        now: float,
        relay_on: bool | None = None,
        *,
        safe_on: bool = False,
        cooling_on: bool | None = None,
    ) -> ZoneState:
        """:meth:`ZoneController.resume`, and the cooling call: ``cooling_on`` is the cooling
        output as read at the restart (None: unknown, the safe state off is written); a call
        found other than saved counts as switched now, so its minimum times run from the
        restart; the anticipator follows the call over the gap."""
        resumed = super().resume(state, now, relay_on, safe_on=safe_on)
        cs = self._cooling
        c = state.cooling if state.cooling is not None else self._fresh()
        if c.changeover not in _allowed(cs):
            c = self._fresh()
        on = False if cooling_on is None else cooling_on
        gap = max(0.0, now - state.last_step_at)
        tau_scale = regulation.clamped(c.tau_scale) if self._cooling_law.regulate else 1.0
        a, _ = anticipator.advance(
            c.anticipator_k, cs.anticipator_gain_k,
            cs.anticipator_time_constant_s * tau_scale, on, gap,
        )
        switches = tuple(sw for sw in c.switches if sw[0] <= now)
        switched_at = None if c.switched_at is None else min(c.switched_at, now)
        if on != c.relay_on:
            switched_at = now
            switches = (*switches, (now, on))[-MAX_SWITCH_LOG:]
        elif cooling_on is None:
            switched_at = now
        return _replace_cooling(
            resumed,
            CoolingState(
                changeover=c.changeover,
                hold_setpoint=c.hold_setpoint,
                side=c.side,
                valve=c.valve if cs.changeover_output else None,
                valve_at=None if c.valve_at is None else min(c.valve_at, now),
                relay_on=on,
                switched_at=switched_at,
                switches=switches,
                anticipator_k=min(max(a, 0.0), cs.anticipator_gain_k),
                droop_k=min(max(c.droop_k, 0.0), cs.anticipator_gain_k)
                if cs.droop_compensation
                else 0.0,
                tau_scale=tau_scale,
                cycle_clean=False,
                last_setpoint=c.last_setpoint,
                recovering=c.recovering,
                overheat_run=False,
            ),
        )

    # ------------------------------------------------------------------ step

    def step(
        self, state: ZoneState, inputs: ZoneInputs, now: float, lock: Reason | None = None
    ) -> tuple[ZoneState, ZoneOutputs]:
        """One tick of both calls; ``lock`` (from outside) keeps the heating call off too."""
        cs = self._cooling
        k = self._law
        c = state.cooling if state.cooling is not None else self._fresh()
        dt = max(0.0, now - state.last_step_at)

        # 1. the side and the changeover output (both calls as the last tick left them)
        to: CallName = cooling.side(
            cs, c, state.temperature, state.last_setpoint, c.last_setpoint, k.half_k,
            k.protection_c,
        )
        position, moved_at = cooling.valve(
            cs, c, to, not state.relay_on and not c.relay_on, now
        )

        # 2. the heating call, locked unless the zone is set up for heating
        heat_lock = cooling.lock(
            cs, to, "heat", c.relay_on, c.switched_at, position, moved_at, now
        )
        if not cs.heating:
            heat_lock = "changeover"
        h_state, h_out = ZoneController.step(
            self, state, inputs, now, heat_lock if heat_lock is not None else lock
        )

        # 3. the cooling call
        heat_on = h_state.relay_on
        temperature = h_out.temperature
        last_temperature = h_state.temperature
        sp = cooling.setpoint(
            cs, c, h_state.mode, h_out.level, h_out.setpoint,
            limits=(self.settings.limit_min_c, self.settings.limit_max_c),
        )
        half = cs.differential_k / 2.0
        a, decay = anticipator.advance(
            c.anticipator_k, cs.anticipator_gain_k, cs.anticipator_time_constant_s * c.tau_scale,
            c.relay_on, dt,
        )
        recovering = cooling.recovery(half, c, sp, temperature, last_temperature)
        b = droop.faded(c.droop_k, recovering, c.relay_on, decay)
        cool_lock = cooling.lock(
            cs, to, "cool", heat_on,
            None if heat_on else _heat_off_at(state, h_state), position, moved_at, now,
        )
        forced = cooling.overheat(cs, c, temperature)
        mode_off = h_state.mode == "off"
        held = False
        want, reason = _cooling_wish(
            cs, c, h_state, h_out, (cool_lock, forced, sp), recovering, a - b
        )
        on = want
        # A start always waits for the minimum off time and the starts per hour (a compressor's
        # protection is never cut short); a stop by the lock or mode off is at once.
        if want != c.relay_on and (want or (cool_lock is None and not mode_off)):
            on, held, reason = short_cycle_hold(cs, c, want, reason, now)
        # ordinary control: what regulation and droop may learn from
        ordinary = (
            temperature is not None and sp is not None and not h_out.fail_safe and not held
            and not forced and not mode_off and cool_lock is None
        )
        cycling = ordinary and recovering == 0
        kc = self._cooling_law
        tau_scale, cycle_clean = c.tau_scale, c.cycle_clean and cycling
        switched_at, switches = c.switched_at, c.switches
        if on != c.relay_on:
            if on:
                tau_scale, cycle_clean = regulation.at_switch_on(
                    kc, c, now, ordinary=cycling, reason=reason, level=h_out.level
                )
            switched_at, switches = now, logged(switches, now, on)
            if (recovering > 0 and reason == "cut-out") or (recovering < 0 and reason == "cut-in"):
                recovering = 0
        if ordinary and recovering == 0 and temperature is not None and sp is not None:
            saturated = on and switched_at is not None and now - switched_at > kc.target_period_s
            b = droop.integrated(cs, b, temperature - sp, dt, saturated=saturated)
        new_c = CoolingState(
            changeover=c.changeover,
            hold_setpoint=c.hold_setpoint,
            side=to,
            valve=position,
            valve_at=moved_at,
            relay_on=on,
            switched_at=switched_at,
            switches=switches,
            anticipator_k=a,
            droop_k=b,
            tau_scale=tau_scale,
            cycle_clean=cycle_clean,
            last_setpoint=sp,
            recovering=recovering,
            overheat_run=on and forced,
        )
        on_fraction, cycles = figures.last_hour(switches, on, state.started_at, now)
        call: CallName | None = "heat" if heat_on else "cool" if on else None
        shown = CoolingOutputs(
            demand=on,
            reason=reason,
            setpoint=sp,
            changeover=c.changeover,
            side=to,
            call=call,
            changeover_output=None
            if position is None
            else position == cs.energised_in_cooling,
            anticipator_k=a,
            droop_k=b,
            on_fraction_1h=on_fraction,
            cycles_1h=cycles,
        )
        return with_cooling(h_state, new_c), outputs_with_cooling(h_out, shown)


def _cooling_wish(  # noqa: PLR0917 - the tick's facts
    cs: CoolingSettings,
    c: CoolingState,
    h_state: ZoneState,
    h_out: ZoneOutputs,
    rules: tuple[Reason | None, bool, float | None],
    recovering: int,
    net_k: float,
) -> tuple[bool, Reason]:
    """The cooling call's wish by its precedence (see :mod:`.stages.cooling`); ``rules`` is
    (the lock, an overheat run, the cooling set point), ``net_k`` the anticipator less droop."""
    cool_lock, forced, sp = rules
    last_temperature = h_state.temperature
    if cool_lock is not None:
        return False, cool_lock
    if forced:
        return True, "overheat"
    if h_state.mode == "off" or sp is None:  # (no cooling set point: the protection level)
        return False, "mode-off"
    if h_out.fail_safe:
        return False, "fail-safe:off"
    if last_temperature is None:
        return False, "no-temperature"
    basis = switching.basis(last_temperature, h_state.smoothed_c, recovering, cs.differential_k)
    return cooling.band(
        basis - net_k, sp, cs.differential_k / 2.0, c.relay_on, h_out.temperature is None
    )


def _heat_off_at(before: ZoneState, after: ZoneState) -> float | None:
    """When the heating call last ended (None: never ran since the start)."""
    if after.relay_on:
        return None
    return after.switched_at if after.switched_at is not None else before.switched_at


def _allowed(cs: CoolingSettings) -> tuple[str, ...]:
    return ("heat", "cool", "auto") if cs.heating else ("cool",)


def _replace_cooling(state: ZoneState, c: CoolingState) -> ZoneState:
    return with_cooling_state(state, c)
