"""A heat source's logic: one sans-IO step per tick, on the demand of the zones it serves.

A boiler, heat pump or electric source is shared by several zones: each zone's relay opens
its own valve (or actuator), the source fires once there is somewhere for the heat to go,
and a circulating pump moves it. :meth:`SourceLogic.step` takes the previous
:class:`SourceState`, the tick's :class:`SourceInputs` (one :class:`ZoneDemand` per served
zone) and the time, and returns the next state and the :class:`SourceOutputs`. It reads no
clock and does no I/O; the service, the multi-zone simulator and the tests run the same code.

Rules, in the order one step applies them:

1. **Calls.** A local zone calls when its controller's demand is on. A remote zone
   (``SITE/ZONE``, heard over the broker) calls likewise while its demand is *fresh*; it is
   *stale* when its site is offline (the remote daemon's last will), when nothing was heard
   yet, or when nothing came from it for ``stale_timeout_s``. A stale zone calls by the
   policy: ``ignore`` (never), ``assume-calling`` (always), ``fixed-duty`` (the first
   ``duty`` of each ``period_s``, counted from the POSIX epoch so that every stale zone and
   every restart keeps the same phase and the source starts once per period).
2. **Valve opening.** Each calling zone's call has a start (``calling_since``); its valve has
   been open ``now - since``. The source may fire only once the zone calling longest has had
   ``valve_opening_s``: a thermal actuator takes minutes, and a source firing into closed
   valves only heats its own water. Zones keep calling while the source waits (their
   relays hold the valves open).
3. **Short-cycle protection** of the source: ``min_off_s`` since it last stopped (also at
   start-up: the source may have run just before a restart), at most
   ``max_starts_per_hour`` starts in the sliding hour ``(now - 3600, now]``, and once
   running ``min_on_s`` before it stops. A zone's frost-protection call (``protection``)
   lifts the starts-per-hour limit (a count never leaves a room to freeze); the minimum off
   time and the valve opening time still hold (minutes, against the hours frost takes).
   A restart of the daemon keeps the history (:class:`SourceMemory`, in the state file):
   the last hour's starts still count, and a run found going on keeps its start time.
4. **Pump.** Pre-run: once everything else would let the source fire, the pump runs
   ``pump_pre_run_s`` first (a pump already running counts). It runs while the source
   fires and ``pump_overrun_s`` after the source stops, to carry the residual heat away
   (also at start-up, for the same reason as the minimum off time). After
   ``pump_exercise_after_s`` without running it runs ``pump_exercise_s`` against seizing.

The output's ``reason`` is the rule that decided the source this tick: ``idle``,
``firing``, ``valve-opening``, ``pre-run``, ``min-off``, ``max-starts``, ``min-on``;
``pump_reason`` likewise: ``no-pump``, ``off``, ``firing``, ``pre-run``, ``overrun``,
``exercise``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any, Literal

from .state import MAX_TIME_S, StateFormatError

if TYPE_CHECKING:  # the config models (pydantic) are imported only by the builder
    from roomloop.config.models import HeatSource

HOUR_S = 3600.0
StalePolicy = Literal["ignore", "assume-calling", "fixed-duty"]
STALE_POLICIES: tuple[StalePolicy, ...] = ("ignore", "assume-calling", "fixed-duty")


@dataclass(frozen=True, slots=True)
class SourceSettings:
    """What one source's step needs, flattened once, in seconds."""

    name: str
    kind: str = "boiler"
    zones: tuple[str, ...] = ()
    """The served zones, local (``office``) and remote (``north-wing/office``), in file order."""
    has_pump: bool = True
    valve_opening_s: float = 180.0
    pump_pre_run_s: float = 0.0
    pump_overrun_s: float = 180.0
    min_on_s: float = 120.0
    min_off_s: float = 180.0
    max_starts_per_hour: int = 6
    pump_exercise_after_s: float = 86400.0
    pump_exercise_s: float = 60.0
    stale_policy: StalePolicy = "fixed-duty"
    stale_timeout_s: float = 300.0
    stale_duty: float = 0.3
    stale_period_s: float = 1200.0

    def __post_init__(self) -> None:
        if self.stale_policy not in STALE_POLICIES:
            raise ValueError(f"unknown stale policy {self.stale_policy!r}")
        for key in ("valve_opening_s", "pump_pre_run_s", "pump_overrun_s", "min_on_s",
                    "min_off_s", "pump_exercise_s"):
            value = getattr(self, key)
            if not (math.isfinite(value) and value >= 0):
                raise ValueError(f"{key} must be a finite number >= 0, not {value!r}")
        if self.max_starts_per_hour < 1:
            raise ValueError("max_starts_per_hour must be at least 1")
        if not (self.stale_period_s > 0 and 0 <= self.stale_duty <= 1):
            raise ValueError("stale duty is a fraction of a positive period")

    @property
    def remote_zones(self) -> tuple[str, ...]:
        return tuple(z for z in self.zones if "/" in z)

    @classmethod
    def from_config(cls, source: HeatSource) -> SourceSettings:
        """From a validated ``heat_sources`` entry (kind defaults filled in)."""
        timing = source.effective
        stale = source.remote_stale
        return cls(
            name=source.name,
            kind=source.kind,
            zones=tuple(source.zones),
            has_pump=source.pump_output is not None,
            valve_opening_s=timing.valve_opening_s,
            pump_pre_run_s=timing.pump_pre_run_s,
            pump_overrun_s=timing.pump_overrun_s,
            min_on_s=timing.min_on_s,
            min_off_s=timing.min_off_s,
            max_starts_per_hour=timing.max_starts_per_hour,
            pump_exercise_after_s=timing.pump_exercise_after_s,
            pump_exercise_s=timing.pump_exercise_s,
            stale_policy=stale.policy,
            stale_timeout_s=stale.timeout_s,
            stale_duty=stale.duty,
            stale_period_s=stale.period_s,
        )


@dataclass(frozen=True, slots=True)
class ZoneDemand:
    """One served zone's call as the service knows it this tick.

    Local zone: ``calling`` is the controller's demand of this tick, ``heard_at`` is ``now``.
    Remote zone: the last demand heard (``None``: nothing yet), when anything last came
    from the zone (``heard_at``, on the service's clock) and whether its site is online.
    """

    zone: str
    calling: bool | None
    heard_at: float | None = None
    online: bool = True
    protection: bool = False
    """The zone calls for frost protection (its controller's reason is ``protection``)."""


def local_demand(zone: str, demand: bool, reason: str, now: float) -> ZoneDemand:
    """A local zone's call from its controller's outputs of this tick (``ZoneOutputs.demand``
    and ``.reason``): heard now, always online; a frost-protection call (``protection``, also
    while riding on the last temperature) says so."""
    return ZoneDemand(
        zone, demand, heard_at=now, online=True,
        protection=demand and reason.rsplit(":", 1)[-1] == "protection",
    )


@dataclass(frozen=True, slots=True)
class SourceInputs:
    demands: tuple[ZoneDemand, ...]
    """One per served zone; a served zone missing here counts as stale (remote) or off."""


@dataclass(frozen=True, slots=True)
class SourceState:
    """What a source remembers between ticks."""

    running: bool = False
    running_since: float | None = None
    stopped_at: float | None = None
    """When the source last stopped (start-up counts as a stop)."""
    pump: bool = False
    pump_since: float | None = None
    pump_off_since: float | None = None
    exercise_until: float | None = None
    starts: tuple[float, ...] = ()
    """Start times within the last hour, oldest first."""
    calling_since: tuple[tuple[str, float], ...] = ()
    """Per calling zone (after the stale policy): since when it calls, in served order."""


MAX_SAVED_STARTS = 3600
"""More start times than one a second for an hour is not a file this code wrote."""


@dataclass(frozen=True, slots=True)
class SourceMemory:
    """What a source remembers across a restart of the daemon (the state file's ``sources``).

    Its short-cycle history, no more: the start times, whether it was running and since
    when, when it last stopped. The pump, the valves' calls and the exercise run are not
    kept: at a restart the pump overruns once and the zones' calls start again, both on the
    safe side. :meth:`SourceLogic.resume` takes it with the outputs as found. The saved
    stop time is kept for the record: a start-up found off counts as a later stop anyway.
    """

    kind: str
    running: bool = False
    running_since: float | None = None
    stopped_at: float | None = None
    starts: tuple[float, ...] = ()
    """Start times, oldest first (those older than an hour are dropped at resume)."""

    @classmethod
    def of(cls, kind: str, state: SourceState) -> SourceMemory:
        """What ``state`` holds of the source's history."""
        return cls(kind, state.running, state.running_since, state.stopped_at, state.starts)

    def to_dict(self) -> dict[str, Any]:
        return {
            "kind": self.kind,
            "running": self.running,
            "running_since": self.running_since,
            "stopped_at": self.stopped_at,
            "starts": list(self.starts),
        }

    @classmethod
    def from_dict(cls, raw: Any, *, kind: str, now: float) -> SourceMemory:
        """The memory a state file holds (JSON-like ``raw``), checked against the source as
        configured now (``kind``) and the time of the restart.

        Raises :class:`~roomloop.core.state.StateFormatError` naming the field: not an object,
        an unknown key, another kind of source (its history is not this one's), a time that
        is not a number of POSIX seconds, or one after ``now`` (a start that has not happened
        would hold the source off for an hour on nothing), a running source without its
        start time.
        """
        if not isinstance(raw, dict):
            raise StateFormatError("source state: not an object")
        extra = sorted(str(k) for k in set(raw) - {"kind", "running", "running_since",
                                                   "stopped_at", "starts"})
        if extra:
            raise StateFormatError(f"source state: unknown keys: {', '.join(extra)}")
        saved_kind = raw.get("kind")
        if saved_kind != kind:
            raise StateFormatError(
                f"source state: saved for a source of kind {saved_kind!r}, this one is {kind!r}"
            )
        running = raw.get("running", False)
        if not isinstance(running, bool):
            raise StateFormatError("source state: running must be true or false")
        running_since = _saved_time(raw.get("running_since"), "running_since", now)
        stopped_at = _saved_time(raw.get("stopped_at"), "stopped_at", now)
        if running and running_since is None:
            raise StateFormatError("source state: running without running_since")
        items = raw.get("starts", [])
        if not isinstance(items, list) or len(items) > MAX_SAVED_STARTS:
            raise StateFormatError(
                f"source state: starts must be a list of at most {MAX_SAVED_STARTS} times"
            )
        starts = [_saved_time(t, "starts", now) for t in items]
        if any(t is None for t in starts):
            raise StateFormatError("source state: starts holds a null")
        return cls(
            kind, running, running_since, stopped_at,
            tuple(sorted(t for t in starts if t is not None)),
        )


def _saved_time(value: Any, key: str, now: float) -> float | None:
    """A saved instant: None, or finite POSIX seconds within the years the core knows and not
    after the restart at ``now``."""
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int | float) or not (
        math.isfinite(value) and -MAX_TIME_S <= value <= MAX_TIME_S
    ):
        raise StateFormatError(
            f"source state: {key} must be POSIX seconds within +/-{MAX_TIME_S:.0f} (year 9999)"
        )
    if value > now:
        raise StateFormatError(
            f"source state: {key} {value:.0f} is after the restart at {now:.0f}"
        )
    return float(value)


@dataclass(frozen=True, slots=True)
class SourceOutputs:
    """The decision of one tick, and everything ``source/<name>/state`` shows."""

    enable: bool
    pump: bool
    reason: str
    pump_reason: str
    calling: tuple[str, ...] = ()
    waiting_for: str | None = None
    """The zone whose valve the source waits for (``valve-opening``), else None."""
    waiting_until: float | None = None
    lockout: str | None = None
    """Short-cycle protection holding the source: ``min-off``, ``max-starts``, ``min-on``."""
    lockout_until: float | None = None
    starts_1h: int = 0
    stale: tuple[str, ...] = ()
    """Remote zones whose demand is stale (the policy decides their call)."""
    stale_policy: str = "fixed-duty"
    protection: bool = False
    running_since: float | None = None


@dataclass(frozen=True, slots=True)
class _Calls:
    """The tick's calls after the stale policy."""

    calling: tuple[str, ...]
    stale: tuple[str, ...]
    protection: bool
    since: Mapping[str, float] = field(default_factory=dict)


class SourceLogic:
    """One heat source's step (the same shape as the zone controller's)."""

    __slots__ = ("settings",)

    def __init__(self, settings: SourceSettings) -> None:
        self.settings = settings

    def initial_state(self, now: float) -> SourceState:
        """At start-up the source may have just run: minimum off time and pump overrun apply."""
        return SourceState(stopped_at=now, pump_off_since=now)

    def resume(
        self,
        enable_on: bool | None,
        pump_on: bool | None,
        now: float,
        memory: SourceMemory | None = None,
    ) -> SourceState:
        """At a restart, from the outputs as found on the device (None: not known) and what
        the source remembered (``memory``, from the state file; None: nothing saved).

        The remembered starts of the last hour count against ``max_starts_per_hour``, so
        restarting the daemon does not get around the limit. A source found firing goes on
        from here: stopping it only to start it again after the minimum off time would be a
        cycle the restart made. If it was saved running it has been running since its saved
        ``running_since`` (its minimum on time holds from its real start, and no start is
        counted); saved off (or nothing saved) its run counts as a start now. A source found
        off (or not known) counts the start-up as a stop, as :meth:`initial_state`: it may
        have run until just before. A pump found running is running since now.
        """
        state = self.initial_state(now)
        kept: tuple[float, ...] = ()
        if memory is not None:
            kept = tuple(sorted(t for t in memory.starts if now - HOUR_S < t <= now))
            state = replace(state, starts=kept)
        if enable_on:
            since = None if memory is None or not memory.running else memory.running_since
            if since is not None and since <= now:
                if since > now - HOUR_S and since not in kept:
                    kept = tuple(sorted((*kept, since)))
                state = replace(
                    state, running=True, running_since=since, stopped_at=None, starts=kept
                )
            else:
                state = replace(
                    state, running=True, running_since=now, stopped_at=None, starts=(*kept, now)
                )
        if pump_on and self.settings.has_pump:
            state = replace(state, pump=True, pump_since=now, pump_off_since=None)
        return state

    def carry_on(
        self, state: SourceState, enable_on: bool | None, pump_on: bool | None, now: float
    ) -> SourceState:
        """After a reload: the state the old service had goes on unchanged (its starts, its
        timers, its calls) when the outputs agree with it; an output that does not (moved
        to another point, given up, not known) resumes from the state's memory as at a
        restart (:meth:`resume`)."""
        pump_agrees = state.pump == bool(pump_on) if self.settings.has_pump else not state.pump
        if state.running == bool(enable_on) and pump_agrees:
            return state
        return self.resume(
            enable_on, pump_on, now, SourceMemory.of(self.settings.kind, state)
        )

    # ------------------------------------------------------------------ the step

    def step(
        self, state: SourceState, inputs: SourceInputs, now: float
    ) -> tuple[SourceState, SourceOutputs]:
        calls = self._calls(state, inputs.demands, now)
        starts = tuple(t for t in state.starts if t > now - HOUR_S)
        state = replace(state, starts=starts, calling_since=tuple(calls.since.items()))
        if state.running:
            state, out = self._while_running(state, calls, now)
        else:
            state, out = self._while_off(state, calls, now)
        state, pump, pump_reason = self._pump(state, out, now)
        return state, replace(
            out,
            pump=pump,
            pump_reason=pump_reason,
            calling=calls.calling,
            starts_1h=len(state.starts),
            stale=calls.stale,
            stale_policy=self.settings.stale_policy,
            protection=calls.protection,
            running_since=state.running_since if state.running else None,
        )

    # ------------------------------------------------------------------ calls

    def _calls(
        self, state: SourceState, demands: Sequence[ZoneDemand], now: float
    ) -> _Calls:
        by_zone = {d.zone: d for d in demands}
        before = dict(state.calling_since)
        calling: list[str] = []
        stale: list[str] = []
        since: dict[str, float] = {}
        protection = False
        for zone in self.settings.zones:
            demand = by_zone.get(zone)
            is_stale = "/" in zone and self._is_stale(demand, now)
            if is_stale:
                stale.append(zone)
                call = self._stale_call(now)
            else:
                call = demand is not None and demand.calling is True
                protection = protection or (call and demand is not None and demand.protection)
            if call:
                calling.append(zone)
                since[zone] = before.get(zone, now)
        return _Calls(tuple(calling), tuple(stale), protection, since)

    def _is_stale(self, demand: ZoneDemand | None, now: float) -> bool:
        if demand is None or not demand.online or demand.heard_at is None:
            return True
        return demand.calling is None or now - demand.heard_at > self.settings.stale_timeout_s

    def _stale_call(self, now: float) -> bool:
        policy = self.settings.stale_policy
        if policy == "assume-calling":
            return True
        if policy == "ignore":
            return False
        period = self.settings.stale_period_s
        return (now % period) < self.settings.stale_duty * period

    # ------------------------------------------------------------------ the source

    def _while_running(
        self, state: SourceState, calls: _Calls, now: float
    ) -> tuple[SourceState, SourceOutputs]:
        if calls.calling:
            return state, _out(True, "firing")
        assert state.running_since is not None
        until = state.running_since + self.settings.min_on_s
        if now < until:
            return state, _out(True, "min-on", lockout="min-on", lockout_until=until)
        return replace(state, running=False, stopped_at=now), _out(False, "idle")

    def _while_off(
        self, state: SourceState, calls: _Calls, now: float
    ) -> tuple[SourceState, SourceOutputs]:
        if not calls.calling:
            return state, _out(False, "idle")
        s = self.settings
        first = min(calls.calling, key=lambda z: calls.since[z])
        valve_until = calls.since[first] + s.valve_opening_s
        if now < valve_until:
            return state, _out(False, "valve-opening", waiting_for=first, waiting_until=valve_until)
        stopped = -math.inf if state.stopped_at is None else state.stopped_at
        off_until = stopped + s.min_off_s
        if now < off_until:
            return state, _out(False, "min-off", lockout="min-off", lockout_until=off_until)
        if len(state.starts) >= s.max_starts_per_hour and not calls.protection:
            until = state.starts[len(state.starts) - s.max_starts_per_hour] + HOUR_S
            return state, _out(False, "max-starts", lockout="max-starts", lockout_until=until)
        if s.has_pump and s.pump_pre_run_s > 0:
            pumped = now - state.pump_since if state.pump and state.pump_since is not None else -1.0
            if pumped < s.pump_pre_run_s:
                return state, _out(False, "pre-run")
        state = replace(state, running=True, running_since=now, starts=(*state.starts, now))
        return state, _out(True, "firing")

    # ------------------------------------------------------------------ the pump

    def _pump(
        self, state: SourceState, out: SourceOutputs, now: float
    ) -> tuple[SourceState, bool, str]:
        s = self.settings
        if not s.has_pump:
            return state, False, "no-pump"
        reason = self._pump_reason(state, out, now)
        if reason == "exercise-start":
            state = replace(state, exercise_until=now + s.pump_exercise_s)
            reason = "exercise"
        on = reason != "off"
        if on and not state.pump:
            state = replace(state, pump=True, pump_since=now)
        elif not on and state.pump:
            state = replace(state, pump=False, pump_off_since=now, exercise_until=None)
        return state, on, reason

    def _pump_reason(self, state: SourceState, out: SourceOutputs, now: float) -> str:
        s = self.settings
        if out.enable:
            return "firing"
        if out.reason == "pre-run":
            return "pre-run"
        if state.stopped_at is not None and now < state.stopped_at + s.pump_overrun_s:
            return "overrun"
        if state.exercise_until is not None and now < state.exercise_until:
            return "exercise"
        idle_since = state.pump_off_since
        if (
            not state.pump
            and s.pump_exercise_s > 0
            and idle_since is not None
            and now - idle_since >= s.pump_exercise_after_s
        ):
            return "exercise-start"
        return "off"


def _out(
    enable: bool,
    reason: str,
    *,
    waiting_for: str | None = None,
    waiting_until: float | None = None,
    lockout: str | None = None,
    lockout_until: float | None = None,
) -> SourceOutputs:
    """The source's part of the outputs; the step fills in the pump and the calls."""
    return SourceOutputs(
        enable=enable,
        pump=False,
        reason=reason,
        pump_reason="",
        waiting_for=waiting_for,
        waiting_until=waiting_until,
        lockout=lockout,
        lockout_until=lockout_until,
    )
