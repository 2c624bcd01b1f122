"""Why a broker connection failed or ended, in our words (not aiomqtt's or paho's).

aiomqtt turns every socket error into ``MqttError(str(exc))`` and a lost session into
``Disconnected during message iteration`` or ``[code:7] The connection was lost.``;
an installer reading the journal needs what happened and what to check instead.
"""

from __future__ import annotations

from collections.abc import Iterator

from roomloop.errors import RoomloopError

_CONNECT_REFUSED = {
    1: "the broker refused the MQTT protocol version",
    2: "the broker refused the client id (broker.client_id)",
    3: "the broker is unavailable (it refused the connection)",
    4: "the broker refused the user name or password",
    5: "the broker refused the connection: not authorised (user or ACL)",
}
_REASON_CODES = {  # paho reports a refused CONNACK of MQTT 3.1.1 as these MQTT 5 codes
    132: _CONNECT_REFUSED[1],
    133: _CONNECT_REFUSED[2],
    136: _CONNECT_REFUSED[3],
    134: _CONNECT_REFUSED[4],
    135: _CONNECT_REFUSED[5],
    142: "another client took over the session (same client id)",
}
_CLIENT_CODES = {
    4: "not connected to the broker",
    7: "the connection to the broker was lost",
    8: "a TLS error on the broker connection",
    11: "the broker refused the credentials",
    12: "the broker's access rules refused the request",
    16: "the broker stopped answering (the keepalive expired)",
}
_TEXTS = (
    ("connection refused", "nothing accepts connections at the broker's address "
     "(broker down, or wrong host or port?)"),
    ("name or service not known", "the broker's host name does not resolve"),
    ("temporary failure in name resolution", "the broker's host name does not resolve"),
    ("nodename nor servname", "the broker's host name does not resolve"),
    ("network is unreachable", "the broker's network cannot be reached"),
    ("no route to host", "the broker's host cannot be reached"),
    ("certificate_verify_failed", "the broker's TLS certificate was not accepted "
     "(check broker.tls.ca_file)"),
    ("wrong_version_number", "the broker does not speak TLS on this port"),
    ("ssl", "the TLS handshake with the broker failed"),
    ("connection reset", "the broker closed the connection"),
    ("broken pipe", "the broker closed the connection"),
    ("operation timed out", "the broker did not answer in time"),
    ("timed out", "the broker did not answer in time"),
    ("disconnected during message iteration", "the connection to the broker was lost"),
    ("connection was lost", "the connection to the broker was lost"),
)


def _chain(exc: BaseException) -> Iterator[BaseException]:
    seen: set[int] = set()
    current: BaseException | None = exc
    while current is not None and id(current) not in seen:
        seen.add(id(current))
        yield current
        current = current.__cause__ or current.__context__


def describe_broker_error(exc: BaseException) -> str:
    """One line saying why the broker connection failed or ended."""
    if isinstance(exc, RoomloopError):  # already ours (a missing TLS file, a password)
        return str(exc)
    from aiomqtt.exceptions import MqttCodeError, MqttConnectError

    for item in _chain(exc):
        if not isinstance(item, MqttCodeError):
            continue
        rc = item.rc
        code = getattr(rc, "value", rc)
        if isinstance(item, MqttConnectError) and isinstance(rc, int) and rc in _CONNECT_REFUSED:
            return _CONNECT_REFUSED[rc]
        if not isinstance(rc, int) and isinstance(code, int) and code in _REASON_CODES:
            return _REASON_CODES[code]
        if isinstance(rc, int) and rc in _CLIENT_CODES:
            return _CLIENT_CODES[rc]
    text = " ".join(str(item) for item in _chain(exc)).lower()
    for fragment, words in _TEXTS:
        if fragment in text:
            return words
    detail = str(exc).strip() or type(exc).__name__
    return f"the broker connection failed ({detail})"
