"""The zone controller: one sans-IO step per tick, following DESIGN.md "Control law".

Each :meth:`ZoneController.step` takes the previous :class:`ZoneState`, the
tick's :class:`ZoneInputs` and the time, and returns the next state and the
:class:`ZoneOutputs`. It reads no clock and does no I/O; the same code runs in
the service, the plant simulator and the demo.

Order of one step (``u`` = relay state held during the elapsed tick):

1. **Anticipator**, exact over the elapsed ``dt``:
   ``a <- G u + (a - G u) exp(-dt / tau)``; the trajectory does not depend on
   the tick length.
2. **Points** judged (:mod:`roomloop.core.reliability`); the trusted ones are
   combined (``mean``, ``median``, ``min``, ``first-ok``) into ``T``.
3. **Commands**: a hold past ``hold_until`` returns to ``auto``; a level
   override set in ``auto`` lasts until the program's level changes.
4. **Set point** ``S`` from mode and level (``off`` shows the protection set
   point), clamped to the zone's limits.
5. **Fail-safe** (:mod:`roomloop.core.failsafe`) entered when no trusted ``T``
   for ``sensor_timeout_s``; left after a trusted ``T`` has lasted the recovery
   time. Until fail-safe starts the zone *coasts*: it keeps switching on the
   last trusted temperature, reasons prefixed ``last-temperature:``.
6. **Switching** on ``Ts + a - b`` across ``S -/+ D/2`` (``cut-in``,
   ``cut-out``, ``on-to-cut-out``, ``off-to-cut-in``), where ``Ts`` is ``T``
   smoothed over about one cycle (below). While recovering from a set-point
   change the relay switches on ``T`` itself and ``Ts`` restarts from ``T``.

   *Why smooth.* The anticipator stands in for the room's response within a
   cycle; the room's own ripple, seen through a lagging sensor with 0.1 K steps,
   only jitters the switching points: one run ends a quantisation step early,
   the next one late, and uneven runs widen the swing of the room (the figure
   EN 15500 scores, CV) at the same cycle rate. With ``T`` averaged over about
   one cycle the relay runs an even on-fraction cycle after cycle (the
   anticipator then works as a pulse-width modulator driven by ``S - Ts + b``),
   and the sensor's noise dithers its steps into a finer average. Details:
   exponential smoothing with time constant ``smoothing_s`` (default one cycle
   period, ``3600 / cycle_rate_cph``), solved exactly for a temperature linear
   between two readings, so the tick length does not matter; ``Ts`` is kept
   within ``D`` of ``T`` (a real departure from the band is no ripple and passes
   at once); only when ``G > D`` (a plain hysteresis needs the room's ripple to
   switch at all). Measured on the built-in plants (tests/bench/control_quality.py,
   seeds 1-3), it and the presets' gains and droop times picked with it lower the
   worst-phase control accuracy by 0.04-0.08 K. A limit: after a large real
   departure (a window opened) ``Ts`` catches up over about ``smoothing_s`` and
   the relay switches up to ``D`` away from the reading meanwhile.
7. **Short-cycle protection** holds the relay: ``min-on``, ``min-off``,
   ``max-cycles`` (switch-ons in the sliding hour ``(now - 3600, now]``).
8. **Protection** ``P`` (zone temperature, or the backup point while the zone
   has none; in ``off`` only with ``protection_in_off``) starts a protection
   run below ``P`` and holds the relay on, whatever the mode, until the run
   ends at ``P + D/2`` (``protection_run`` marks the run). It overrides the
   minimum off time and the cycle limit only below ``P - D/2``; between
   ``P - D/2`` and ``P`` they still hold the relay off, so a sensor flickering
   across ``P`` cannot short-cycle the plant (a 0.1 K sensor alternating at
   ``P`` once switched 59 times in 10 minutes). In mode ``off`` the run ends
   at ``P`` itself, even inside ``min_on_s``: mode off never heats above the
   protection set point (tests/core/test_properties.py); there the minimum off
   time and the cycle limit alone bound the cycling.
9. **Droop compensation** ``b`` integrates ``(S - T) dt / droop_time_s`` (the
   raw ``T``: the same mean, and no smoothing lag winding it up after a
   recovery) and is
   clamped to ``[0, G]``. The anticipator's mean over a steady cycle is
   ``G x duty``, so without ``b`` the room would settle about that much below
   ``S`` (REFERENCES.md [derived]); ``b`` converges to that bias.
   Anti-windup: ``b`` is frozen while recovering from a set-point change, in
   fail-safe, while coasting, in mode ``off``, during protection and while
   short-cycle protection holds the relay.

   *Recovery* starts with a set-point change (and at start-up and when leaving
   fail-safe) when ``T`` is outside the band, and ends when ``T`` first enters
   the band or the relay first switches by itself (the first ``cut-out`` after
   a rise, the first ``cut-in`` after a drop): from then on the relay cycles
   normally. Freezing ``b`` keeps the long run of a recovery out of the
   integral. While the relay rests after a set-back, ``b`` fades with the
   anticipator (same exponential): ``b`` cancels the anticipator's mean, and
   after a long rest that mean is gone; a stale ``b`` from the old set point
   would overshoot the next recovery. The anticipator, near ``G`` after a long
   run, cuts the recovery out early and limits its overshoot.
10. **Cycle-rate regulation** (``cycle_rate_regulation``, on when the time
   constant was derived from the cycle rate): the sizing formula assumes a room
   that stands still, but a real room moves with each burst of heat (shorter
   cycles) and lags behind it (longer cycles). After every ordinary cycle (no
   recovery, protection, fail-safe or short-cycle hold in it) the time constant
   is scaled by ``(3600 / cycle_rate / period) ** 0.2``, within [0.5, 2], so the
   plant settles at the configured cycle rate; faster cycles mean a smaller
   swing of the room. The cycle rate is then held at every on-fraction (the
   trade rates it at 50 %, where an unregulated anticipator peaks); the floor
   of 0.5 keeps the anticipator from racing at very low on-fractions, where
   holding the rate would need a tiny time constant that is wrong the moment the
   load rises (a recovery would then run into the cycle limit).
   Two guards keep the cycle limit a backstop: regulation adapts only at the
   zone's default level (a set-back runs at a low on-fraction, and a time
   constant shortened there races the relay into the limit when the comfort
   level returns), and it never shortens the time constant after a switch-on that
   brings the sliding hour to ``cycle_rate + 1`` switch-ons.

Every output carries ``reason``: the rule that decided the relay this tick:
``cut-in`` / ``cut-out`` (the switching band switched it), ``on-to-cut-out`` /
``off-to-cut-in`` (the band holds the relay where it is until the other edge),
``min-on``, ``min-off``, ``max-cycles`` (short-cycle protection held it),
``protection``, ``mode-off``, ``fail-safe:<policy>``, ``no-temperature``, and
``last-temperature:<rule>`` while the zone rides on its last trusted reading.
"""

from __future__ import annotations

import math

from .failsafe import BUCKET_S as _BUCKET_S
from .failsafe import choose_duty, duty_wants_on, record_duty
from .fastbuild import positional_builder
from .reliability import evaluate_point
from .settings import ZoneSettings
from .state import PointState, ZoneState
from .types import Reliability, ZoneInputs, ZoneOutputs

_new_state = positional_builder(ZoneState)
_new_outputs = positional_builder(ZoneOutputs)

HOUR_S = 3600.0
MIN_TAU_SCALE = 0.5
MAX_TAU_SCALE = 2.0
REGULATION_EXPONENT = 0.2
GUARD_CPH = 1.0
MAX_SWITCH_LOG = 128
"""Bound of the switch log (the last hour's switchings; 60 cycles at most are allowed)."""


class ZoneController:
    """Our anticipating on/off controller for one zone (conforms to ``types.Controller``)."""

    __slots__ = (
        "_cache_decay", "_cache_dt", "_cache_tau", "_guard_ons", "_half", "_learn_s",
        "_max_lag", "_regulate", "_smooth_decay", "_smooth_dt", "_smooth_ramp", "_smoothing_s",
        "_target_period", "settings",
    )

    def __init__(self, settings: ZoneSettings) -> None:
        self.settings = settings
        self._half = settings.differential_k / 2.0
        self._learn_s = settings.learn_hours * HOUR_S
        self._cache_dt = -1.0
        self._cache_tau = -1.0
        self._cache_decay = 1.0
        self._target_period = 3600.0 / settings.cycle_rate_cph
        self._guard_ons = settings.cycle_rate_cph + GUARD_CPH
        # Smoothing only where the anticipator cycles the relay by itself (G > D): a plain
        # hysteresis (or a weak anticipator) needs the room's own ripple to switch.
        self._smoothing_s = (
            0.0
            if settings.anticipator_gain_k <= settings.differential_k
            else self._target_period
            if settings.smoothing_s is None
            else settings.smoothing_s
        )
        self._max_lag = settings.differential_k
        self._smooth_dt = -1.0
        self._smooth_decay = 1.0
        self._smooth_ramp = 0.0
        self._regulate = (
            settings.cycle_rate_regulation
            and settings.anticipator_gain_k > settings.differential_k
        )

    # ------------------------------------------------------------------ state

    def initial_state(self, now: float) -> ZoneState:
        """A fresh zone: relay off, nothing learned, the configured start mode."""
        s = self.settings
        return ZoneState(
            mode=s.initial_mode,
            hold_setpoint=None,
            hold_level=s.default_level if s.initial_mode == "hold" else None,
            hold_until=None,
            level_override=None,
            scheduled_level=s.default_level,
            anticipator_k=0.0,
            droop_k=0.0,
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
        with the old process would otherwise allow a pulse), but no switch is logged.
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
        tau_scale = (
            min(max(state.tau_scale, MIN_TAU_SCALE), MAX_TAU_SCALE) if self._regulate else 1.0
        )
        tau = s.anticipator_time_constant_s * tau_scale
        anticipator = u + (state.anticipator_k - u) * math.exp(-gap / tau)
        switches = tuple(sw for sw in state.switches if sw[0] <= now)
        switched_at = None if state.switched_at is None else min(state.switched_at, now)
        if relay != state.relay_on:
            switched_at = now
            switches = (*switches, (now, relay))[-MAX_SWITCH_LOG:]
        elif relay_on is None:
            # The safe-state write at start may still switch the relay (the old process may
            # have switched it without saving): its minimum time runs from now, though no
            # switch is logged (the cycle count keeps to the switches known to have happened).
            switched_at = now
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

    def step(
        self, state: ZoneState, inputs: ZoneInputs, now: float
    ) -> tuple[ZoneState, ZoneOutputs]:
        """One tick of the control law (see the module docstring)."""
        s = self.settings
        half = self._half
        gain = s.anticipator_gain_k
        was_on = state.relay_on

        # 1. anticipator, exact over the elapsed tick
        dt = now - state.last_step_at
        if dt < 0.0:  # noqa: PLR1730 - the hot path: a branch is cheaper than a call
            dt = 0.0
        a = state.anticipator_k
        tau_scale = state.tau_scale
        if dt > 0.0:
            tau = s.anticipator_time_constant_s * tau_scale
            if dt != self._cache_dt or tau != self._cache_tau:
                self._cache_dt = dt
                self._cache_tau = tau
                self._cache_decay = math.exp(-dt / tau)
            decay = self._cache_decay
            a = gain + (a - gain) * decay if was_on else a * decay
        on_s = dt if was_on else 0.0

        # 2. points and the zone temperature
        cfgs = s.inputs
        samples = inputs.samples
        old_points = state.points
        count = len(cfgs)
        if len(old_points) != count:
            old_points = tuple(PointState(c.name) for c in cfgs)
        n_samples = len(samples)
        points: list[PointState] = []
        values: list[float] = []
        reliability: dict[str, Reliability] = {}
        for i in range(count):
            point = evaluate_point(
                cfgs[i], old_points[i], samples[i] if i < n_samples else None, now, on_s
            )
            points.append(point)
            reliability[point.name] = point.reliability
            if point.reliability == "ok" and point.value is not None:
                values.append(point.value)
        temperature: float | None
        if not values:
            temperature = None
        elif len(values) == 1 or s.combine == "first-ok":
            temperature = values[0]
        elif s.combine == "mean":
            temperature = sum(values) / len(values)
        elif s.combine == "min":
            temperature = min(values)
        else:
            ordered = sorted(values)
            mid = len(ordered) // 2
            temperature = (
                ordered[mid] if len(ordered) % 2 else 0.5 * (ordered[mid - 1] + ordered[mid])
            )
        backup = state.backup
        backup_value: float | None = None
        if s.backup is not None:
            backup = evaluate_point(
                s.backup, backup if backup is not None else PointState(s.backup.name),
                inputs.backup, now, on_s,
            )
            reliability[backup.name] = backup.reliability
            if backup.reliability == "ok":
                backup_value = backup.value

        # the switching temperature: T smoothed over about one cycle
        smoothed = state.smoothed_c
        if temperature is not None:
            if smoothed is None or self._smoothing_s <= 0.0 or state.recovering != 0:
                # (re)start from the reading itself: at start-up, and after a recovery,
                # which switches on T and whose long run is no ripple
                smoothed = temperature
            elif dt > 0.0:
                if dt != self._smooth_dt:
                    self._smooth_dt = dt
                    self._smooth_decay = math.exp(-dt / self._smoothing_s)
                    self._smooth_ramp = (self._smoothing_s / dt) * (1.0 - self._smooth_decay)
                previous = state.temperature
                if previous is not None and state.good_at == state.last_step_at:
                    # exact for a temperature linear between the two readings
                    smoothed = (
                        temperature
                        + (smoothed - previous) * self._smooth_decay
                        - (temperature - previous) * self._smooth_ramp
                    )
                else:
                    smoothed += (temperature - smoothed) * (1.0 - self._smooth_decay)
            good_at = now
            good_since = state.good_since if state.good_since is not None else now
            last_temperature: float | None = temperature
        else:
            good_at = state.good_at
            good_since = None
            last_temperature = state.temperature

        # 3. commands that expire
        mode = state.mode
        hold_setpoint = state.hold_setpoint
        hold_level = state.hold_level
        hold_until = state.hold_until
        if mode == "hold" and hold_until is not None and now >= hold_until:
            mode = "auto"
            hold_setpoint = hold_level = hold_until = None
        scheduled = inputs.scheduled_level
        override = state.level_override
        if override is not None and scheduled != state.scheduled_level:
            override = None

        # 4. set point
        if mode == "auto":
            level: str = override if override is not None else scheduled
            setpoint = s.setpoint_for(level)
        elif mode == "hold":
            level = hold_level if hold_level is not None else scheduled
            setpoint = hold_setpoint if hold_setpoint is not None else s.setpoint_for(level)
        else:
            level = "protection"
            setpoint = s.protection_c
        if setpoint < s.limit_min_c:
            setpoint = s.limit_min_c
        elif setpoint > s.limit_max_c:
            setpoint = s.limit_max_c

        # 5. fail-safe
        fail_safe = state.fail_safe
        fs_since = state.fail_safe_since
        fs_duty = state.fail_safe_duty
        fs_reason = state.fail_safe_reason
        left_fail_safe = False
        if fail_safe:
            if good_since is not None and now - good_since >= s.fail_safe_recovery_s:
                fail_safe = False
                fs_since = fs_duty = fs_reason = None
                left_fail_safe = True
        elif temperature is None and now - good_at >= s.sensor_timeout_s:
            fail_safe = True
            fs_since = now
            fs_duty, why = choose_duty(
                s.fail_safe_policy, state.duty_buckets, state.duty_current, now,
                duty=s.fail_safe_duty, period_s=s.fail_safe_period_s,
                learn_hours=s.learn_hours, min_duty=s.min_duty, max_duty=s.max_duty,
            )
            fs_reason = f"no reliable temperature for {now - good_at:.0f} s; {why}"

        # recovery from a set-point change (and start-up, and leaving fail-safe)
        recovering = state.recovering
        last_setpoint = state.last_setpoint
        if last_setpoint is None or setpoint != last_setpoint or left_fail_safe:
            ref = temperature if temperature is not None else last_temperature
            if ref is None:
                recovering = 1 if last_setpoint is None or setpoint > last_setpoint else -1
            elif ref < setpoint - half:
                recovering = 1
            elif ref > setpoint + half:
                recovering = -1
            else:
                recovering = 0
        elif recovering != 0 and temperature is not None and (
            (recovering > 0 and temperature >= setpoint - half)
            or (recovering < 0 and temperature <= setpoint + half)
        ):
            edge = setpoint - half if recovering > 0 else setpoint + half
            recovering = 0
            if self._smoothing_s > 0.0:
                previous = state.temperature if state.good_at == state.last_step_at else None
                smoothed = self._smoothed_from_edge(previous, temperature, edge, dt)

        # 6-8. the relay decision
        b = state.droop_k
        if recovering < 0 and not was_on and dt > 0.0:
            # Resting after a set-back: the bias b cancels fades with the anticipator.
            b *= self._cache_decay
        protect_value = temperature if temperature is not None else backup_value
        forced = False
        deep = False  # so far below P that short-cycle protection must give way
        if protect_value is not None and (mode != "off" or s.protection_in_off):
            run_ends_at = s.protection_c if mode == "off" else s.protection_c + half
            forced = protect_value < s.protection_c or (
                was_on and state.protection_run and protect_value < run_ends_at
            )
            deep = forced and protect_value < s.protection_c - half
        want: bool
        if forced:
            want = True
            reason = "protection"
        elif mode == "off":
            want = False
            reason = "mode-off"
        elif fail_safe:
            assert fs_since is not None and fs_duty is not None
            want = duty_wants_on(fs_since, now, fs_duty, s.fail_safe_period_s)
            reason = "fail-safe:" + s.fail_safe_policy
        elif last_temperature is None:
            want = False
            reason = "no-temperature"
        else:
            basis = last_temperature
            if smoothed is not None and recovering == 0:
                # the smoothed value, but never more than D away from the reading
                lag = self._max_lag
                basis = (
                    smoothed if -lag <= smoothed - basis <= lag
                    else basis + lag if smoothed > basis else basis - lag
                )
            sensed = basis + a - b
            if was_on:
                if sensed >= setpoint + half:
                    want = False
                    reason = "cut-out"
                else:
                    want = True
                    reason = "on-to-cut-out"
            elif sensed <= setpoint - half:
                want = True
                reason = "cut-in"
            else:
                want = False
                reason = "off-to-cut-in"
            if temperature is None:
                reason = "last-temperature:" + reason

        on = want
        held = False
        switches = state.switches
        switched_at = state.switched_at
        if want != was_on and not deep and (forced or mode != "off"):
            since = HOUR_S * 1e6 if switched_at is None else now - switched_at
            if want:
                if since < s.min_off_s:
                    on, held, reason = False, True, "min-off"
                elif _ons_since(switches, now - HOUR_S) >= s.max_cycles_per_hour:
                    on, held, reason = False, True, "max-cycles"
            elif since < s.min_on_s:
                on, held, reason = True, True, "min-on"
        protection_run = on and forced
        ordinary = (
            temperature is not None
            and recovering == 0
            and not fail_safe
            and not held
            and not forced
            and mode != "off"
        )
        cycle_clean = state.cycle_clean and ordinary
        if on != was_on:
            if on:
                if (
                    cycle_clean
                    and self._regulate
                    and level == s.default_level
                    and reason == "cut-in"
                    and len(switches) >= 2
                    and not switches[-1][1]
                    and switches[-2][1]
                ):
                    tau_scale = self._regulated(
                        tau_scale, now - switches[-2][0], _ons_since(switches, now - HOUR_S) + 1
                    )
                cycle_clean = ordinary and reason == "cut-in"
            switched_at = now
            horizon = now - HOUR_S
            if switches and switches[0][0] <= horizon:
                switches = tuple(sw for sw in switches if sw[0] > horizon)
            switches = (*switches, (now, on))
            if len(switches) > MAX_SWITCH_LOG:
                switches = switches[-MAX_SWITCH_LOG:]
            # The relay cycles again on its own: recovery from the set-point change is over.
            if (recovering > 0 and reason == "cut-out") or (recovering < 0 and reason == "cut-in"):
                recovering = 0

        # 9. droop compensation with anti-windup
        if (
            s.droop_compensation
            and dt > 0.0
            and temperature is not None
            and recovering == 0
            and not fail_safe
            and not held
            and not forced
            and mode != "off"
        ):
            b += (setpoint - temperature) * dt / s.droop_time_s
            if b < 0.0:
                b = 0.0
            elif b > gain:
                b = gain

        # learned-duty history: the elapsed tick counts if it was ordinary control
        buckets = state.duty_buckets
        current = state.duty_current
        if state.normal and dt > 0.0:
            buckets, current = record_duty(
                buckets, current, at=now, on_s=on_s, seen_s=dt, learn_s=self._learn_s
            )
        normal = temperature is not None and not fail_safe and mode != "off"

        # figures of the last hour
        window_start = now - HOUR_S
        if state.started_at > window_start:  # noqa: PLR1730 - hot path
            window_start = state.started_at
        cycles = 0
        on_time = 0.0
        relay = on
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
        on_fraction = on_time / span if span > 0.0 else (1.0 if on else 0.0)

        new_state = _new_state(
            mode,
            hold_setpoint,
            hold_level,
            hold_until,
            override,
            scheduled,
            a,
            b,
            tau_scale,
            cycle_clean,
            on,
            switched_at,
            protection_run,
            switches,
            state.started_at,
            now,
            setpoint,
            recovering,
            last_temperature,
            good_at,
            good_since,
            normal,
            fail_safe,
            fs_since,
            fs_duty,
            fs_reason,
            buckets,
            current,
            tuple(points),
            backup,
            smoothed,
        )
        outputs = _new_outputs(
            on,
            reason,
            temperature,
            setpoint,
            level,
            mode,
            a,
            b,
            reliability,
            fail_safe,
            s.fail_safe_policy if fail_safe else None,
            fs_reason,
            on_fraction,
            cycles,
        )
        return new_state, outputs

    def _smoothed_from_edge(
        self, previous: float | None, temperature: float, edge: float, dt: float
    ) -> float:
        """The smoothing restarted where ``T`` crossed into the band, advanced to now.

        A recovery ends when ``T`` enters the band; the smoothing starts there, at the band's
        edge, at the moment of the crossing (``T`` taken linear between the two readings), so
        the result does not depend on the tick length. Without a usable previous reading it
        starts from ``T``.
        """
        if previous is None or dt <= 0.0 or temperature == previous:
            return temperature
        fraction = (edge - previous) / (temperature - previous)
        if not 0.0 <= fraction <= 1.0:
            return temperature
        since = (1.0 - fraction) * dt
        if since <= 0.0:
            return temperature
        decay = math.exp(-since / self._smoothing_s)
        return temperature - (temperature - edge) * (self._smoothing_s / since) * (1.0 - decay)

    def _regulated(self, scale: float, period: float, ons_in_hour: int = 0) -> float:
        """Cycle-rate regulation after one ordinary cycle of ``period`` seconds (on to on).

        The time constant is scaled by ``(target period / measured period) ** 0.2`` per
        cycle (a gentle integral action in log scale), within [MIN_TAU_SCALE, MAX_TAU_SCALE].
        It does not shorten the time constant once ``ons_in_hour`` (this switch-on included)
        reaches ``cycle_rate + 1``: faster cycling would make the cycle limit decide.
        """
        if period <= 0.0:
            return scale
        factor = (self._target_period / period) ** REGULATION_EXPONENT
        if factor < 1.0 and ons_in_hour >= self._guard_ons:
            return scale
        scale *= factor
        return min(max(scale, MIN_TAU_SCALE), MAX_TAU_SCALE)


def _resumed_point(old: PointState | None, name: str) -> PointState:
    """A point's memory after a restart: kept, unless its only fault was going stale."""
    if old is None or old.verdict == "stale":
        return PointState(name)
    return old


def _ons_since(switches: tuple[tuple[float, bool], ...], horizon: float) -> int:
    """Switch-ons strictly after ``horizon``."""
    count = 0
    for t_switch, switched_on in reversed(switches):
        if t_switch <= horizon:
            break
        if switched_on:
            count += 1
    return count
