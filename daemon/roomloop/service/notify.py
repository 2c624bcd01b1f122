"""sd_notify in a few lines, and a watchdog fed only while every control loop makes progress.

systemd passes ``NOTIFY_SOCKET`` (a path, or ``@name`` for the abstract
namespace) to a ``Type=notify`` service; a datagram with ``READY=1``,
``WATCHDOG=1``, ``STOPPING=1`` or ``STATUS=...`` tells it how we are. Without
``NOTIFY_SOCKET`` (a terminal, a test) every call does nothing.
"""

from __future__ import annotations

import os
import socket
import time
from collections.abc import Callable, Iterable

import structlog

log = structlog.get_logger("roomloop.notify")


def notify(*fields: str) -> bool:
    """Send ``fields`` (``"READY=1"``, ``"STATUS=..."``) to systemd; False if there is none."""
    address = os.environ.get("NOTIFY_SOCKET")
    if not address or not fields:
        return False
    if address.startswith("@"):
        address = "\0" + address[1:]
    try:
        with socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM | socket.SOCK_CLOEXEC) as sock:
            # Never block the event loop: a listener that does not read drops the message.
            sock.setblocking(False)
            sock.sendto("\n".join(fields).encode(), address)
    except OSError as exc:
        log.warning("notify.send_failed", error=str(exc))
        return False
    return True


def watchdog_interval_s() -> float | None:
    """Half of systemd's ``WatchdogSec`` (the usual feeding rate); None without a watchdog."""
    usec = os.environ.get("WATCHDOG_USEC")
    pid = os.environ.get("WATCHDOG_PID")
    if not usec or (pid and pid != str(os.getpid())):
        return None
    try:
        value = int(usec)
    except ValueError:
        return None
    return value / 2e6 if value > 0 else None


class Progress:
    """The control loops' heartbeat: the watchdog is fed only while every loop keeps beating.

    Each loop registers the longest clock time it may legitimately take between
    two beats (its tick plus a grace). A loop that
    is stuck, or dead and not yet restarted, makes :meth:`all_alive` false, and a
    service whose watchdog is no longer fed gets restarted by systemd.
    """

    def __init__(self, monotonic: Callable[[], float] = time.monotonic) -> None:
        self._monotonic = monotonic
        """Where the beats are timed: the service passes its clock's ``monotonic``."""
        self._last: dict[str, float] = {}
        self._allowed: dict[str, float] = {}

    def register(self, name: str, allowed_gap_s: float, now: float | None = None) -> None:
        self._allowed[name] = allowed_gap_s
        self._last[name] = self._monotonic() if now is None else now

    def beat(self, name: str, now: float | None = None) -> None:
        self._last[name] = self._monotonic() if now is None else now

    def stuck(self, now: float | None = None) -> list[str]:
        """Names of the loops that have not beaten within their allowed gap."""
        at = self._monotonic() if now is None else now
        return [n for n, last in self._last.items() if at - last > self._allowed[n]]

    def all_alive(self, names: Iterable[str] | None = None) -> bool:
        stuck = set(self.stuck())
        return not stuck if names is None else not stuck.intersection(names)
