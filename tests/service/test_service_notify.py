"""sd_notify against a real datagram socket, as systemd listens for it."""

from __future__ import annotations

import os
import socket
from pathlib import Path

import pytest

from roomloop.service.notify import Progress, notify, watchdog_interval_s


def _receiver(address: str) -> socket.socket:
    sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
    sock.bind(address)
    sock.settimeout(2.0)
    return sock


def test_path_socket_receives_the_fields(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    path = str(tmp_path / "notify.sock")
    with _receiver(path) as sock:
        monkeypatch.setenv("NOTIFY_SOCKET", path)
        assert notify("READY=1", "STATUS=2 zones controlling") is True
        assert sock.recv(4096) == b"READY=1\nSTATUS=2 zones controlling"


def test_abstract_namespace_socket(monkeypatch: pytest.MonkeyPatch) -> None:
    name = f"roomloop-test-{os.getpid()}"
    with _receiver("\0" + name) as sock:
        monkeypatch.setenv("NOTIFY_SOCKET", "@" + name)
        assert notify("WATCHDOG=1") is True
        assert sock.recv(4096) == b"WATCHDOG=1"


def test_no_socket_is_a_no_op(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("NOTIFY_SOCKET", raising=False)
    assert notify("READY=1") is False


def test_a_vanished_socket_is_logged_not_raised(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("NOTIFY_SOCKET", str(tmp_path / "gone.sock"))
    assert notify("STOPPING=1") is False


def test_watchdog_interval_is_half_the_period_and_only_for_us(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    monkeypatch.setenv("WATCHDOG_USEC", "30000000")
    monkeypatch.setenv("WATCHDOG_PID", str(os.getpid()))
    assert watchdog_interval_s() == 15.0
    monkeypatch.setenv("WATCHDOG_PID", str(os.getpid() + 1))
    assert watchdog_interval_s() is None
    monkeypatch.delenv("WATCHDOG_USEC")
    assert watchdog_interval_s() is None


def test_progress_reports_a_loop_that_stopped_beating() -> None:
    progress = Progress()
    progress.register("zone:living", allowed_gap_s=5.0, now=100.0)
    progress.register("zone:bath", allowed_gap_s=5.0, now=100.0)
    assert progress.stuck(now=104.0) == []
    progress.beat("zone:living", now=104.0)
    assert progress.stuck(now=106.0) == ["zone:bath"]
    progress.beat("zone:bath", now=106.5)
    assert progress.stuck(now=108.0) == []
    assert progress.stuck(now=111.0) == ["zone:living"]


def test_a_listener_that_does_not_read_never_blocks_us(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    path = str(tmp_path / "full.sock")
    with _receiver(path):
        monkeypatch.setenv("NOTIFY_SOCKET", path)
        # The kernel queues only a few datagrams for a unix socket; the rest are dropped.
        results = [notify("WATCHDOG=1") for _ in range(200)]
    assert results[0] is True and results[-1] is False
