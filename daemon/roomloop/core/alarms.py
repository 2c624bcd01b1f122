"""Zone alarms, sans-IO: the alarm state and one tick's facts in, the new state and events out.

Kinds (:data:`ALARM_KINDS`, also the bit order of the BMS ``alarms`` register):

- ``too-cold`` / ``too-warm``: the zone temperature beyond ``cold_band_k`` below
  or ``warm_band_k`` above the set point for ``delay_s``; cleared once back inside
  the band by ``clear_k`` (hysteresis). After a set-point change they are
  suppressed for ``suppress_s_per_k`` per K of the step, at most
  ``suppress_max_s``: the room needs time to follow. This is the model of ASHRAE
  Guideline 36's zone temperature alarms (2 K beyond the set point for 10 min;
  suppression 1080 s per K of set-point change, at most 2 h). Mode ``off`` ends
  them (frost protection has its own alarm); without a temperature they are
  neither raised nor ended (``sensor-fault`` speaks for the sensor).
- ``sensor-fault``: an input (or backup) point not ``ok`` for ``sensor_fault_s``.
- ``output-unconfirmed``: the output's read-back disagreeing for ``output_unconfirmed_s``.
- ``fail-safe``, ``frost-protection``, ``source-lockout``: while the condition lasts
  (the last is reserved for heat sources; nothing raises it yet).

An alarm is acknowledged by a command (:func:`acknowledge`); a new raise clears
the acknowledgement. Time is always an argument.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, replace

from roomloop.config.models import Alarms
from roomloop.errors import RoomloopError

ALARM_KINDS = (
    "too-cold",
    "too-warm",
    "sensor-fault",
    "output-unconfirmed",
    "fail-safe",
    "frost-protection",
    "source-lockout",
)


class AckRejected(RoomloopError):
    """An acknowledgement that names no active alarm; ``reason`` says why."""

    def __init__(self, reason: str) -> None:
        super().__init__(reason)
        self.reason = reason


@dataclass(frozen=True, slots=True)
class AlarmSettings:
    """The ``alarms:`` section in Celsius/K and seconds."""

    cold_band_k: float = 2.0
    warm_band_k: float = 2.0
    delay_s: float = 600.0
    clear_k: float = 0.5
    suppress_s_per_k: float = 1080.0
    suppress_max_s: float = 7200.0
    sensor_fault_s: float = 900.0
    output_unconfirmed_s: float = 120.0
    units: str = "C"
    """The site's units, for the texts only (every value here is Celsius)."""

    @classmethod
    def from_config(cls, alarms: Alarms, units: str = "C") -> AlarmSettings:
        return cls(
            units=units,
            cold_band_k=alarms.cold_band_k,
            warm_band_k=alarms.warm_band_k,
            delay_s=alarms.delay_s,
            clear_k=alarms.clear_k,
            suppress_s_per_k=alarms.suppress_s_per_k,
            suppress_max_s=alarms.suppress_max_s,
            sensor_fault_s=alarms.sensor_fault_s,
            output_unconfirmed_s=alarms.output_unconfirmed_s,
        )

    def suppression_s(self, step_k: float) -> float:
        """How long temperature alarms wait after a set-point change of ``step_k``."""
        return min(self.suppress_max_s, self.suppress_s_per_k * abs(step_k))


@dataclass(frozen=True, slots=True)
class AlarmInputs:
    """The facts of one tick the alarms look at (Celsius)."""

    temperature: float | None
    setpoint: float
    mode: str
    reliability: tuple[tuple[str, str], ...] = ()
    output_confirmed: bool | None = None
    fail_safe: bool = False
    fail_safe_reason: str | None = None
    frost_protection: bool = False
    source_lockout: bool = False
    warm_setpoint: float | None = None
    """The set point ``too-warm`` is judged against when it is not ``setpoint``: a zone with a
    cooling call in ``cool`` or ``auto`` changeover, its cooling set point (the room may sit
    between the two set points, in the dead band, without any alarm)."""

    @classmethod
    def of(
        cls,
        *,
        temperature: float | None,
        setpoint: float,
        mode: str,
        reliability: Mapping[str, str],
        reason: str,
        fail_safe: bool,
        fail_safe_reason: str | None = None,
        output_confirmed: bool | None = None,
        source_lockout: bool = False,
        warm_setpoint: float | None = None,
    ) -> AlarmInputs:
        """From a zone decision's fields (``reason == "protection"``: frost protection runs)."""
        return cls(
            temperature=temperature,
            setpoint=setpoint,
            mode=mode,
            reliability=tuple(sorted(reliability.items())),
            output_confirmed=output_confirmed,
            fail_safe=fail_safe,
            fail_safe_reason=fail_safe_reason,
            frost_protection=reason == "protection",
            source_lockout=source_lockout,
            warm_setpoint=warm_setpoint,
        )


@dataclass(frozen=True, slots=True)
class Alarm:
    """One kind's alarm as published: ``since`` is when it was raised, or cleared."""

    kind: str
    active: bool = False
    since: float | None = None
    value: float | str | None = None
    text: str = ""
    acknowledged: bool = False


@dataclass(frozen=True, slots=True)
class AlarmEvent:
    """A raise (``raised``) or a clear of one alarm, to log and publish once."""

    alarm: Alarm
    raised: bool


@dataclass(frozen=True, slots=True)
class AlarmState:
    """One zone's alarms, the start of each condition not yet raised, and the suppression."""

    alarms: tuple[Alarm, ...]
    pending: tuple[tuple[str, float], ...] = ()
    """Kind -> when its condition began holding (cleared when it stops)."""
    last_setpoint: float | None = None
    suppressed_until: float | None = None

    @classmethod
    def initial(cls) -> AlarmState:
        return cls(tuple(Alarm(kind) for kind in ALARM_KINDS))

    def get(self, kind: str) -> Alarm:
        return self.alarms[ALARM_KINDS.index(kind)]

    @property
    def bits(self) -> int:
        """Active alarms as a bit mask, bit ``i`` for ``ALARM_KINDS[i]``."""
        return sum(1 << i for i, alarm in enumerate(self.alarms) if alarm.active)

    def active(self) -> tuple[Alarm, ...]:
        return tuple(alarm for alarm in self.alarms if alarm.active)


@dataclass(frozen=True, slots=True)
class _Condition:
    holds: bool
    clears: bool
    delay_s: float
    value: float | str | None
    text: str
    suppressible: bool = False


def _delta_text(settings: AlarmSettings, kelvin: float) -> str:
    if settings.units == "F":
        return f"{kelvin * 9.0 / 5.0:g} F"
    return f"{kelvin:g} K"


def _temperature_text(settings: AlarmSettings, celsius: float) -> str:
    if settings.units == "F":
        return f"{celsius * 9.0 / 5.0 + 32.0:.1f} F"
    return f"{celsius:.1f} C"


def _conditions(settings: AlarmSettings, inputs: AlarmInputs) -> dict[str, _Condition]:
    t, s = inputs.temperature, inputs.setpoint
    below = (s - t) if t is not None and inputs.mode != "off" else None
    # mode off ends a temperature alarm; a missing temperature neither raises nor ends one
    off = inputs.mode == "off"
    where = f"the set point {_temperature_text(settings, s)} for {settings.delay_s:g} s"
    bad = [(name, verdict) for name, verdict in inputs.reliability if verdict != "ok"]
    bad_text = ", ".join(f"{name} {verdict}" for name, verdict in bad)
    value_t = None if t is None else round(t, 2)
    above = below
    warm_where = where
    if inputs.warm_setpoint is not None and below is not None and t is not None:
        above = inputs.warm_setpoint - t
        warm_where = (
            f"the cooling set point {_temperature_text(settings, inputs.warm_setpoint)} for "
            f"{settings.delay_s:g} s"
        )
    return {
        "too-cold": _Condition(
            holds=below is not None and below > settings.cold_band_k,
            clears=off or (below is not None and below < settings.cold_band_k - settings.clear_k),
            delay_s=settings.delay_s,
            value=value_t,
            text=f"more than {_delta_text(settings, settings.cold_band_k)} below {where}",
            suppressible=True,
        ),
        "too-warm": _Condition(
            holds=above is not None and -above > settings.warm_band_k,
            clears=off or (above is not None and -above < settings.warm_band_k - settings.clear_k),
            delay_s=settings.delay_s,
            value=value_t,
            text=f"more than {_delta_text(settings, settings.warm_band_k)} above {warm_where}",
            suppressible=True,
        ),
        "sensor-fault": _Condition(
            holds=bool(bad),
            clears=not bad,
            delay_s=settings.sensor_fault_s,
            value=bad_text or None,
            text=f"point(s) unreliable for {settings.sensor_fault_s:g} s: {bad_text}",
        ),
        "output-unconfirmed": _Condition(
            holds=inputs.output_confirmed is False,
            clears=inputs.output_confirmed is not False,
            delay_s=settings.output_unconfirmed_s,
            value=None,
            text=f"the output's read-back has disagreed for {settings.output_unconfirmed_s:g} s",
        ),
        "fail-safe": _Condition(
            holds=inputs.fail_safe,
            clears=not inputs.fail_safe,
            delay_s=0.0,
            value=inputs.fail_safe_reason,
            text="fail-safe: no reliable temperature"
            + (f" ({inputs.fail_safe_reason})" if inputs.fail_safe_reason else ""),
        ),
        "frost-protection": _Condition(
            holds=inputs.frost_protection,
            clears=not inputs.frost_protection,
            delay_s=0.0,
            value=value_t,
            text="frost protection is heating the zone",
        ),
        "source-lockout": _Condition(
            holds=inputs.source_lockout,
            clears=not inputs.source_lockout,
            delay_s=0.0,
            value=None,
            text="the heat source is locked out",
        ),
    }


def evaluate(
    settings: AlarmSettings, state: AlarmState, inputs: AlarmInputs, now: float
) -> tuple[AlarmState, tuple[AlarmEvent, ...]]:
    """One tick: the new alarm state and the raises and clears it brings."""
    suppressed_until = state.suppressed_until
    if state.last_setpoint is not None and inputs.setpoint != state.last_setpoint:
        step = inputs.setpoint - state.last_setpoint
        until = now + settings.suppression_s(step)
        suppressed_until = until if suppressed_until is None else max(suppressed_until, until)
    pending = dict(state.pending)
    alarms: list[Alarm] = []
    events: list[AlarmEvent] = []
    conditions = _conditions(settings, inputs)
    for alarm in state.alarms:
        condition = conditions[alarm.kind]
        if alarm.active:
            if condition.clears:
                cleared = replace(alarm, active=False, since=now, text=f"cleared: {alarm.text}")
                alarms.append(cleared)
                events.append(AlarmEvent(cleared, raised=False))
                pending.pop(alarm.kind, None)
            else:
                alarms.append(replace(alarm, value=condition.value))
            continue
        if not condition.holds:
            pending.pop(alarm.kind, None)
            alarms.append(alarm)
            continue
        began = pending.setdefault(alarm.kind, now)
        quiet = (
            condition.suppressible and suppressed_until is not None and now < suppressed_until
        )
        if now - began >= condition.delay_s and not quiet:
            raised = Alarm(
                alarm.kind, True, now, condition.value, condition.text, acknowledged=False
            )
            alarms.append(raised)
            events.append(AlarmEvent(raised, raised=True))
        else:
            alarms.append(alarm)
    if suppressed_until is not None and now >= suppressed_until:
        suppressed_until = None
    new = AlarmState(
        tuple(alarms),
        tuple(sorted(pending.items())),
        inputs.setpoint,
        suppressed_until,
    )
    return new, tuple(events)


def acknowledge(state: AlarmState, kind: str) -> AlarmState:
    """Mark an active alarm (or ``all`` active ones) acknowledged; :class:`AckRejected` if none."""
    kind = kind.strip().lower()
    if kind != "all" and kind not in ALARM_KINDS:
        raise AckRejected(f"{kind[:40]!r} is not an alarm kind ({', '.join(ALARM_KINDS)} or all)")
    targets = [a.kind for a in state.alarms if a.active and kind in ("all", a.kind)]
    if not targets:
        raise AckRejected("no active alarm" if kind == "all" else f"{kind} is not active")
    return replace(
        state,
        alarms=tuple(
            replace(a, acknowledged=True) if a.kind in targets else a for a in state.alarms
        ),
    )
