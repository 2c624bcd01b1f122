"""MQTT client ids for roomloop's helper commands, never the running service's own.

A broker allows one session per client id: a second connection with the site's
``broker.client_id`` throws the first off (the service's ``status`` flaps to
``offline``). ``probe`` and every other helper command (history, report ...)
connect as ``<client_id>-<role>-<pid>``, or ``roomloop-<role>-<pid>`` when the
site sets no client id, so neither each other nor the service is disturbed.
"""

from __future__ import annotations

import os

from roomloop.config.models import Broker

MAX_CLIENT_ID_BYTES = 65535
"""MQTT's limit for a UTF-8 string field (MQTT 3.1.1 section 1.5.3)."""


def helper_client_id(client_id: str | None, role: str, pid: int | None = None) -> str:
    """The client id a helper command ``role`` (``probe``, ``history``) connects with."""
    suffix = f"-{role}-{os.getpid() if pid is None else pid}"
    base = client_id if client_id else "roomloop"
    room = MAX_CLIENT_ID_BYTES - len(suffix.encode())
    return base.encode()[:room].decode("utf-8", "ignore") + suffix


def helper_broker(broker: Broker, role: str) -> Broker:
    """The site's broker section with the helper's own client id (and no other change)."""
    return broker.model_copy(update={"client_id": helper_client_id(broker.client_id, role)})
