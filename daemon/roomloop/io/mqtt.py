"""MQTT points: input temperatures from topics, outputs switched by command payloads.

The service owns the one broker connection (see :mod:`roomloop.io.broker`);
:class:`MqttPoints` only routes: the service subscribes to :meth:`MqttPoints.topics`,
passes every message to :meth:`MqttPoints.handle`, calls :meth:`MqttPoints.attach`
with the connected client after each (re)connect and :meth:`MqttPoints.detach`
when it is lost, and calls :meth:`MqttPoints.tick` now and then so read-backs
time out and commands are re-asserted.

Nothing a payload contains can crash this: garbage, truncated JSON, NaN,
infinity, wrong types and huge payloads become a ``comm-failure`` sample and one
rate-limited log event naming the point, the topic and the raw payload. A number
is delivered in Celsius as it came, with its arrival time: range and staleness are
the core's judgement (:mod:`roomloop.core.reliability`).
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Any, Protocol

from roomloop.clock import Clock, RealClock, wait_for
from roomloop.config.models import MqttInput, MqttOutput
from roomloop.core.types import PointSample, Transport
from roomloop.io.eventlog import RateLimitedLog, get_logger
from roomloop.io.ports import OutputState, OutputVerdict
from roomloop.units import to_celsius

log = get_logger("mqtt")

MAX_PAYLOAD_BYTES = 16384
"""A temperature fits in far less; anything bigger is refused unread."""
PUBLISH_TIMEOUT_S = 10.0


class PayloadError(ValueError):
    """A payload that holds no usable number; the message says why."""


class Publisher(Protocol):
    """What :class:`MqttPoints` needs of a client: ``aiomqtt.Client`` fits."""

    async def publish(
        self, topic: str, payload: str, qos: int = ..., retain: bool = ...
    ) -> None: ...


@dataclass(frozen=True, slots=True)
class Parsed:
    """One input message read: Celsius (or None) and the transport verdict."""

    value: float | None
    transport: Transport
    raw: float | None
    detail: str | None = None


def _number(value: Any, where: str) -> float:
    if isinstance(value, bool) or value is None:
        raise PayloadError(f"{where} is {json.dumps(value)}, not a number")
    if isinstance(value, int | float):
        number = float(value)
    elif isinstance(value, str):
        try:
            number = float(value.strip())
        except ValueError:
            raise PayloadError(f"{where} {value[:40]!r} is not a number") from None
    else:
        raise PayloadError(f"{where} is a {type(value).__name__}, not a number")
    if not math.isfinite(number):
        raise PayloadError(f"{where} is not a finite number ({number})")
    return number


def parse_payload(payload: bytes | bytearray | str, field: str | None) -> float:
    """The number in a plain or JSON payload (``field``: dotted path, list indices as digits).

    Raises :class:`PayloadError` for anything else; never anything other than that.
    """
    if isinstance(payload, str):
        payload = payload.encode("utf-8", "surrogatepass")
    if len(payload) > MAX_PAYLOAD_BYTES:
        raise PayloadError(f"payload of {len(payload)} bytes is too large")
    try:
        text = bytes(payload).decode("utf-8")
    except UnicodeDecodeError:
        raise PayloadError("payload is not UTF-8 text") from None
    if field is None:
        stripped = text.strip()
        if stripped.startswith('"'):
            try:
                return _number(json.loads(stripped), "payload")
            except (ValueError, RecursionError):
                raise PayloadError("payload is not a number") from None
        return _number(stripped, "payload")
    try:
        document: Any = json.loads(text)
    except (ValueError, RecursionError):
        raise PayloadError("payload is not valid JSON") from None
    node = _walk(document, field)
    return _number(node, f"field {field!r}")


def _walk(document: Any, field: str) -> Any:
    """The node at the dotted path ``field`` of a JSON document, or :class:`PayloadError`."""
    node = document
    walked: list[str] = []
    for key in field.split("."):
        walked.append(key)
        here = ".".join(walked)
        if isinstance(node, dict):
            if key not in node:
                raise PayloadError(f"no field {here!r} in the payload")
            node = node[key]
        elif isinstance(node, list):
            if not key.isdigit() or int(key) >= len(node):
                raise PayloadError(f"no element {here!r} in the payload")
            node = node[int(key)]
        else:
            raise PayloadError(f"{'.'.join(walked[:-1]) or 'payload'} holds no field {key!r}")
    return node


def judge_payload(point: MqttInput, payload: bytes | bytearray | str) -> Parsed:
    """Parse, scale and convert to Celsius; never raises. Any finite number is ``ok``."""
    try:
        raw = parse_payload(payload, point.field)
    except PayloadError as exc:
        return Parsed(None, "comm-failure", None, str(exc))
    celsius = to_celsius(raw * point.scale + point.offset, point.unit)
    if not math.isfinite(celsius):
        return Parsed(None, "over-range" if celsius > 0 else "under-range", raw, "overflows")
    return Parsed(celsius, "ok", raw)


Payload = bytes | bytearray | str | int | float | None
"""What ``aiomqtt.Message.payload`` may hold."""


def _as_bytes(payload: Payload) -> bytes:
    if payload is None:
        return b""
    if isinstance(payload, str):
        return payload.encode("utf-8", "surrogatepass")
    if isinstance(payload, bytes | bytearray):
        return bytes(payload)
    return str(payload).encode("ascii")


def _show(payload: bytes | bytearray | str, limit: int = 80) -> str:
    text = repr(bytes(payload[:limit]) if not isinstance(payload, str) else payload[:limit])
    return text + ("..." if len(payload) > limit else "")


class MqttPoints:
    """The site's MQTT input and output points, fed by the service's broker connection."""

    def __init__(
        self,
        inputs: Sequence[MqttInput] = (),
        outputs: Sequence[MqttOutput] = (),
        *,
        clock: Clock | None = None,
        log_interval_s: float = 300.0,
    ) -> None:
        self.inputs = {p.name: p for p in inputs}
        self.outputs = {p.name: p for p in outputs}
        self._by_topic: dict[str, list[MqttInput]] = {}
        for point in inputs:
            self._by_topic.setdefault(point.topic, []).append(point)
        self._by_state_topic: dict[str, list[MqttOutput]] = {}
        for out in outputs:
            if out.state_topic is not None:
                self._by_state_topic.setdefault(out.state_topic, []).append(out)
        self.clock: Clock = clock if clock is not None else RealClock()
        self._clock = self.clock.now
        self._events = RateLimitedLog(log, log_interval_s)
        self._samples: dict[str, PointSample] = {
            name: PointSample(name, None, None) for name in self.inputs
        }
        self._outputs = {name: OutputState(name) for name in self.outputs}
        self._published_on_this_connection: set[str] = set()
        self._client: Publisher | None = None
        self.last_payload: dict[str, bytes] = {}
        """The last raw payload per input point and per output state topic (``probe`` shows it)."""

    # ------------------------------------------------------------------ routing

    def topics(self) -> tuple[str, ...]:
        """Every topic to subscribe to: input topics and output state topics."""
        return tuple(sorted({*self._by_topic, *self._by_state_topic}))

    def handle(self, topic: str, payload: Payload, now: float) -> bool:
        """Ingest one message; returns whether a point uses this topic. Bad payloads never raise.

        ``payload`` may be what ``aiomqtt.Message.payload`` holds (bytes, str, a number, None).
        """
        used = False
        raw = _as_bytes(payload)
        for point in self._by_topic.get(topic, ()):
            used = True
            self._ingest(point, raw, now)
        for out in self._by_state_topic.get(topic, ()):
            used = True
            self.last_payload[out.name] = raw[:256]
            self._state_arrived(out, raw, now)
        return used

    def _ingest(self, point: MqttInput, payload: bytes, now: float) -> None:
        self.last_payload[point.name] = payload[:256]
        parsed = judge_payload(point, payload)
        self._samples[point.name] = PointSample(
            point.name, parsed.value, now, parsed.transport, parsed.raw
        )
        if parsed.transport == "ok":
            self._events.recovered(
                point.name, "mqtt.point_recovered", now, point=point.name, topic=point.topic
            )
            return
        self._events.problem(
            point.name,
            "mqtt.point_unreliable",
            now,
            point=point.name,
            link="broker",
            topic=point.topic,
            reliability=parsed.transport,
            raw=_show(payload),
            detail=parsed.detail,
        )

    # ------------------------------------------------------------------ inputs

    def input_names(self) -> tuple[str, ...]:
        return tuple(self.inputs)

    def samples(self, now: float) -> dict[str, PointSample]:
        """Latest sample per input point (none yet: no value, no arrival time)."""
        return dict(self._samples)

    # ------------------------------------------------------------------ outputs

    def output_names(self) -> tuple[str, ...]:
        return tuple(self.outputs)

    def output_state(self, name: str) -> OutputState:
        return self._outputs[name]

    def attach(self, client: Publisher) -> None:
        """Connected: commands go out through ``client``; call :meth:`publish_commands` next."""
        self._client = client
        self._published_on_this_connection.clear()

    def detach(self) -> None:
        """The connection is gone: commands wait until the next :meth:`attach`."""
        self._client = None

    @property
    def request_timeout_s(self) -> float:
        """The longest one command publish may take."""
        return PUBLISH_TIMEOUT_S

    async def set_output_once(self, name: str, on: bool, timeout_s: float) -> OutputState:
        """At stop: one publish (it is one try anyway; the caller bounds the whole stop)."""
        return await self.set_output(name, on)

    async def set_output(self, name: str, on: bool) -> OutputState:
        """Record the wanted state, publish it now if connected (QoS 1); read-back comes later."""
        out = self.outputs[name]
        self._outputs[name] = replace(
            self._outputs[name], wanted=on, verdict="pending", detail=None, written_at=None
        )
        if self._client is not None:
            await self._publish(self._client, out, self._clock())
        return self._outputs[name]

    async def _publish(self, client: Publisher, out: MqttOutput, now: float) -> None:
        state = self._outputs[out.name]
        if state.wanted is None:
            return
        payload = out.on_payload if state.wanted else out.off_payload
        try:
            await wait_for(
                self.clock.io,
                client.publish(out.command_topic, payload, qos=1, retain=False),
                PUBLISH_TIMEOUT_S,
            )
        except Exception as exc:  # aiomqtt.MqttError when the broker went away, or our timeout
            self._outputs[out.name] = replace(
                state, verdict="comm-failure", detail=f"publish failed: {exc}"
            )
            self._events.problem(
                out.name,
                "mqtt.publish_failed",
                now,
                point=out.name,
                topic=out.command_topic,
                payload=payload,
                reason=str(exc) or type(exc).__name__,
            )
            return
        self._published_on_this_connection.add(out.name)
        verdict: OutputVerdict
        detail: str | None
        if out.state_topic is None:
            verdict, detail = "unverified", None
        elif (
            state.confirmed == state.wanted
            and state.confirmed_at is not None
            and state.verdict == "ok"
        ):
            verdict, detail = "ok", None  # a re-assertion of a confirmed state
        else:
            verdict, detail = "pending", None
        self._outputs[out.name] = replace(state, verdict=verdict, detail=detail, written_at=now)

    def _state_arrived(self, out: MqttOutput, payload: bytes, now: float) -> None:
        text = payload.decode("utf-8", "replace").strip()
        confirmed = True if text == out.on_payload else False if text == out.off_payload else None
        state = replace(self._outputs[out.name], confirmed=confirmed, confirmed_at=now)
        if state.wanted is not None and confirmed == state.wanted:
            state = replace(state, verdict="ok", detail=None)
            self._events.recovered(out.name, "mqtt.output_confirmed", point=out.name)
        elif confirmed is None:
            self._events.problem(
                out.name,
                "mqtt.state_unknown",
                now,
                point=out.name,
                topic=out.state_topic,
                raw=_show(payload),
            )
        self._outputs[out.name] = state

    async def publish_commands(
        self, client: Publisher | None = None, now: float | None = None
    ) -> list[str]:
        """Publish each commanded output not sent on this connection, failed, or due again.

        Returns the names published. Call after :meth:`attach` and now and then (``tick`` does).
        """
        client = client if client is not None else self._client
        if client is None:
            return []
        now = self._clock() if now is None else now
        sent: list[str] = []
        for name, out in self.outputs.items():
            state = self._outputs[name]
            if state.wanted is None:
                continue
            due = (
                name not in self._published_on_this_connection
                or state.verdict == "comm-failure"
                or state.written_at is None
                or now - state.written_at >= out.reassert_s
            )
            if due:
                await self._publish(client, out, now)
                sent.append(name)
        return sent

    def check_read_back(self, now: float) -> list[OutputState]:
        """Turn read-backs that did not come within ``state_timeout_s`` into ``mismatch``."""
        changed: list[OutputState] = []
        for name, out in self.outputs.items():
            state = self._outputs[name]
            if out.state_topic is None or state.verdict != "pending" or state.written_at is None:
                continue
            if now - state.written_at < out.state_timeout_s:
                continue
            if state.confirmed_at is not None and state.confirmed_at >= state.written_at:
                detail = f"state topic says {state.confirmed!r}, wanted {state.wanted!r}"
            else:
                detail = f"no state within {out.state_timeout_s} s"
            state = replace(state, verdict="mismatch", detail=detail)
            self._outputs[name] = state
            self._events.problem(
                name,
                "mqtt.output_mismatch",
                now,
                point=name,
                topic=out.state_topic,
                wanted=state.wanted,
                confirmed=state.confirmed,
                detail=detail,
            )
            changed.append(state)
        return changed

    async def tick(self, now: float | None = None) -> None:
        """Time out read-backs and re-assert due commands; call every few seconds."""
        now = self._clock() if now is None else now
        self.check_read_back(now)
        await self.publish_commands(None, now)
