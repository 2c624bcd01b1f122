"""Shared real-peer fixtures: a mosquitto broker, pymodbus TCP servers, an RTU server on a pty pair.

Everything listens on loopback only, on free ports, and is stopped at teardown.
Every wait is bounded. A fixture skips (with the reason) only when the program
it needs, ``mosquitto`` or ``socat``, is not installed; CI installs both.

Fixtures
--------
``mosquitto``
    A running :class:`MosquittoBroker`. ``host, port = mosquitto`` unpacks it;
    ``mosquitto.stop()`` / ``mosquitto.start()`` restart it on the same port.
``modbus_tcp_server``
    A factory: ``server = await modbus_tcp_server(units=(1, 2))`` starts a
    :class:`ModbusTestServer` on 127.0.0.1 and a free port (``server.host``,
    ``server.port``). Set and read values in-process with ``await
    server.set_registers("input", 10, [0x00D7])``, ``get_registers``,
    ``set_coils``, ``get_coils``; ``server.requests`` lists every request
    received; ``server.delay_s`` makes it answer slowly; ``server.exception_code``
    makes it answer every request with that Modbus exception; ``server.write_filter``
    may change written values (a device that ignores writes); ``await server.stop()``
    and ``await server.start()`` restart it on the same port with its values kept.
``modbus_rtu_server``
    A :class:`ModbusTestServer` speaking RTU on one end of a socat pty pair;
    ``server.device`` is the other end, for the client.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import os
import random
import re
import shutil
import socket
import subprocess
import time
from collections.abc import AsyncIterator, Awaitable, Callable, Iterable, Iterator
from dataclasses import dataclass
from typing import Any

import pytest

LOOPBACK = "127.0.0.1"
START_TIMEOUT_S = 10.0


def pytest_asyncio_loop_factories(config: Any, item: Any) -> dict[str, Any]:
    """Every async test runs on roomloop's AutojumpLoop, so a test may use a VirtualClock.

    The loop is asyncio's own selector loop; it differs only while a VirtualClock
    has timers pending (roomloop/clock.py), so tests without one see no difference.
    """
    from roomloop.clock import AutojumpLoop

    return {"autojump": AutojumpLoop}


FIRST_TEST_PORT = 10_000
"""The test ports lie from here to the kernel's ephemeral range (where ``bind(0)`` draws)."""


def _ephemeral_low() -> int:
    try:
        with open("/proc/sys/net/ipv4/ip_local_port_range", encoding="ascii") as ports:
            return int(ports.read().split()[0])
    except (OSError, ValueError, IndexError):
        return 32_768  # Linux's default


def _test_ports() -> Iterator[int]:
    """This process's share of the test ports, from a random start, round and round.

    A port handed out is bound later (by a broker, a daemon, the BMS face), so a port
    from ``bind(0)`` could go to another test process, or to a server binding port 0,
    in between. Each pytest-xdist worker takes its own slice below the ephemeral range
    instead, and hands each port out once per turn.
    """
    worker = os.environ.get("PYTEST_XDIST_WORKER", "gw0").removeprefix("gw")
    workers = int(os.environ.get("PYTEST_XDIST_WORKER_COUNT", "1"))
    span = (_ephemeral_low() - FIRST_TEST_PORT) // max(1, workers)
    first = FIRST_TEST_PORT + span * (int(worker) if worker.isdigit() else 0)
    offset = random.randrange(span)
    while True:
        for k in range(span):
            yield first + (offset + k) % span


_PORTS = _test_ports()


def free_port() -> int:
    """A TCP port on loopback nobody listens on right now, this test process's own."""
    for _ in range(1000):
        port = next(_PORTS)
        with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
            try:
                sock.bind((LOOPBACK, port))
            except OSError:
                continue
            return port
    raise RuntimeError("no free loopback port in this test process's share")


def wait_listening(host: str, port: int, timeout_s: float = START_TIMEOUT_S) -> None:
    """Return once ``host:port`` accepts a TCP connection; raise after ``timeout_s``."""
    deadline = time.monotonic() + timeout_s
    while True:
        try:
            with socket.create_connection((host, port), timeout=0.2):
                return
        except OSError:
            if time.monotonic() > deadline:
                raise TimeoutError(
                    f"nothing listens on {host}:{port} after {timeout_s} s"
                ) from None
            time.sleep(0.02)


# --------------------------------------------------------------------------- mosquitto


class MosquittoBroker:
    """A real ``mosquitto -p PORT`` process on loopback (local-only mode, anonymous clients)."""

    def __init__(self, port: int | None = None) -> None:
        self.host = LOOPBACK
        self.port = port if port is not None else free_port()
        self._process: subprocess.Popen[bytes] | None = None

    def __iter__(self) -> Iterator[Any]:
        return iter((self.host, self.port))

    @property
    def running(self) -> bool:
        return self._process is not None and self._process.poll() is None

    def start(self) -> None:
        """Start (again) on the same port; returns once it accepts connections."""
        if self.running:
            return
        self._process = subprocess.Popen(
            ["mosquitto", "-p", str(self.port)],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        try:
            wait_listening(self.host, self.port)
        except TimeoutError:
            self.stop()
            raise

    def stop(self) -> None:
        """Stop the broker (clients see the connection drop); waits for the process to end."""
        process, self._process = self._process, None
        if process is None or process.poll() is not None:
            return
        process.terminate()
        try:
            process.wait(timeout=5)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait(timeout=5)


@pytest.fixture
def mosquitto() -> Iterator[MosquittoBroker]:
    """A running mosquitto broker on a free loopback port, stopped at teardown."""
    if shutil.which("mosquitto") is None:
        pytest.skip("mosquitto is not installed (apt install mosquitto)")
    broker = MosquittoBroker()
    broker.start()
    try:
        yield broker
    finally:
        broker.stop()


# --------------------------------------------------------------------------- Modbus


@dataclass(frozen=True)
class ModbusRequest:
    """One request a test server received (function 1 coils, 3 holding, 4 input, 5/6 writes)."""

    unit_id: int
    function_code: int
    address: int
    count: int


_FUNCTION = {"coil": 1, "holding": 3, "input": 4}


class ModbusTestServer:
    """A pymodbus server (SimDevice) with separate coil, holding and input tables per unit.

    ``registers`` holding and input registers and ``coils`` coils per unit, all
    zero at first. Values survive :meth:`stop` / :meth:`start`.
    """

    def __init__(
        self,
        units: Iterable[int] = (1,),
        *,
        registers: int = 1024,
        coils: int = 64,
        host: str = LOOPBACK,
        port: int | None = None,
        serial_device: str | None = None,
    ) -> None:
        self.units = tuple(units)
        self.host = host
        self.port = port if port is not None else free_port()
        self.serial_device = serial_device
        self.device: str | None = None
        """For an RTU server: the pty the client opens."""
        self.registers = registers
        self.coils = coils
        self.requests: list[ModbusRequest] = []
        self.delay_s = 0.0
        self.clock: Any = None
        """The clock ``delay_s`` is waited on (None: the real one)."""
        """Answer every request this much later (a slow device)."""
        self.exception_code: int | None = None
        """Answer every request with this Modbus exception code (e.g. 4, server device failure)."""
        self.write_filter: Callable[[int, int, list[Any]], None] | None = None
        """Called as ``(function_code, address, values)`` for every write; may change ``values``
        in place (a device that ignores or garbles writes)."""
        self._tables: dict[int, dict[str, list[Any]]] = {
            unit: {
                "holding": [0] * registers,
                "input": [0] * registers,
                "coil": [False] * coils,
            }
            for unit in self.units
        }
        self._server: Any = None
        self._local = 0

    # ------------------------------------------------------------- lifecycle

    def _devices(self) -> list[Any]:
        from pymodbus.simulator import DataType, SimData, SimDevice

        devices = []
        for unit in self.units:
            table = self._tables[unit]
            devices.append(
                SimDevice(
                    id=unit,
                    simdata=(
                        [SimData(0, values=list(table["coil"]), datatype=DataType.BITS)],
                        [SimData(0, values=[False] * 16, datatype=DataType.BITS)],
                        [SimData(0, values=list(table["holding"]), datatype=DataType.REGISTERS)],
                        [SimData(0, values=list(table["input"]), datatype=DataType.REGISTERS)],
                    ),
                    action=self._action,
                )
            )
        return devices

    def _trace(self, sending: bool, pdu: Any) -> Any:
        if not sending:
            self.requests.append(
                ModbusRequest(
                    int(pdu.dev_id),
                    int(pdu.function_code),
                    int(getattr(pdu, "address", 0) or 0),
                    int(getattr(pdu, "count", 0) or 0),
                )
            )
        return pdu

    async def _action(
        self, function_code: int, _start: int, address: int, _count: int, _regs: Any, values: Any
    ) -> Any:
        if self._local:
            return None
        if self.delay_s:
            # On the test's clock when it set one (a slow device in virtual time).
            await (asyncio.sleep if self.clock is None else self.clock.sleep)(self.delay_s)
        if self.exception_code is not None:
            from pymodbus.constants import ExcCodes

            return ExcCodes(self.exception_code)
        if values is not None and self.write_filter is not None:
            self.write_filter(function_code, address, values)
        return None

    async def start(self) -> None:
        """Start listening (again); returns once the server accepts connections."""
        if self._server is not None:
            return
        from pymodbus.server import ModbusSerialServer, ModbusTcpServer

        logging.getLogger("pymodbus").setLevel(logging.CRITICAL)
        if self.serial_device is None:
            self._server = ModbusTcpServer(
                self._devices(), address=(self.host, self.port), trace_pdu=self._trace
            )
        else:
            self._server = ModbusSerialServer(
                self._devices(), port=self.serial_device, baudrate=19200, trace_pdu=self._trace
            )
        await asyncio.wait_for(self._server.serve_forever(background=True), START_TIMEOUT_S)

    async def stop(self) -> None:
        """Stop answering, keeping the values for the next :meth:`start`."""
        server, self._server = self._server, None
        if server is None:
            return
        self._server = server
        for unit in self.units:
            table = self._tables[unit]
            table["holding"] = await self.get_registers("holding", 0, self.registers, unit)
            table["input"] = await self.get_registers("input", 0, self.registers, unit)
            table["coil"] = await self.get_coils(0, self.coils, unit)
        self._server = None
        await asyncio.wait_for(server.shutdown(), START_TIMEOUT_S)

    # ------------------------------------------------------------- values

    async def _get(self, unit: int, function_code: int, address: int, count: int) -> list[Any]:
        if self._server is None:
            raise RuntimeError("the test server is stopped")
        self._local += 1
        try:
            return list(await self._server.async_getValues(unit, function_code, address, count))
        finally:
            self._local -= 1

    async def _set(self, unit: int, function_code: int, address: int, values: list[Any]) -> None:
        if self._server is None:
            table = self._tables[unit]["coil" if function_code == 1 else _TABLE_OF[function_code]]
            table[address : address + len(values)] = values
            return
        self._local += 1
        try:
            await self._server.async_setValues(unit, function_code, address, values)
        finally:
            self._local -= 1

    async def set_registers(
        self, table: str, address: int, values: list[int], unit: int = 1
    ) -> None:
        """Put ``values`` into the ``input`` or ``holding`` table at ``address``."""
        await self._set(unit, _FUNCTION[table], address, [int(v) for v in values])

    async def get_registers(self, table: str, address: int, count: int, unit: int = 1) -> list[int]:
        return [int(v) for v in await self._get(unit, _FUNCTION[table], address, count)]

    async def set_coils(self, address: int, values: list[bool], unit: int = 1) -> None:
        await self._set(unit, 1, address, [bool(v) for v in values])

    async def get_coils(self, address: int, count: int, unit: int = 1) -> list[bool]:
        return [bool(v) for v in await self._get(unit, 1, address, count)]

    def reads(self, unit: int | None = None) -> list[ModbusRequest]:
        """The register and coil read requests received (function codes 1 to 4)."""
        return [
            r
            for r in self.requests
            if r.function_code in (1, 2, 3, 4) and (unit is None or r.unit_id == unit)
        ]


_TABLE_OF = {3: "holding", 4: "input"}

ServerFactory = Callable[..., Awaitable[ModbusTestServer]]


@pytest.fixture
async def modbus_tcp_server() -> AsyncIterator[ServerFactory]:
    """Factory of started TCP test servers on loopback: ``await modbus_tcp_server(units=(1,))``."""
    started: list[ModbusTestServer] = []

    async def make(**kwargs: Any) -> ModbusTestServer:
        server = ModbusTestServer(**kwargs)
        await server.start()
        started.append(server)
        return server

    try:
        yield make
    finally:
        for server in started:
            with contextlib.suppress(Exception):
                await server.stop()


class PtyPair:
    """``socat -d -d pty,raw,echo=0 pty,raw,echo=0``: two linked pseudo-terminals."""

    def __init__(self) -> None:
        self.process = subprocess.Popen(
            ["socat", "-d", "-d", "pty,raw,echo=0", "pty,raw,echo=0"],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.PIPE,
            text=True,
        )
        self.ends: list[str] = []
        deadline = time.monotonic() + START_TIMEOUT_S
        assert self.process.stderr is not None
        while len(self.ends) < 2:
            if time.monotonic() > deadline or self.process.poll() is not None:
                self.close()
                raise RuntimeError("socat did not report two ptys")
            line = self.process.stderr.readline()
            match = re.search(r"PTY is (\S+)", line)
            if match:
                self.ends.append(match.group(1))

    def close(self) -> None:
        if self.process.poll() is None:
            self.process.terminate()
            try:
                self.process.wait(timeout=5)
            except subprocess.TimeoutExpired:
                self.process.kill()
                self.process.wait(timeout=5)
        if self.process.stderr is not None:
            self.process.stderr.close()


@pytest.fixture
async def modbus_rtu_server() -> AsyncIterator[ModbusTestServer]:
    """An RTU test server (unit 1) on one end of a socat pty pair; the client opens ``.device``."""
    if shutil.which("socat") is None:
        pytest.skip("socat is not installed (apt install socat)")
    pair = PtyPair()
    server = ModbusTestServer(units=(1,), serial_device=pair.ends[0])
    server.device = pair.ends[1]
    try:
        await server.start()
        yield server
    finally:
        with contextlib.suppress(Exception):
            await server.stop()
        pair.close()


@pytest.fixture
def pty_pair() -> Iterator[PtyPair]:
    """A bare socat pty pair (``.ends[0]``, ``.ends[1]``), for a server of the test's own."""
    if shutil.which("socat") is None:
        pytest.skip("socat is not installed (apt install socat)")
    pair = PtyPair()
    try:
        yield pair
    finally:
        pair.close()
