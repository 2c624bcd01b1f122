"""The service in-process (as the demo embeds it): safe state first, restarts, stop, watchdog.

Real parts: a pymodbus TCP server playing a room (``rooms.RoomPlant``), a real
datagram socket standing in for systemd's notify socket. Everything runs on one
virtual clock (roomloop/clock.py): no test waits on the wall clock.
"""

from __future__ import annotations

import asyncio
import contextlib
import re
import socket
from pathlib import Path
from typing import Any

import pytest
import yaml
from service_rooms import RoomPlant, running, site_yaml, until
from structlog.testing import capture_logs

from roomloop.clock import VirtualClock, wait_for
from roomloop.config.loader import load_site
from roomloop.config.models import Site
from roomloop.core.commands import CommandRejected
from roomloop.core.controller import ZoneController
from roomloop.service.app import Service, TickReport


def make_site(tmp_path: Path, port: int, **zone: Any) -> Site:
    data = site_yaml(modbus_port=port, broker_port=1, extra_zone=zone or None)
    del data["broker"]
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data))
    return load_site(path)


async def test_embedded_service_holds_the_safe_state_until_its_first_decision(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    clock = VirtualClock()
    server = await modbus_tcp_server()
    site = make_site(tmp_path, server.port, safe_state="on")
    ticks: list[TickReport] = []
    service = Service(site, clock=clock, state_dir=tmp_path / "state", on_tick=ticks.append)
    # A warm room: the controller wants the heat off, the safe state is on.
    with capture_logs() as events:
        async with RoomPlant(server, [23.0], clock) as plant, running(service):
            await until(clock, lambda: len(ticks) >= 3)
            await until(clock, lambda: not plant.rooms[0].coil)
            assert ticks[0].outputs.demand is False
            # The embedding API: a command applied in-process wakes the zone at once.
            service.apply_command("room0", "setpoint", 26.0)
            await until(clock, lambda: plant.rooms[0].coil)
            with pytest.raises(CommandRejected):
                service.apply_command("room0", "setpoint", 40.0)
            assert service.zones["room0"].state.hold_setpoint == 26.0
    switched = [(e["on"], e["decided"]) for e in events if e["event"] == "output.switched"]
    # Before the first decision the relay is held as read at the start (off), not driven
    # to the safe state (on) and back: no start-up pulse (service/restart.py).
    assert switched[0] == (False, False)
    assert (True, False) not in switched and (True, True) in switched
    safe = [e for e in events if e["event"] == "output.safe_state"]
    assert safe and safe[-1]["on"] is True  # and the safe state again at the stop
    assert (await server.get_coils(0, 1)) == [True]


async def test_a_write_the_relay_module_ignores_is_a_warning_not_a_switch(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    """Issue 16: a write the read-back contradicts must not be journalled as switched."""
    clock = VirtualClock()
    server = await modbus_tcp_server()

    def coil_stays_off(function_code: int, _address: int, values: list[Any]) -> None:
        if function_code in (5, 15):  # write single / multiple coils
            values[:] = [False] * len(values)

    server.write_filter = coil_stays_off
    site = make_site(tmp_path, server.port)
    service = Service(site, clock=clock, state_dir=tmp_path / "state")
    with capture_logs() as events:
        async with RoomPlant(server, [15.0], clock) as plant, running(service):
            await until(clock, lambda: any(
                e["event"] == "output.readback_disagrees" for e in events
            ))
            assert not plant.rooms[0].coil
            # the module works again: the poll's re-assert switches the relay on
            server.write_filter = None
            await until(clock, lambda: plant.rooms[0].coil, timeout_s=120)
    disagrees = [e for e in events if e["event"] == "output.readback_disagrees"]
    assert disagrees[0]["log_level"] == "warning"
    assert disagrees[0]["on"] is True and disagrees[0]["point"] == "relay0"
    assert "read back" in disagrees[0]["detail"]
    assert not [e for e in events if e["event"] == "output.switched" and e["on"] is True]


class FlakyController(ZoneController):
    """Our controller, failing on its 3rd step (a bug the service must survive)."""

    __slots__ = ("calls",)

    def __init__(self, settings: Any) -> None:
        super().__init__(settings)
        self.calls = 0

    def step(self, state: Any, inputs: Any, now: float, lock: Any = None) -> Any:
        self.calls += 1
        if self.calls == 3:
            raise ZeroDivisionError("injected")
        return super().step(state, inputs, now)


async def test_a_failing_zone_loop_is_logged_and_restarted(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    clock = VirtualClock()
    server = await modbus_tcp_server()
    site = make_site(tmp_path, server.port)
    service = Service(site, clock=clock, state_dir=tmp_path / "state")
    with capture_logs() as events:
        async with RoomPlant(server, [17.0], clock), running(service):
            await until(clock, lambda: "room0" in service.zones)
            runtime = service.zones["room0"]
            runtime.controller = FlakyController(runtime.settings)
            await until(clock, lambda: service.restarts.get("zone:room0") == 1)
            steps = runtime.steps
            await until(clock, lambda: runtime.steps > steps + 3)
    failed = [e for e in events if e["event"] == "service.task_failed"]
    assert [e["task"] for e in failed] == ["zone:room0"]
    assert any(e["event"] == "service.task_restarting" for e in events)


async def test_stop_within_5_s_even_with_the_device_gone(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    clock = VirtualClock()
    server = await modbus_tcp_server()
    site = make_site(tmp_path, server.port)
    service = Service(site, clock=clock, state_dir=tmp_path / "state")
    stop = asyncio.Event()
    async with RoomPlant(server, [17.0], clock) as plant:
        task = asyncio.create_task(service.run(stop))
        await until(clock, lambda: plant.rooms[0].coil)
        plant.frozen = True
        await server.stop()
        started = clock.monotonic()
        stop.set()
        await wait_for(clock, task, 10)
    assert clock.monotonic() - started < 5.0
    assert service.store.path.exists()


async def test_watchdog_is_fed_only_while_every_zone_loop_progresses(
    tmp_path: Path, modbus_tcp_server: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    clock = VirtualClock()
    path = str(tmp_path / "notify.sock")
    sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
    sock.bind(path)
    sock.setblocking(False)
    monkeypatch.setenv("NOTIFY_SOCKET", path)
    monkeypatch.setenv("WATCHDOG_USEC", "200000")  # fed every 0.1 s
    monkeypatch.delenv("WATCHDOG_PID", raising=False)
    server = await modbus_tcp_server()
    site = make_site(tmp_path, server.port)
    service = Service(
        site,
        clock=clock,
        state_dir=tmp_path / "state",
        ready_wait_s=1.0,
        watchdog_grace_s=0.5,
    )

    def received() -> list[str]:
        out = []
        with contextlib.suppress(BlockingIOError):
            while True:
                out.extend(sock.recv(4096).decode().split("\n"))
        return out

    try:
        async with RoomPlant(server, [17.0], clock), running(service):
            seen: list[str] = []

            def ready_and_fed() -> bool:
                seen.extend(received())
                return {"READY=1", "WATCHDOG=1"} <= set(seen)

            await until(clock, ready_and_fed)
            # A zone loop that cannot step any more (every step fails) starves the watchdog.
            runtime = service.zones["room0"]
            runtime.controller = StuckController(runtime.settings)
            await until(clock, lambda: bool(service.progress.stuck()), 600)
            received()
            await clock.sleep(0.5)
            assert "WATCHDOG=1" not in received()
        assert "STOPPING=1" in received()
    finally:
        sock.close()


class StuckController(ZoneController):
    """A controller that can no longer step."""

    __slots__ = ()

    def step(self, state: Any, inputs: Any, now: float, lock: Any = None) -> Any:
        raise RuntimeError("stuck")


async def test_a_hold_ends_at_hold_until_and_a_corrupt_state_file_does_not_block_start(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    clock = VirtualClock()
    server = await modbus_tcp_server()
    site = make_site(tmp_path, server.port)
    state_dir = tmp_path / "state"
    state_dir.mkdir()
    (state_dir / "test-annex.state.json").write_text('{"format": "roomloop-state", "zon')
    service = Service(site, clock=clock, state_dir=state_dir)
    with capture_logs() as events:
        async with RoomPlant(server, [19.0], clock), running(service):
            await until(clock, lambda: service.zones.get("room0") is not None)
            await until(clock, lambda: service.zones["room0"].outputs is not None)
            service.apply_command("room0", "setpoint", 23.0)
            service.apply_command("room0", "hold_until", clock.now() + 120.0)
            runtime = service.zones["room0"]
            assert runtime.state.mode == "hold"
            # 120 clock seconds on, the zone is back on its program.
            await until(clock, lambda: runtime.state.mode == "auto", 600)
            assert runtime.outputs is not None and runtime.outputs.setpoint == 20.0
    moved = [e for e in events if e["event"] == "persist.moved_aside"]
    assert len(moved) == 1 and "not JSON" in moved[0]["reason"]
    assert len(list(state_dir.glob("test-annex.state.json.bad-*"))) == 1


async def test_ready_waits_for_the_links_but_only_so_long(tmp_path: Path) -> None:
    clock = VirtualClock()
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]
    site = make_site(tmp_path, port)  # nothing listens there: the link stays down
    service = Service(site, clock=clock, state_dir=tmp_path / "state", ready_wait_s=1.5)
    with capture_logs() as events:
        async with running(service):
            started = clock.monotonic()
            await until(clock, lambda: service.zones.get("room0") is not None)
            # The zone runs (on no reading) while READY still waits for the link ...
            await until(clock, lambda: service.zones["room0"].steps > 0, 300)
            assert not service.ready.is_set()
            # ... until the bounded wait is over.
            await until(clock, service.ready.is_set, 300)
            assert clock.monotonic() - started >= 1.0
    ready = [e for e in events if e["event"] == "service.ready"]
    assert ready and ready[0]["links_down"] == ["rooms"]


async def test_a_device_that_takes_the_connection_but_never_answers_is_a_link_down(
    tmp_path: Path,
) -> None:
    # A gateway that accepts TCP and then stays silent: connected, but nothing answers.
    async def silent(reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        with contextlib.suppress(Exception):
            while await reader.read(256):
                pass
        writer.close()

    server = await asyncio.start_server(silent, "127.0.0.1", 0)
    port = server.sockets[0].getsockname()[1]
    clock = VirtualClock()
    site = make_site(tmp_path, port)
    service = Service(site, clock=clock, state_dir=tmp_path / "state", ready_wait_s=30.0)
    try:
        with capture_logs() as events:
            async with running(service):
                await until(clock, service.ready.is_set, 600)
                assert service.links["rooms"].connected and not service.links["rooms"].up
    finally:
        server.close()
    ready = [e for e in events if e["event"] == "service.ready"]
    assert ready and ready[0]["links_down"] == ["rooms"]


async def test_a_missing_broker_tls_file_stops_the_start_before_any_output_moves(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    clock = VirtualClock()
    from roomloop.io.broker import BrokerSetupError

    server = await modbus_tcp_server()
    data = site_yaml(modbus_port=server.port, broker_port=1)
    ca = tmp_path / "broker-ca.pem"
    data["broker"]["tls"] = {"ca_file": str(ca)}
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data))
    service = Service(load_site(path), clock=clock, state_dir=tmp_path / "state")
    with pytest.raises(BrokerSetupError, match=re.escape(f"broker.tls.ca_file {ca}: no such file")):
        await wait_for(clock, service.run(asyncio.Event()), 10.0)
    assert server.requests == []  # no output written, not even the safe state


async def test_a_coil_that_dropped_is_written_again_by_the_service(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    """The output writer owns what the coil should be; the link's poll re-asserts it."""
    clock = VirtualClock()
    server = await modbus_tcp_server()
    site = make_site(tmp_path, server.port)
    service = Service(site, clock=clock, state_dir=tmp_path / "state")
    async with RoomPlant(server, [17.0], clock) as plant, running(service):
        await until(clock, lambda: plant.rooms[0].coil)  # a cold room: heating
        assert service.outputs.commanded() == {"relay0": True}
        plant.frozen = True
        await server.set_coils(0, [False])  # the relay module lost power
        dropped_at = clock.now()
        await until(
            clock,
            lambda: (
                (service.links["rooms"].output_state("relay0").written_at or 0.0) > dropped_at
            ),
            600,
        )
        assert (await server.get_coils(0, 1)) == [True]
        # written again within reassert_s (60 s for a Modbus output) and one poll (10 s)
        written_at = service.links["rooms"].output_state("relay0").written_at
        assert written_at is not None and written_at - dropped_at <= 60 + 10
