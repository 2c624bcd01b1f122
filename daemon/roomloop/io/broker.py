"""The site's broker connection: credentials, TLS, last will, reconnection with backoff.

:class:`BrokerConnection` turns a :class:`~roomloop.config.models.Broker` into
aiomqtt clients and runs the usual loop: connect, call ``on_connect`` (subscribe,
publish ``online``, attach the MQTT points), hand every message to
``on_message``, and on a lost connection call ``on_disconnect`` and try again
after a pause that doubles up to ``backoff_max_s``. A refused password, a bad
certificate or an unreachable broker never ends the loop, they are logged.
"""

from __future__ import annotations

import asyncio
import contextlib
import inspect
import os
import ssl
from collections.abc import Awaitable, Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import aiomqtt

from roomloop.backoff import Backoff
from roomloop.clock import Clock, RealClock, timeout
from roomloop.config.models import Broker
from roomloop.errors import BrokerError
from roomloop.io.broker_errors import describe_broker_error
from roomloop.io.eventlog import RateLimitedLog, get_logger

log = get_logger("broker")

MessageHandler = Callable[[aiomqtt.Message], Awaitable[None] | None]
ClientHook = Callable[[aiomqtt.Client], Awaitable[None] | None]


@dataclass(frozen=True, slots=True)
class LastWill:
    """Published by the broker when we vanish (e.g. ``<prefix>/status`` = ``offline``, retained)."""

    topic: str
    payload: str
    qos: int = 1
    retain: bool = True


def endpoint_of(broker: Broker) -> str:
    scheme = "mqtts" if broker.tls is not None else "mqtt"
    return f"{scheme}://{broker.host}:{broker.port}"


class BrokerSetupError(BrokerError):
    """A file or variable the site's broker section names is missing or unreadable.

    The user's configuration mistake, not the broker's: ``roomloop run`` and ``probe``
    stop at once with exit 2 instead of retrying a connection that cannot work.
    """


def _file_problem(path: str) -> str | None:
    """Why ``path`` cannot be read as a file (``no such file`` ...), or ``None``."""
    if not os.path.exists(path):
        return "no such file"
    if os.path.isdir(path):
        return "is a folder, not a file"
    if not os.access(path, os.R_OK):
        return "not readable (permission denied)"
    return None


def check_broker_files(broker: Broker, env: Mapping[str, str] | None = None) -> None:
    """Check every file and variable ``broker`` names before a connection is tried.

    Raises :class:`BrokerSetupError` naming the key and the file, e.g.
    ``broker.tls.ca_file /etc/roomloop/broker-ca.pem: no such file`` (the TLS
    library's own error names neither).
    """
    where = endpoint_of(broker)
    if broker.tls is not None:
        for key in ("ca_file", "cert_file", "key_file"):
            path = getattr(broker.tls, key)
            problem = None if path is None else _file_problem(path)
            if problem is not None:
                raise BrokerSetupError(f"broker.tls.{key} {path}: {problem}", endpoint=where)
    read_password(broker, env)


def read_password(broker: Broker, env: Mapping[str, str] | None = None) -> str | None:
    """The password from ``password_file`` (first line) or ``password_env``.

    Raises :class:`BrokerSetupError` when the file or variable is missing or empty.
    """
    env = os.environ if env is None else env
    where = endpoint_of(broker)
    if broker.password_file is not None:
        path = broker.password_file
        problem = _file_problem(path)
        if problem is not None:
            # The key only, never its value: a password typed there by mistake stays unseen.
            raise BrokerSetupError(f"broker.password_file: {problem}", endpoint=where)
        try:
            text = Path(path).read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)
            raise BrokerSetupError(
                f"broker.password_file: cannot read it: {reason}", endpoint=where
            ) from None
        lines = text.splitlines()
        if not lines or not lines[0]:
            raise BrokerSetupError("broker.password_file: the first line is empty", endpoint=where)
        return lines[0]
    if broker.password_env is not None:
        value = env.get(broker.password_env)
        if not value:
            raise BrokerSetupError(
                "broker.password_env: the environment variable it names is not set or empty",
                endpoint=where,
            )
        return value
    return None


def client_options(
    broker: Broker, will: LastWill | None = None, env: Mapping[str, str] | None = None
) -> dict[str, Any]:
    """Keyword arguments for ``aiomqtt.Client`` from the site's broker section.

    Raises :class:`BrokerSetupError` for a missing TLS or password file or variable.
    """
    check_broker_files(broker, env)
    options: dict[str, Any] = {
        "hostname": broker.host,
        "port": broker.port,
        "identifier": broker.client_id,
        "keepalive": broker.keepalive_s,
        "username": broker.username,
        "password": read_password(broker, env),
        "timeout": 10.0,
        # MQTT 5: a subscription can ask for the retain flag as published (session.py),
        # so a retained command is known as one whenever it arrives (docs/topics.md).
        "protocol": aiomqtt.ProtocolVersion.V5,
    }
    if will is not None:
        options["will"] = aiomqtt.Will(will.topic, will.payload, qos=will.qos, retain=will.retain)
    if broker.tls is not None:
        tls = broker.tls
        options["tls_params"] = aiomqtt.TLSParameters(
            ca_certs=tls.ca_file,
            certfile=tls.cert_file,
            keyfile=tls.key_file,
            cert_reqs=ssl.CERT_REQUIRED,
        )
        options["tls_insecure"] = tls.insecure
    return options


async def _call(hook: Callable[..., Any] | None, arg: Any) -> None:
    if hook is None:
        return
    result = hook(arg)
    if inspect.isawaitable(result):
        await result


PROBE_EVERY_S = 1.0
"""How often a reconnect pause looks whether the broker's port takes a connection again."""
SHORT_SESSION_S = 10.0
"""A session lost this soon after it was made, twice running, with a fixed client id: the
sign of another client using the same id (the broker hands the session to the newer one)."""


class BrokerConnection:
    """One broker connection, kept up until cancelled.

    >>> conn = BrokerConnection(site.broker, will=LastWill(f"{prefix}/status", "offline"))
    >>> await conn.run(route, on_connect=subscribe_and_announce, on_disconnect=points.detach)
    """

    def __init__(
        self,
        broker: Broker,
        *,
        will: LastWill | None = None,
        backoff_min_s: float = 1.0,
        backoff_max_s: float = 60.0,
        env: Mapping[str, str] | None = None,
        clock: Clock | None = None,
        short_session_s: float = SHORT_SESSION_S,
    ) -> None:
        self.broker = broker
        self.short_session_s = short_session_s
        self.endpoint = endpoint_of(broker)
        self.will = will
        self.backoff_min_s = backoff_min_s
        self.backoff_max_s = backoff_max_s
        self._env = env
        self.clock: Clock = clock if clock is not None else RealClock()
        self.client: aiomqtt.Client | None = None
        """The connected client, or None between connections."""
        self.connected = asyncio.Event()
        self.connections = 0
        """How many times a connection was made (tests and status)."""
        self._events = RateLimitedLog(log, 300.0)
        self._short_sessions = 0

    def make_client(self) -> aiomqtt.Client:
        """A new, not yet connected client (reads the password again, so a rotated one is used)."""
        return aiomqtt.Client(**client_options(self.broker, self.will, self._env))

    async def run(
        self,
        on_message: MessageHandler,
        on_connect: ClientHook | None = None,
        on_disconnect: Callable[[], Awaitable[None] | None] | None = None,
    ) -> None:
        """Connect, serve messages, reconnect with backoff; returns only by cancellation."""
        backoff = Backoff(self.backoff_min_s, self.backoff_max_s)
        delay = backoff.first()
        while True:
            began: float | None = None
            check: asyncio.Task[None] | None = None
            try:
                client = self.make_client()
                async with client:
                    self.client = client
                    self.connections += 1
                    began = self.clock.io.monotonic()
                    if self._short_sessions == 0:
                        delay = backoff.first()
                        self._connected_again()
                    else:
                        # sessions that keep ending at once (another client with our id) are
                        # no recovery until one lasts: the pause keeps growing and the story
                        # stays open, so a tug of war is a few folded lines, not two a second
                        check = asyncio.create_task(
                            self._lasting(client), name="broker:session-check"
                        )
                    await _call(on_connect, client)
                    self.connected.set()
                    async for message in client.messages:
                        await _call(on_message, message)
            except (aiomqtt.MqttError, OSError, BrokerError) as exc:
                self._events.problem(
                    self.endpoint,
                    "broker.disconnected",
                    self.clock.now(),
                    endpoint=self.endpoint,
                    reason=describe_broker_error(exc) + self._session_ended(began),
                    retry_in_s=delay,
                )
            finally:
                if check is not None:
                    check.cancel()
                was_connected = self.client is not None
                self.client = None
                self.connected.clear()
                if was_connected:
                    await _call_noarg(on_disconnect)
            if self._short_sessions == 0 and began is not None:
                delay = backoff.first()  # a session that lasted: the pauses start again
            await self._pause(delay)
            delay = backoff.after(delay)

    def _connected_again(self) -> None:
        log.info("broker.connected", endpoint=self.endpoint, connections=self.connections)
        self._events.recovered(self.endpoint, "broker.reconnected", endpoint=self.endpoint)

    async def _lasting(self, client: aiomqtt.Client) -> None:
        """After a run of short sessions: once this one has lasted, it is a recovery."""
        await self.clock.io.sleep(self.short_session_s)
        if self.client is client:
            self._short_sessions = 0
            self._connected_again()

    def _session_ended(self, began: float | None) -> str:
        """Count a session that ended soon after it was made (``began``: when; None: there
        was no session, a refused or failed connection) under a fixed client id, and the
        words for a run of them (mosquitto closes the older session without a reason code)."""
        if began is None:
            return ""
        lasted = self.clock.io.monotonic() - began
        short = lasted < self.short_session_s and self.broker.client_id is not None
        self._short_sessions = self._short_sessions + 1 if short else 0
        if self._short_sessions < 2:
            return ""
        return (  # the same words each time, so the repeats fold
            f"; the sessions keep ending within {self.short_session_s:g} s of being made: is "
            f"another client using client id {self.broker.client_id!r}? (the broker hands "
            "the session to the newer one)"
        )

    async def _pause(self, delay: float) -> None:
        """The backoff's pause, cut short once the broker's port takes a connection again: a
        broker back after a long outage is reconnected within about ``PROBE_EVERY_S``, not
        after the rest of a pause that grew to ``backoff_max_s``."""
        clock = self.clock.io
        end = clock.monotonic() + delay
        # Only a broker that was away is let in early: one that takes the connection but
        # refuses us (a password, a limit) waits the pause out.
        seen_closed = not await self._port_open()
        while True:
            left = end - clock.monotonic()
            if left <= 0:
                return
            await clock.sleep(min(PROBE_EVERY_S, left))
            if clock.monotonic() >= end:
                return
            if await self._port_open():
                if seen_closed:
                    return
            else:
                seen_closed = True

    async def _port_open(self) -> bool:
        try:
            async with timeout(self.clock.io, PROBE_EVERY_S):
                _reader, writer = await asyncio.open_connection(self.broker.host, self.broker.port)
        except (OSError, TimeoutError):
            return False
        writer.close()
        with contextlib.suppress(OSError):
            await writer.wait_closed()
        return True


async def _call_noarg(hook: Callable[[], Awaitable[None] | None] | None) -> None:
    if hook is None:
        return
    result = hook()
    if inspect.isawaitable(result):
        await result
