"""The zone controller: one sans-IO step per tick, the control law of DESIGN.md as stages.

:meth:`ZoneController.step` takes the previous :class:`ZoneState`, the tick's
:class:`ZoneInputs` and the time, and returns the next state and the
:class:`ZoneOutputs`. It reads no clock and does no I/O; the same code runs in the
service, the plant simulator and the demo. The step composes the stages of
:mod:`roomloop.core.stages` (one module per rule, each a pure function) in their
order; the relay's precedence is one table (:mod:`roomloop.core.stages.relay`), and
every output carries the rule that decided the relay (:data:`~roomloop.core.types.Reason`).
"""

from __future__ import annotations

import math

from .failsafe import BUCKET_S as _BUCKET_S
from .records import zone_outputs, zone_state
from .settings import ZoneSettings
from .stages import (
    anticipator,
    droop,
    expiry,
    failsafe,
    figures,
    points,
    protection,
    recovery,
    regulation,
    relay,
    setpoint,
    short_cycle,
    smoothing,
    switching,
)
from .stages.constants import LawConstants
from .stages.regulation import MAX_TAU_SCALE, MIN_TAU_SCALE
from .stages.short_cycle import MAX_SWITCH_LOG
from .state import PointState, ZoneState
from .types import Reason, ZoneInputs, ZoneOutputs

__all__ = ["MAX_SWITCH_LOG", "MAX_TAU_SCALE", "MIN_TAU_SCALE", "ZoneController"]


class ZoneController:
    """Our anticipating on/off controller for one zone (conforms to ``types.Controller``)."""

    __slots__ = ("_law", "_regulate", "settings")

    def __new__(cls, settings: ZoneSettings) -> ZoneController:
        """A zone with a cooling call gets the :class:`DualZoneController`."""
        if cls is ZoneController and settings.cooling is not None:
            from .dual import DualZoneController

            return object.__new__(DualZoneController)
        return object.__new__(cls)

    def __init__(self, settings: ZoneSettings) -> None:
        self.settings = settings
        self._law = LawConstants.of(settings)
        self._regulate = self._law.regulate

    # ------------------------------------------------------------------ state

    def initial_state(self, now: float) -> ZoneState:
        """A fresh zone: relay off, nothing learned, the configured start mode.

        The anticipator and the droop term start together at ``G x`` the fail-safe duty (the
        on-fraction assumed before anything is learned): they cancel in the switching
        temperature, and the room does not sag ``G x duty`` under the set point for the
        hours droop compensation would take to integrate up from 0.
        """
        s = self.settings
        start_k = droop.start_k(s, s.fail_safe_duty)
        return ZoneState(
            mode=s.initial_mode,
            hold_setpoint=None,
            hold_level=s.default_level if s.initial_mode == "hold" else None,
            hold_until=None,
            level_override=None,
            scheduled_level=s.default_level,
            anticipator_k=start_k,
            droop_k=start_k,
            tau_scale=1.0,
            cycle_clean=False,
            relay_on=False,
            switched_at=None,
            protection_run=False,
            switches=(),
            started_at=now,
            last_step_at=now,
            last_setpoint=None,
            recovering=0,
            temperature=None,
            good_at=now,
            good_since=None,
            normal=False,
            fail_safe=False,
            fail_safe_since=None,
            fail_safe_duty=None,
            fail_safe_reason=None,
            duty_buckets=(),
            duty_current=(math.floor(now / _BUCKET_S) * _BUCKET_S, 0.0, 0.0),
            points=tuple(PointState(p.name) for p in s.inputs),
            backup=None if s.backup is None else PointState(s.backup.name),
        )

    def resume(
        self,
        state: ZoneState,
        now: float,
        relay_on: bool | None = None,
        *,
        safe_on: bool = False,
    ) -> ZoneState:
        """Adopt a state loaded from disk (or a fresh one) after a restart at ``now``.

        ``relay_on`` is the output's real state, read from the device at the restart;
        ``None`` when it could not be read: the service then writes the zone's safe
        state ``safe_on`` at start, and that is the relay from now on. Short-cycle
        protection stays exact across an unclean stop: the saved state holds every
        switch (the service saves on each one), so a relay found as saved keeps its
        saved switch time; a relay that differs from the saved state (switched while
        roomloop was down, by the old process's stop or a switch it had no time to
        save, or by the safe-state write now) is recorded as a switch at ``now``, the
        latest it can have happened, so its minimum on or off time is served from the
        restart and never cut short. With the relay unknown, the safe state's minimum
        time runs from ``now`` even when the saved state already had it (a switch lost
        with the old process would otherwise allow a pulse), and the last logged switch
        to that state counts toward the cycle limit from ``now``; no switch is added.
        Nothing here switches the relay: the first step starts from the relay as it is,
        so a restart makes no pulse.

        The anticipator decays (or rises) over the gap as if it had run with the relay
        as found, point memories are kept only for points still configured under the
        same name, times in the future (a clock set back) are pulled to ``now``, and the
        gap does not count toward the learned duty.

        The sensor timeout restarts at ``now`` and a point whose last verdict was
        ``stale`` starts afresh: the readings stopped because roomloop stopped, so
        after a downtime longer than ``sensor_timeout_s`` the first tick without a
        reading must not enter fail-safe, nor the first reading wait out a recovery
        time. A restart is a cold start for the sensor timeout.
        """
        s = self.settings
        relay = safe_on if relay_on is None else relay_on
        gap = max(0.0, now - state.last_step_at)
        gain = s.anticipator_gain_k
        u = gain if relay else 0.0
        tau_scale = regulation.clamped(state.tau_scale) if self._regulate else 1.0
        tau = s.anticipator_time_constant_s * tau_scale
        anticipator = u + (state.anticipator_k - u) * math.exp(-gap / tau)
        switches = tuple(sw for sw in state.switches if sw[0] <= now)
        switched_at = None if state.switched_at is None else min(state.switched_at, now)
        if relay != state.relay_on:
            switched_at = now
            switches = (*switches, (now, relay))[-MAX_SWITCH_LOG:]
        elif relay_on is None:
            # The safe-state write at start may still switch the relay (the old process may
            # have recorded its last switch and died before the device's write): its minimum
            # time runs from now, and that last switch counts toward the cycle limit from
            # now, the latest it can have reached the device (no switch is added: the count
            # keeps to the switches known to have happened).
            switched_at = now
            if switches and switches[-1][1] == relay:
                switches = (*switches[:-1], (now, relay))
        old_points = {p.name: p for p in state.points}
        points = tuple(_resumed_point(old_points.get(p.name), p.name) for p in s.inputs)
        backup: PointState | None = None
        if s.backup is not None:
            backup = _resumed_point(
                state.backup
                if state.backup is not None and state.backup.name == s.backup.name
                else None,
                s.backup.name,
            )
        return ZoneState(
            mode=state.mode,
            hold_setpoint=state.hold_setpoint,
            hold_level=state.hold_level,
            hold_until=state.hold_until,
            level_override=state.level_override,
            scheduled_level=state.scheduled_level,
            anticipator_k=min(max(anticipator, 0.0), gain),
            droop_k=min(max(state.droop_k, 0.0), gain) if s.droop_compensation else 0.0,
            tau_scale=tau_scale,
            cycle_clean=False,
            relay_on=relay,
            switched_at=switched_at,
            protection_run=False,
            switches=switches,
            started_at=min(state.started_at, now),
            last_step_at=now,
            last_setpoint=state.last_setpoint,
            recovering=state.recovering,
            temperature=state.temperature,
            good_at=now,
            good_since=None,
            normal=False,
            fail_safe=state.fail_safe,
            fail_safe_since=(
                None if state.fail_safe_since is None else min(state.fail_safe_since, now)
            ),
            fail_safe_duty=state.fail_safe_duty,
            fail_safe_reason=state.fail_safe_reason,
            duty_buckets=tuple(b for b in state.duty_buckets if b[0] <= now),
            duty_current=state.duty_current
            if state.duty_current[0] <= now
            else (math.floor(now / _BUCKET_S) * _BUCKET_S, 0.0, 0.0),
            points=points,
            backup=backup,
        )

    # ------------------------------------------------------------------ step

    def step(  # noqa: PLR0915 - the hot path: the stages inline, one frame per tick
        self, state: ZoneState, inputs: ZoneInputs, now: float, lock: Reason | None = None
    ) -> tuple[ZoneState, ZoneOutputs]:
        """One tick of the control law: the stages of :mod:`roomloop.core.stages` in order.

        ``lock``: the changeover keeps the heating call off this tick (a zone with a cooling
        call, :class:`DualZoneController`); None in a heating-only zone.
        """
        s = self.settings
        k = self._law
        was_on = state.relay_on
        dt = now - state.last_step_at
        if dt < 0.0:  # noqa: PLR1730 - the hot path: a branch is cheaper than a call
            dt = 0.0
        on_s = dt if was_on else 0.0

        a, decay = anticipator.advance(
            state.anticipator_k, k.gain_k, k.time_constant_s * state.tau_scale, was_on, dt
        )
        judged, reliability, temperature, backup, backup_value = points.judge(
            s, state, inputs, now, on_s
        )
        last_temperature, good_at, good_since = points.remember(state, temperature, now)
        smoothed = smoothing.smooth(k.smoothing_s, state, temperature, dt)
        commands = expiry.expire(state, inputs.scheduled_level, now)
        mode = commands[0]
        level, target = setpoint.choose(s, k.level_setpoints, commands)
        fail_safe, fs_since, fs_duty, fs_reason, left_fail_safe = failsafe.judge(
            s, state, good_at, good_since, now
        )
        recovering, edge = recovery.track(k.half_k, state, target, temperature, left_fail_safe)
        if edge is not None and temperature is not None and k.smoothing_s > 0.0:
            smoothed = smoothing.from_edge(k.smoothing_s, state, temperature, edge, dt)
        forced, deep = protection.judge(
            k, state, mode, temperature if temperature is not None else backup_value
        )
        b = droop.faded(state.droop_k, recovering, was_on, decay)

        mode_off = mode == "off"
        rule = relay.first_applying(
            lock is not None, forced, mode_off, fail_safe, last_temperature is None
        )
        if rule.wish is not None:
            want, reason = rule.wish
        elif lock is not None:
            want, reason = False, lock
        elif fail_safe:
            want, reason = failsafe.wants_on(s, fs_since, fs_duty, now), k.fail_safe_reason
        else:
            assert last_temperature is not None
            basis = switching.basis(last_temperature, smoothed, recovering, k.max_lag_k)
            sensed = basis + a - b
            if k.proportional and not recovering:
                sensed += k.proportional * (basis - target)
            want, reason = switching.wish(sensed, target, k.half_k, was_on, temperature is None)
        on, held = want, False
        if want != was_on and relay.short_cycle_may_hold(rule, deep):
            on, held, reason = short_cycle.hold(s, state, want, reason, now)

        # ordinary control: what regulation and droop may learn from
        ordinary = (
            temperature is not None and not fail_safe and not held and not forced and not mode_off
            and lock is None
        )
        cycling = ordinary and recovering == 0
        tau_scale, cycle_clean = state.tau_scale, state.cycle_clean and cycling
        switched_at, switches = state.switched_at, state.switches
        if on != was_on:
            if on:
                tau_scale, cycle_clean = regulation.at_switch_on(
                    k, state, now, ordinary=cycling, reason=reason, level=level
                )
            switched_at, switches = now, short_cycle.logged(switches, now, on)
            recovering = recovery.ended_by_switch(recovering, reason)
        if ordinary and recovering == 0 and temperature is not None:
            saturated = on and switched_at is not None and now - switched_at > k.target_period_s
            b = droop.integrated(s, b, target - temperature, dt, saturated=saturated)
        duty = failsafe.learn(state, on_s, dt, now, k.learn_s)
        figures_1h = figures.last_hour(switches, on, state.started_at, now)

        new_state = zone_state(
            commands,
            (a, b, tau_scale, cycle_clean),
            (on, switched_at, on and forced, switches),
            (state.started_at, now, target, recovering),
            (last_temperature, good_at, good_since,
             temperature is not None and not fail_safe and not mode_off),
            (fail_safe, fs_since, fs_duty, fs_reason),
            duty,
            (judged, backup, smoothed),
        )
        outputs = zone_outputs(
            (on, reason),
            (temperature, target, level, mode, a, b),
            reliability,
            (fail_safe, s.fail_safe_policy if fail_safe else None, fs_reason),
            figures_1h,
        )
        return new_state, outputs


def _resumed_point(old: PointState | None, name: str) -> PointState:
    """A point's memory after a restart: kept, unless its only fault was going stale."""
    if old is None or old.verdict == "stale":
        return PointState(name)
    return old
