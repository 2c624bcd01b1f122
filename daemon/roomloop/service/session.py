"""The broker session: connect, subscribe, answer commands, publish the state, go offline.

One :class:`BrokerSession` per service with a broker. Its tasks (``broker``,
``publish``, ``mqtt-points``) never hold up control: a zone only hands its decision
to the publisher and wakes it (:meth:`BrokerSession.wake`). On every (re)connect it
subscribes to the commands, the MQTT points and the heat sources' remote zones, says
``online`` and sends every retained message again; at stop, :meth:`announce_offline`
sends what is due and ``offline``.
"""

from __future__ import annotations

import asyncio
from collections.abc import Callable
from typing import TYPE_CHECKING, Any, Protocol
from zoneinfo import ZoneInfo

import aiomqtt
import structlog
from paho.mqtt.subscribeoptions import SubscribeOptions

from roomloop.clock import Clock, sleep_or_wake, timeout
from roomloop.config.models import Broker, Zone
from roomloop.io.eventlog import RateLimitedLog
from roomloop.io.mqtt import MqttPoints
from roomloop.service.commands import Command, CommandHandler
from roomloop.service.publisher import OFFLINE, ONLINE, Message, StatePublisher, status_topic

if TYPE_CHECKING:
    from roomloop.bms.alarm_book import AlarmBook



class HeardTopics(Protocol):
    """More topics the session subscribes to, and retained messages it publishes for them
    (the heat sources: :class:`~roomloop.service.sources.SourceRunner`)."""

    def topics(self) -> list[str]: ...

    def handle(self, topic: str, payload: bytes | bytearray | str, now: float) -> bool: ...

    def forget_sent(self) -> None: ...

    def disconnected(self) -> None: ...

    def due(self, now: float) -> list[Message]: ...

    def sent(self, message: Message, now: float) -> None: ...


DEMAND_SUFFIX = "/demand"
"""The plain per-zone topic heat sources listen to (``zone/<zone>/demand``)."""

log = structlog.get_logger("roomloop.service")
_answers_log = RateLimitedLog(log, interval_s=60.0, burst=30)

STOP_BROKER_S = 1.0
"""``clock.io`` seconds the last state and ``offline`` may take at stop."""
ANSWER_S = 5.0
SEND_S = 10.0
BURST_S = 0.05
"""Clock seconds the publisher waits after a wake, so a burst of zone updates is one round."""
POINTS_TICK_S = 1.0
RECONNECT_MIN_S = 0.5
RECONNECT_MAX_S = 30.0


class BrokerSession:
    """The service's side of the broker; ``apply`` hands a parsed command to its zone."""

    def __init__(
        self,
        broker: Broker,
        prefix: str,
        clock: Clock,
        *,
        publisher: StatePublisher,
        mqtt_points: MqttPoints,
        zones: dict[str, Zone],
        apply: Callable[[Command], None],
        units: str,
        tz: ZoneInfo,
        refusals: tuple[type[Exception], ...],
        alarms: AlarmBook | None = None,
        durability: Callable[[], str] | None = None,
        program_next: Callable[[str, float], float | None] | None = None,
        sources: HeardTopics | None = None,
    ) -> None:
        from roomloop.io.broker import BrokerConnection, LastWill

        self.prefix = prefix
        self.clock = clock
        self.publisher = publisher
        self.alarms = alarms
        """The zones' alarms: published retained beside the states, acknowledged by command."""
        self.mqtt_points = mqtt_points
        self.sources = sources
        """The heat sources: their remote zones' topics, their retained state."""
        self.commands = CommandHandler(
            prefix,
            zones,
            apply,
            units=units,
            tz=tz,
            rate_per_min=broker.command_rate_per_min,
            refusals=refusals,
            durability=durability,
            program_next=program_next,
        )
        self.connection = BrokerConnection(
            broker,
            will=LastWill(status_topic(prefix), OFFLINE),
            backoff_min_s=RECONNECT_MIN_S,
            backoff_max_s=RECONNECT_MAX_S,
            clock=clock,
        )
        self._wake = asyncio.Event()

    def wake(self) -> None:
        """Something changed: publish soon."""
        self._wake.set()

    @property
    def client(self) -> Any:
        return self.connection.client

    async def run(self) -> None:
        """Keep the session up (reconnecting with backoff), serving messages, until cancelled."""
        await self.connection.run(
            self._on_message, on_connect=self._on_connect, on_disconnect=self._on_disconnect
        )

    def _on_disconnect(self) -> None:
        self.mqtt_points.detach()
        if self.sources is not None:
            self.sources.disconnected()

    async def _on_connect(self, client: Any) -> None:
        heard = [] if self.sources is None else self.sources.topics()
        topics = [*self.commands.topics(), *self.mqtt_points.topics(), *heard]
        for topic in self.commands.topics():
            # Retain as published (MQTT 5): a retained command published while we are
            # subscribed still arrives marked retained, so it is ignored like the others.
            # No local: our own answers on cmd/result do not come back to us.
            options = SubscribeOptions(qos=1, noLocal=True, retainAsPublished=True)
            await client.subscribe(topic, options=options)
        for topic in [*self.mqtt_points.topics(), *heard]:
            await client.subscribe(topic, qos=1)
        await client.publish(status_topic(self.prefix), ONLINE, qos=1, retain=True)
        self.publisher.forget_sent()
        if self.alarms is not None:
            self.alarms.forget_sent()
        if self.sources is not None:
            self.sources.forget_sent()
        self.mqtt_points.attach(client)
        await self.mqtt_points.publish_commands(client)
        self._wake.set()
        log.info("broker.online", prefix=self.prefix, subscriptions=len(topics))

    async def _on_message(self, message: Any) -> None:
        topic = str(message.topic)
        payload = message.payload
        if isinstance(payload, str):
            payload = payload.encode()
        elif not isinstance(payload, bytes | bytearray):
            payload = b"" if payload is None else str(payload).encode()
        now = self.clock.now()
        if self.mqtt_points.handle(topic, payload, now):
            return
        if self.sources is not None and self.sources.handle(topic, payload, now):
            return
        ack = None
        if self.alarms is not None:
            ack = self.alarms.handle_ack(
                topic, bytes(payload), retained=bool(message.retain),
                monotonic=self.clock.monotonic(),
            )
        answer = ack or self.commands.handle(
            topic,
            bytes(payload),
            retained=bool(message.retain),
            now=now,
            monotonic=self.clock.monotonic(),
        )
        if answer is None:
            return
        # rate-limited: a flood of commands must not flood the journal (summarised after)
        _answers_log.event(
            "command", "command.answered", self.clock.monotonic(), topic=topic,
            answer=answer.payload,
        )
        client = self.client
        if client is not None:
            try:
                async with timeout(self.clock.io, ANSWER_S):
                    await client.publish(answer.topic, answer.payload, qos=1, retain=False)
            except Exception as exc:
                log.warning("command.answer_failed", topic=answer.topic, error=str(exc))

    async def publish_loop(self) -> None:
        """Send due retained messages; never blocks a zone (they only set an event)."""
        interval = self.publisher.interval_s
        while True:
            client = self.client
            if client is not None:
                now = self.clock.now()
                try:
                    for message in self._due(now):
                        await self._send(client, message)
                        self.publisher.sent(message, now)
                        if self.alarms is not None:
                            self.alarms.sent(message)
                        if self.sources is not None:
                            self.sources.sent(message, now)
                except (aiomqtt.MqttError, TimeoutError, OSError) as exc:
                    # The broker went away mid-round; after the reconnect everything is resent.
                    log.debug("broker.publish_interrupted", error=str(exc) or type(exc).__name__)
            self._wake.clear()
            await sleep_or_wake(self.clock, min(interval, 30.0), self._wake)
            await self.clock.sleep(BURST_S)

    def _due(self, now: float) -> list[Message]:
        """This round's messages, what other daemons act on first: each zone's ``demand``
        (a heat source may wait for it) and the sources' states, then the rest. Every send
        waits for the broker's acknowledgement, so on a site of many zones the order is
        the latency of a call reaching its source."""
        alarms = [] if self.alarms is None else self.alarms.due()
        sources = [] if self.sources is None else self.sources.due(now)
        messages = [*self.publisher.due(now), *alarms]
        urgent = [m for m in messages if m.topic.endswith(DEMAND_SUFFIX)]
        rest = [m for m in messages if not m.topic.endswith(DEMAND_SUFFIX)]
        return [*urgent, *sources, *rest]

    async def _send(self, client: Any, message: Message) -> None:
        async with timeout(self.clock.io, SEND_S):
            await client.publish(message.topic, message.payload, qos=1, retain=message.retain)

    async def mqtt_points_loop(self) -> None:
        """Read-back timeouts and re-assertion of the MQTT points."""
        if not (self.mqtt_points.inputs or self.mqtt_points.outputs):
            await asyncio.Event().wait()  # nothing to serve; stay as a (sleeping) task
            return
        while True:
            await self.mqtt_points.tick(self.clock.now())
            await self.clock.sleep(POINTS_TICK_S)

    async def announce_offline(self) -> None:
        """At stop: what is due, then ``offline`` (bounded; a missing broker is only logged)."""
        client = self.client
        if client is None:
            return
        try:
            async with timeout(self.clock.io, STOP_BROKER_S):
                now = self.clock.now()
                for message in self._due(now):
                    await self._send(client, message)
                await client.publish(status_topic(self.prefix), OFFLINE, qos=1, retain=True)
        except Exception as exc:
            log.warning("broker.offline_not_sent", error=str(exc) or type(exc).__name__)
        else:
            log.info("broker.offline", prefix=self.prefix)
