"""The BMS face: a pymodbus server (TCP, optionally an RTU slave) answering from the zones.

Reads (functions 3 and 4, the same map) come from the zones' latest decisions through a
:class:`ZoneDirectory`; writes (functions 6 and 16) become zone commands handed to a
:class:`CommandApplier`, the service's one command path, so a BMS write is checked
exactly like an MQTT command. Answers:

- any other function: exception 1 (illegal function), and also a write from a TCP
  client not in ``allow_writes_from``;
- an address outside the map, a write to a read-only register or half a float32:
  exception 2 (illegal data address);
- a value the map or the zone refuses (outside the limits, no such mode): exception 3
  (illegal data value), and nothing changes;
- more than ``write_rate_per_min`` writes to one zone in a minute: exception 6 (busy).

A TCP client outside ``allow_clients`` is disconnected at once. The RTU slave answers
only its own unit id and stays silent for the others, like a device on a shared bus.

pymodbus 3.16 answers from a datastore ``context``; the face puts its own there
(``async_getValues``/``async_setValues`` returning values or an exception code) and
its own request handler in front of it for the function and client checks.
"""

from __future__ import annotations

import asyncio
import contextlib
import ipaddress
import logging
import time
from collections.abc import Awaitable, Callable, Sequence
from types import TracebackType
from typing import Any, Protocol

import structlog
from pymodbus.constants import ExcCodes
from pymodbus.exceptions import ModbusIOException, NoSuchIdException
from pymodbus.framer import FramerType
from pymodbus.pdu import ExceptionResponse
from pymodbus.server import ModbusSerialServer, ModbusTcpServer
from pymodbus.server.requesthandler import ServerRequestHandler
from pymodbus.simulator import DataType, SimData, SimDevice
from pymodbus.transaction import TransactionManager

from roomloop.bms.registers import (
    DEVICE_BUSY,
    ILLEGAL_FUNCTION,
    ILLEGAL_VALUE,
    MapError,
    RegisterMap,
    ZoneSnapshot,
)
from roomloop.config.models import Bms, Site
from roomloop.core.commands import CommandRejected
from roomloop.errors import DeviceError
from roomloop.service.commands import RateLimit

log = structlog.get_logger("roomloop.bms")

READ_FUNCTIONS = (3, 4)
WRITE_FUNCTIONS = (6, 16)
START_TIMEOUT_S = 10.0
RETRY_S = 30.0
"""Seconds between two attempts to listen when the port or serial device is not usable."""


class BmsFaceError(DeviceError):
    """The face cannot listen: the TCP address is taken or foreign, the serial port won't open."""


class ZoneDirectory(Protocol):
    """Where the face finds a zone's latest decision (None before its first)."""

    def snapshot(self, zone: str) -> ZoneSnapshot | None: ...


class CommandApplier(Protocol):
    """The service's command path: applies one command or raises ``CommandRejected``."""

    def __call__(self, zone: str, field: str, value: Any) -> None: ...


class BmsFace:
    """The Modbus server(s) of the ``bms:`` section; ``async with`` starts and stops them."""

    def __init__(
        self,
        site: Site,
        zones: ZoneDirectory,
        apply: CommandApplier,
        *,
        bms: Bms | None = None,
        clock: Callable[[], float] = time.time,
        monotonic: Callable[[], float] = time.monotonic,
    ) -> None:
        self.bms = bms if bms is not None else (site.bms or Bms())
        self.map = RegisterMap(site, self.bms)
        self.zones = zones
        self.apply = apply
        self.clock = clock
        self.monotonic = monotonic
        self.limit = RateLimit(self.bms.write_rate_per_min)
        self._allowed = [ipaddress.ip_network(n, strict=False) for n in self.bms.allow_clients]
        self._writers = [
            ipaddress.ip_network(n, strict=False) for n in self.bms.allow_writes_from
        ]
        self._servers: list[Any] = []
        self.writes_applied = 0
        self.writes_refused = 0

    # ------------------------------------------------------------------ lifecycle

    async def __aenter__(self) -> BmsFace:
        logging.getLogger("pymodbus").setLevel(logging.CRITICAL)  # we log what matters
        try:
            if self.bms.tcp:
                tcp = _TcpServer(
                    self,
                    _placeholder(),
                    address=(self.bms.address, self.bms.port),
                    ignore_missing_devices=False,
                )
                await self._start(tcp, endpoint=f"{self.bms.address}:{self.bms.port}")
            if self.bms.rtu is not None:
                rtu = self.bms.rtu
                serial = _SerialServer(
                    self,
                    _placeholder(),
                    framer=FramerType.RTU,
                    port=rtu.device,
                    baudrate=rtu.baud,
                    bytesize=rtu.data_bits,
                    parity=rtu.parity,
                    stopbits=rtu.stop_bits,
                    ignore_missing_devices=True,
                )
                await self._start(serial, endpoint=rtu.device, unit_id=rtu.unit_id)
        except BaseException:
            await self._stop()
            raise
        log.info(
            "bms.serving",
            tcp=f"{self.bms.address}:{self.bms.port}" if self.bms.tcp else None,
            rtu=None if self.bms.rtu is None else self.bms.rtu.device,
            registers=len(self.map.registers),
        )
        return self

    async def _start(self, server: Any, *, endpoint: str, unit_id: int | None = None) -> None:
        server.context = _Registers(self, unit_id)
        self._servers.append(server)
        try:
            await asyncio.wait_for(server.serve_forever(background=True), START_TIMEOUT_S)
        except (OSError, RuntimeError, TimeoutError, ValueError) as exc:
            reason = getattr(exc, "strerror", None) or str(exc) or type(exc).__name__
            raise BmsFaceError(
                f"the BMS face cannot listen here ({reason}); check bms: in the site file",
                endpoint=endpoint,
            ) from None

    async def __aexit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        await self._stop()

    async def _stop(self) -> None:
        servers, self._servers = self._servers, []
        for server in servers:
            with contextlib.suppress(Exception):
                await asyncio.wait_for(server.shutdown(), START_TIMEOUT_S)

    async def run(
        self,
        *,
        retry_s: float = RETRY_S,
        sleep: Callable[[float], Awaitable[None]] = asyncio.sleep,
    ) -> None:
        """Serve until cancelled (the service's ``bms`` task).

        A face that cannot listen (the port taken, the serial adapter unplugged) is logged
        and tried again every ``retry_s``: heating control goes on without it.
        """
        while True:
            try:
                async with self:
                    await asyncio.Event().wait()
            except BmsFaceError as exc:
                log.error("bms.cannot_listen", error=str(exc), retry_in_s=retry_s)
                await sleep(retry_s)

    # ------------------------------------------------------------------ policy

    def may_connect(self, host: str | None) -> bool:
        return host is None or not self._allowed or _member(host, self._allowed)

    def may_write(self, host: str | None) -> bool:
        if host is None:
            return True  # the serial line: whoever is on the bus
        if self._writers:
            return _member(host, self._writers)
        return self.may_connect(host)

    def read(self, address: int, count: int) -> list[int] | ExcCodes:
        try:
            return self.map.read(address, count, self.zones.snapshot)
        except MapError as exc:
            log.debug("bms.read_refused", address=address, count=count, reason=exc.reason)
            return ExcCodes(exc.code)

    def write(self, address: int, words: Sequence[int]) -> ExcCodes | None:
        """Check and apply one write request; the exception code to answer, or None."""
        now = self.clock()
        try:
            writes = self.map.decode_writes(address, list(words))
            zones = list(dict.fromkeys(w.register.zone for w in writes))
            for zone in zones:
                if not self.limit.allow(zone, self.monotonic()):
                    raise MapError(
                        DEVICE_BUSY,
                        f"too many writes to zone {zone} (at most "
                        f"{self.limit.per_minute} a minute)",
                    )
            commands = [
                (w.register, command) for w in writes for command in self.map.commands(w, now)
            ]
        except MapError as exc:
            return self._refused(address, words, exc.code, exc.reason)
        for register, (field, value) in commands:
            try:
                self.apply(register.zone, field, value)
            except CommandRejected as exc:
                return self._refused(address, words, ILLEGAL_VALUE, exc.reason)
            except Exception as exc:  # a bug of ours: answered, logged, never fatal
                log.exception("bms.write_failed", register=register.name, error=str(exc))
                return ExcCodes.DEVICE_FAILURE
            log.info("bms.write_applied", register=register.name, field=field, value=value)
        self.writes_applied += 1
        return None

    def _refused(self, address: int, words: Sequence[int], code: int, reason: str) -> ExcCodes:
        self.writes_refused += 1
        event = log.debug if code == DEVICE_BUSY else log.info
        event("bms.write_refused", address=address, words=list(words)[:8], code=code, reason=reason)
        return ExcCodes(code)


def _member(host: str, networks: list[ipaddress.IPv4Network | ipaddress.IPv6Network]) -> bool:
    try:
        address = ipaddress.ip_address(host)
    except ValueError:
        return False
    return any(address in network for network in networks)


def _function_of(data: bytes, tcp: bool) -> int:
    """The function code of a raw request (after the MBAP header on TCP, the address on RTU)."""
    at = 7 if tcp else 1
    return data[at] if len(data) > at else 0


def _placeholder() -> SimDevice:
    """pymodbus wants a device at construction; the face's own context replaces it."""
    block = [SimData(0, values=[0], datatype=DataType.REGISTERS)]
    bits = [SimData(0, values=[False], datatype=DataType.BITS)]
    return SimDevice(id=1, simdata=(bits, bits, block, block))


class _Registers:
    """The datastore pymodbus asks: the face's map, live."""

    def __init__(self, face: BmsFace, unit_id: int | None) -> None:
        self.face = face
        self.unit_id = unit_id
        self._echo: tuple[int, list[int]] | None = None

    def _check(self, device_id: int) -> None:
        if self.unit_id is not None and device_id != self.unit_id:
            raise NoSuchIdException(f"unit {device_id} is not the BMS face's {self.unit_id}")

    def device_ids(self) -> list[int]:
        return [self.unit_id if self.unit_id is not None else 1]

    async def async_getValues(
        self, device_id: int, func_code: int, address: int, count: int = 1
    ) -> list[int] | ExcCodes:
        self._check(device_id)
        if func_code == 6 and self._echo is not None and self._echo[0] == address:
            # a single write's answer echoes what was written (Modbus Application Protocol)
            words = self._echo[1][:count]
            self._echo = None
            return words
        if func_code not in READ_FUNCTIONS:
            return ExcCodes.ILLEGAL_FUNCTION
        return self.face.read(address, count)

    async def async_setValues(
        self, device_id: int, func_code: int, address: int, values: Sequence[int] | Sequence[bool]
    ) -> ExcCodes | None:
        self._check(device_id)
        if func_code not in WRITE_FUNCTIONS:
            return ExcCodes.ILLEGAL_FUNCTION
        words = [int(v) for v in values]
        code = self.face.write(address, words)
        if code is None and func_code == 6:
            self._echo = (address, words)
        return code


class _Handler(ServerRequestHandler):
    """pymodbus's request handler with the face's function and client checks in front."""

    def __init__(self, owner: Any, face: BmsFace) -> None:
        super().__init__(  # type: ignore[no-untyped-call]
            owner, owner.trace_packet, owner.trace_pdu, owner.trace_connect
        )
        self.face = face
        self.tcp = isinstance(owner, ModbusTcpServer)

    def _host(self) -> str | None:
        transport = getattr(self, "transport", None)
        if transport is None:
            return None
        peer = transport.get_extra_info("peername")
        if isinstance(peer, tuple) and peer:
            return str(peer[0])
        return None

    def callback_data(self, data: bytes, addr: tuple[Any, ...] | None = None) -> int:
        """As pymodbus's, but an unknown function's exception carries that function's code.

        (pymodbus answers ``0x80``; the Modbus Application Protocol asks for the request's
        function code plus 0x80.)
        """
        try:
            used = TransactionManager.callback_data(self, data, addr)
        except ModbusIOException as exc:
            context = self.server.context
            if isinstance(context, _Registers) and context.unit_id not in (None, exc.dev_id):
                return len(data)  # not us: silent
            function = (exc.fcode or _function_of(data, self.tcp)) & 0x7F
            # a function we serve whose request pymodbus cannot take (126 registers and
            # more, a byte count that does not match): a bad quantity, exception 3
            served = function in READ_FUNCTIONS + WRITE_FUNCTIONS
            response = ExceptionResponse(
                function,
                exception_code=ILLEGAL_VALUE if served else ILLEGAL_FUNCTION,
                device_id=exc.dev_id,
                transaction=exc.transaction_id,
            )
            self.server_send(response, addr)  # type: ignore[no-untyped-call]
            return len(data)
        if self.last_pdu:
            self.loop.call_soon(self.handle_later)
        return int(used)

    def callback_connected(self) -> None:
        super().callback_connected()
        host = self._host()
        if not self.face.may_connect(host):
            log.warning("bms.client_refused", client=host)
            self.transport.close()

    async def handle_request(self) -> None:
        pdu = self.last_pdu
        if not pdu:
            return
        code = pdu.function_code
        refusal: int | None = None
        if code not in READ_FUNCTIONS + WRITE_FUNCTIONS:
            refusal = ILLEGAL_FUNCTION
        elif code in WRITE_FUNCTIONS and not self.face.may_write(self._host()):
            log.info("bms.write_not_allowed", client=self._host(), address=pdu.address)
            refusal = ILLEGAL_FUNCTION
        if refusal is None:
            await super().handle_request()  # type: ignore[no-untyped-call]
            return
        context = self.server.context
        if isinstance(context, _Registers) and context.unit_id not in (None, pdu.dev_id):
            return  # not us: silent, like a device on a shared bus
        response = ExceptionResponse(code, refusal)
        response.transaction_id = pdu.transaction_id
        response.dev_id = pdu.dev_id
        self.server_send(response, self.last_addr)  # type: ignore[no-untyped-call]


class _TcpServer(ModbusTcpServer):
    def __init__(self, face: BmsFace, *args: Any, **kwargs: Any) -> None:
        self.face = face
        super().__init__(*args, **kwargs)

    def callback_new_connection(self) -> _Handler:
        return _Handler(self, self.face)


class _SerialServer(ModbusSerialServer):
    def __init__(self, face: BmsFace, *args: Any, **kwargs: Any) -> None:
        self.face = face
        super().__init__(*args, **kwargs)

    def callback_new_connection(self) -> _Handler:
        return _Handler(self, self.face)
