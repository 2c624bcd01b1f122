"""What the service publishes: ``status``, each zone's retained state JSON and plain fields.

The payloads are built here from the control core's :class:`ZoneOutputs`, in
the site's units (temperatures absolute, anticipator and droop terms as
differences). :class:`StatePublisher` decides what is due: a zone's state when
something a reader cares about changed, or at least every
``publish_interval_s``; a plain field only when its text changed; everything
again after a reconnect (the broker may have lost its retained messages).
"""

from __future__ import annotations

import datetime as dt
import json
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any, Literal
from zoneinfo import ZoneInfo

import structlog

from roomloop.core.optimum_start import OptimumStartDecision
from roomloop.core.state import ZoneState
from roomloop.core.types import ZoneOutputs
from roomloop.service.optimum_start import published
from roomloop.service.program import Switch
from roomloop.units import delta_from_kelvin, from_celsius

log = structlog.get_logger("roomloop.service")

ONLINE = "online"
OFFLINE = "offline"
PLAIN_FIELDS = ("temperature", "setpoint", "demand", "mode", "level")
DESCRIPTION = "description"
RENDER_LOG_EVERY_S = 300.0
"""Real seconds between two log events about the same zone's view that fails to render."""


def status_topic(prefix: str) -> str:
    return f"{prefix}/status"


def state_topic(prefix: str, zone: str) -> str:
    return f"{prefix}/zone/{zone}/state"


def field_topic(prefix: str, zone: str, field: str) -> str:
    return f"{prefix}/zone/{zone}/{field}"


def _abs(value: float | None, units: str, digits: int = 2) -> float | None:
    if value is None:
        return None
    return round(from_celsius(value, units), digits)


def _delta(value: float, units: str, digits: int = 3) -> float:
    return round(delta_from_kelvin(value, units), digits)


def iso(posix: float, tz: ZoneInfo) -> str:
    return dt.datetime.fromtimestamp(posix, tz).isoformat(timespec="seconds")


OverrideKind = Literal["setpoint", "level"]
Ends = Literal["next-change", "time", "never"]


@dataclass(frozen=True, slots=True)
class Override:
    """A command that sets the zone aside from its program, and when it ends."""

    kind: OverrideKind
    """``setpoint``: a held number; ``level``: a level's set point chosen by command."""
    ends: Ends
    """``next-change``: at the program's next change; ``time``: at ``until``; ``never``:
    until another command."""
    until: float | None
    """When it ends (POSIX seconds), None for ``never``."""


def override_of(state: ZoneState, program_next: Switch | None) -> Override | None:
    """What overrides the zone's program now (None: the program rules, or the zone is off).

    A level set in ``auto`` lasts until the program's level next changes; a hold until its
    ``hold_until``, which is the program's next change when the command asked for that
    (``until: next-change``) or happens to name that instant: either way the hold ends when
    the program switches, and the state says so.
    """
    if state.mode == "auto" and state.level_override is not None:
        if program_next is None:
            return Override("level", "never", None)
        return Override("level", "next-change", program_next.at)
    if state.mode != "hold":
        return None
    kind: OverrideKind = "setpoint" if state.hold_setpoint is not None else "level"
    until = state.hold_until
    if until is None:
        return Override(kind, "never", None)
    if program_next is not None and until == program_next.at:
        return Override(kind, "next-change", until)
    return Override(kind, "time", until)


@dataclass(frozen=True, slots=True)
class OutputView:
    """What the service knows of one of a zone's outputs besides its heating one."""

    point: str
    commanded: bool | None = None
    read_back: bool | None = None
    verdict: str | None = None


def output_block(
    point: str, commanded: bool | None, read_back: bool | None, verdict: str | None
) -> dict[str, Any]:
    """An output's ``point``, ``commanded``, ``read_back``, ``agrees`` and ``verdict``."""
    return {
        "point": point,
        "commanded": commanded,
        # what the device last read back; unknown (null) while it cannot be reached
        "read_back": None if verdict == "comm-failure" else read_back,
        "agrees": output_agrees(verdict),
        "verdict": verdict,
    }


@dataclass(frozen=True, slots=True)
class ZoneView:
    """One zone's latest decision plus what the service adds around it."""

    zone: str
    outputs: ZoneOutputs
    at: float
    """When the decision was taken (POSIX seconds, on the service's clock)."""
    output_point: str
    output_verdict: str | None = None
    output_read_back: bool | None = None
    """What the device last reported its output to be (None: unknown or no read-back)."""
    hold_until: float | None = None
    next_change: Switch | None = None
    fail_safe_policy: str | None = None
    """The zone's configured fail-safe policy, published whether or not it runs, so a
    dashboard can show what the zone will do before a sensor fails."""
    persistence: str = "ok"
    """``ok``, or ``failed: <reason>`` while the state cannot be saved (service/persist.py)."""
    early_start: OptimumStartDecision | None = None
    """Optimum start's decision (``service.optimum_start``), None while it is off."""
    output_commanded: bool | None = None
    """What the service last wrote to the output (None: nothing yet)."""
    override: Override | None = None
    program_level: str | None = None
    """The level the program (weekly, calendar, optimum start) asks for now."""
    window_1h_s: float = 3600.0
    """Seconds of the last hour the hour's figures cover (less in the first hour)."""
    cooling_output: OutputView | None = None
    """A zone with a cooling call: its cooling output."""
    changeover_output: OutputView | None = None
    """A zone with a changeover (reversing valve) output: that output."""


def output_agrees(verdict: str | None) -> bool | None:
    """Whether the output's read-back agrees with what was written (None: not known: no
    read-back configured, not read back yet, or the device cannot be reached). The alarms
    and the BMS face use this verdict."""
    return {"ok": True, "mismatch": False}.get(verdict) if verdict is not None else None


def zone_outputs_agree(verdicts: Iterable[str | None]) -> bool | None:
    """Whether a zone's outputs all read back as written: False if any disagrees, True if
    at least one agrees and none disagrees, None while none can be known (the alarm's
    ``output-unconfirmed`` input for a zone with cooling or changeover outputs too)."""
    agreement = [output_agrees(v) for v in verdicts]
    if False in agreement:
        return False
    return True if True in agreement else None


def _view_block(view: OutputView | None) -> dict[str, Any] | None:
    if view is None:
        return None
    return output_block(view.point, view.commanded, view.read_back, view.verdict)


def shown_level(view: ZoneView) -> str | None:
    """The level whose set point is in force; None while a held number is."""
    if view.override is not None and view.override.kind == "setpoint":
        return None
    return view.outputs.level


def state_payload(view: ZoneView, *, units: str, tz: ZoneInfo) -> dict[str, Any]:
    """The retained state JSON of one zone (with the cooling keys when the zone can cool)."""
    payload = _heating_payload(view, units=units, tz=tz)
    cooling = view.outputs.cooling
    if cooling is not None:
        payload.update(
            {
                "changeover": cooling.changeover,
                "cooling_setpoint": _abs(cooling.setpoint, units),
                "call": cooling.call,
                "cooling": {
                    "demand": cooling.demand,
                    "reason": cooling.reason,
                    "side": cooling.side,
                    "changeover_output": cooling.changeover_output,
                    "anticipator": _delta(cooling.anticipator_k, units),
                    "droop": _delta(cooling.droop_k, units),
                    "on_fraction_1h": round(cooling.on_fraction_1h, 3),
                    "cycles_1h": cooling.cycles_1h,
                    "output": _view_block(view.cooling_output),
                    "changeover_output_device": _view_block(view.changeover_output),
                },
            }
        )
    return payload


def _heating_payload(view: ZoneView, *, units: str, tz: ZoneInfo) -> dict[str, Any]:
    out = view.outputs
    return {
        "zone": view.zone,
        "timestamp": iso(view.at, tz),
        "units": units,
        "temperature": _abs(out.temperature, units),
        "setpoint": _abs(out.setpoint, units),
        "level": shown_level(view),
        "program_level": view.program_level,
        "mode": out.mode,
        "override": None
        if view.override is None
        else {
            "kind": view.override.kind,
            "ends": view.override.ends,
            "until": None if view.override.until is None else iso(view.override.until, tz),
        },
        "hold_until": None if view.hold_until is None else iso(view.hold_until, tz),
        "demand": out.demand,
        "reason": out.reason,
        "anticipator": _delta(out.anticipator_k, units),
        "droop": _delta(out.droop_k, units),
        "reliability": dict(out.reliability),
        "fail_safe": out.fail_safe,
        "fail_safe_policy": out.fail_safe_policy or view.fail_safe_policy,
        "fail_safe_reason": out.fail_safe_reason,
        "on_fraction_1h": round(out.on_fraction_1h, 3),
        "cycles_1h": out.cycles_1h,
        "window_1h_s": round(view.window_1h_s),
        "output": output_block(
            view.output_point, view.output_commanded, view.output_read_back, view.output_verdict
        ),
        "next_change": None
        if view.next_change is None
        else {
            "at": iso(view.next_change.at, tz),
            "level": view.next_change.level,
            "by": view.next_change.by,
        },
        "persistence": view.persistence,
        "early_start": published(view.early_start, tz, units),
    }


NO_VALUE = ""
"""A plain topic with no value carries an empty payload (docs/topics.md): retained, it
deletes the broker's retained message, so a late subscriber sees no value either."""


def plain_fields(view: ZoneView, *, units: str) -> dict[str, str]:
    """The plain retained per-field values for dashboards (:data:`NO_VALUE` for none)."""
    out = view.outputs
    temperature = _abs(out.temperature, units)
    setpoint = _abs(out.setpoint, units)
    level = shown_level(view)
    return {
        "temperature": NO_VALUE if temperature is None else f"{temperature:.2f}",
        "setpoint": f"{setpoint:.2f}",
        "demand": "true" if out.demand else "false",
        "mode": out.mode,
        "level": NO_VALUE if level is None else level,
    }


def _significant(payload: dict[str, Any]) -> str:
    """What counts as a change: everything but the timestamp and the slowly drifting terms."""
    keep = {
        k: v
        for k, v in payload.items()
        if k not in ("timestamp", "anticipator", "droop", "on_fraction_1h", "window_1h_s")
    }
    if isinstance(keep.get("temperature"), float):
        keep["temperature"] = round(keep["temperature"], 1)
    cooling = keep.get("cooling")
    if isinstance(cooling, dict):
        keep["cooling"] = {
            k: v
            for k, v in cooling.items()
            if k not in ("anticipator", "droop", "on_fraction_1h")
        }
    return json.dumps(keep, sort_keys=True)


@dataclass(frozen=True, slots=True)
class Message:
    topic: str
    payload: str
    retain: bool = True


class StatePublisher:
    """Decides which retained messages are due; the broker session sends them."""

    def __init__(self, prefix: str, *, units: str, tz: ZoneInfo, interval_s: float) -> None:
        self.prefix = prefix
        self.units = units
        self.tz = tz
        self.interval_s = interval_s
        self._views: dict[str, ZoneView] = {}
        self._descriptions: dict[str, str] = {}
        self._sent_state: dict[str, tuple[str, float]] = {}
        self._sent_fields: dict[tuple[str, str], str] = {}
        self._render_logged: dict[str, float] = {}

    def update(self, view: ZoneView) -> None:
        self._views[view.zone] = view

    def describe(self, zone: str, payload: dict[str, Any]) -> None:
        """The zone's retained description (service/description.py): sent once per connection."""
        self._descriptions[zone] = json.dumps(payload)

    def views(self) -> Iterable[ZoneView]:
        return self._views.values()

    def forget_sent(self) -> None:
        """After a reconnect: everything is due again."""
        self._sent_state.clear()
        self._sent_fields.clear()

    def due(self, now: float) -> list[Message]:
        """Messages to send now; call :meth:`sent` for each one the broker acknowledged."""
        messages: list[Message] = []
        for zone, text in self._descriptions.items():
            if self._sent_fields.get((zone, DESCRIPTION)) != text:
                messages.append(Message(field_topic(self.prefix, zone, DESCRIPTION), text))
        for zone, view in self._views.items():
            try:
                payload = state_payload(view, units=self.units, tz=self.tz)
                fields = plain_fields(view, units=self.units)
                state = json.dumps(payload)
            except Exception as exc:  # one zone's bad view must not silence the others
                self._render_failed(zone, exc, now)
                continue
            key = _significant(payload)
            last = self._sent_state.get(zone)
            if last is None or last[0] != key or now - last[1] >= self.interval_s:
                messages.append(Message(state_topic(self.prefix, zone), state))
            for field, text in fields.items():
                if self._sent_fields.get((zone, field)) != text:
                    messages.append(Message(field_topic(self.prefix, zone, field), text))
        return messages

    def _render_failed(self, zone: str, exc: Exception, now: float) -> None:
        """Log a view that cannot be rendered, at most once per ``RENDER_LOG_EVERY_S``."""
        last = self._render_logged.get(zone)
        if last is not None and now - last < RENDER_LOG_EVERY_S:
            return
        self._render_logged[zone] = now
        log.error("publish.view_failed", zone=zone, error=str(exc) or type(exc).__name__)

    def sent(self, message: Message, now: float) -> None:
        parts = message.topic[len(self.prefix) + 1 :].split("/")
        if len(parts) != 3 or parts[0] != "zone":
            return
        zone, field = parts[1], parts[2]
        if field == "state":
            payload = json.loads(message.payload)
            self._sent_state[zone] = (_significant(payload), now)
        else:
            self._sent_fields[(zone, field)] = message.payload
