"""One Modbus link (TCP or RTU): paced, serialised requests, coalesced polls, verified outputs.

A :class:`ModbusLink` owns one pymodbus client. Every request goes through one
lock (RS-485 is half-duplex, and many TCP gateways serve one request at a
time) and keeps ``request_gap_s`` between requests. A request that times out,
gets an exception reply or a short reply is retried with backoff
(``retries``); if it still fails, exactly the points that request serves are
``comm-failure``. Each link runs in its own task, so a slow link never holds
up another. A lost connection is re-opened on later polls with a growing pause.

Time: ``received_at`` and ``now`` are POSIX seconds from the injected ``clock``
(a simulated clock in the demo); pacing and timeouts use the event loop.
"""

from __future__ import annotations

import asyncio
import errno
import logging
import os
from collections.abc import Awaitable, Callable, Mapping, Sequence
from dataclasses import dataclass, replace
from types import TracebackType
from typing import Any

from roomloop.backoff import Backoff
from roomloop.clock import Clock, RealClock, wait_for
from roomloop.config.models import ModbusInput, ModbusOutput, ModbusRtuLink, ModbusTcpLink
from roomloop.core.types import PointSample
from roomloop.errors import DeviceError
from roomloop.io.codec import Decoded, decode_point
from roomloop.io.eventlog import RateLimitedLog, get_logger
from roomloop.io.planner import Read, plan_reads
from roomloop.io.ports import OutputState

log = get_logger("modbus")

RETRY_BACKOFF = Backoff(0.05, 1.0)
"""The pause before each retry of a request: 50 ms, doubling, at most 1 s."""


class _RequestFailed(Exception):
    """A request that failed after all retries; ``reason`` is what the log and probe show."""

    def __init__(self, reason: str, exception_code: int | None = None) -> None:
        super().__init__(reason)
        self.reason = reason
        self.exception_code = exception_code


@dataclass(frozen=True, slots=True)
class PointReading:
    """One input point read on its own (``probe``): the raw registers and what they mean."""

    point: ModbusInput
    registers: tuple[int, ...]
    decoded: Decoded


@dataclass(frozen=True, slots=True)
class OutputReading:
    """An output's register or coil as read back: the raw value and on/off (None: neither value)."""

    point: ModbusOutput
    raw: int
    on: bool | None


def endpoint_of(link: ModbusTcpLink | ModbusRtuLink) -> str:
    """How logs and errors name a link's far end."""
    if isinstance(link, ModbusTcpLink):
        return f"modbus-tcp://{link.host}:{link.port}"
    frame = f"{link.data_bits}{link.parity}{link.stop_bits}"
    return f"modbus-rtu:{link.device}@{link.baud}/{frame}"


EXCEPTION_NAMES = {
    1: "illegal function",
    2: "illegal data address",
    3: "illegal data value",
    4: "server device failure",
    5: "acknowledge",
    6: "server device busy",
    8: "memory parity error",
    10: "gateway path unavailable",
    11: "gateway target device failed to respond",
}
"""Modbus exception codes by name (Modbus Application Protocol V1.1b3, section 7)."""


def exception_reply_text(code: int | None) -> str:
    """``exception reply 2 (illegal data address)``: the number a manual lists, and its meaning."""
    if code is None:
        return "exception reply (no code)"
    name = EXCEPTION_NAMES.get(code)
    return f"exception reply {code} ({name})" if name else f"exception reply {code} (not standard)"


def _quiet_pymodbus() -> None:
    """pymodbus logs every timeout with a frame dump; our own rate-limited events replace that."""
    logging.getLogger("pymodbus").setLevel(logging.CRITICAL)


class ModbusLink:
    """One ``modbus-tcp`` or ``modbus-rtu`` link with its input and output points.

    Use as ``async with ModbusLink(link, inputs, outputs) as modbus:`` then either
    ``await modbus.run()`` in a task (poll every ``poll_interval_s`` and re-assert
    outputs), or call :meth:`poll` / :meth:`set_output` yourself. Entering never
    fails for an unreachable device: the link keeps trying in the background.
    """

    def __init__(
        self,
        link: ModbusTcpLink | ModbusRtuLink,
        inputs: Sequence[ModbusInput] = (),
        outputs: Sequence[ModbusOutput] = (),
        *,
        clock: Clock | None = None,
        log_interval_s: float = 300.0,
        reconnect_min_s: float = 0.2,
        reconnect_max_s: float = 30.0,
    ) -> None:
        for point_name, point_link in [(p.name, p.link) for p in inputs] + [
            (p.name, p.link) for p in outputs
        ]:
            if point_link != link.name:
                raise ValueError(
                    f"point {point_name} belongs to link {point_link}, not {link.name}"
                )
        self.link = link
        self.endpoint = endpoint_of(link)
        self.inputs = {p.name: p for p in inputs}
        self.outputs = {p.name: p for p in outputs}
        self.plan: tuple[Read, ...] = plan_reads(inputs, link.max_gap_registers)
        self.clock: Clock = clock if clock is not None else RealClock()
        """Time stamps and the poll interval; ``clock.io`` paces and bounds the requests."""
        self._clock = self.clock.now
        self._events = RateLimitedLog(log, log_interval_s)
        self._lock = asyncio.Lock()
        self._last_request_end = 0.0
        self._reconnect = Backoff(reconnect_min_s, reconnect_max_s)
        self._reconnect_delay = self._reconnect.first()
        self._next_connect_at = 0.0
        self._client: Any = None
        self.connect_error: str | None = None
        """Why the last connection attempt failed (``None`` once connected)."""
        self._samples: dict[str, PointSample] = {
            name: PointSample(name, None, None, "comm-failure") for name in self.inputs
        }
        self._outputs: dict[str, OutputState] = {name: OutputState(name) for name in self.outputs}
        self._output_locks = {name: asyncio.Lock() for name in self.outputs}
        """One write-and-read-back at a time per output, so a re-assert of the old state
        can never interleave with the write of a new decision."""
        self.cycles = 0
        self.answering = True
        """Whether the last poll got at least one answer (True until a poll says otherwise)."""
        """Completed poll cycles (tests and status use it)."""
        self.requests = 0
        """Requests sent, retries included."""

    # ------------------------------------------------------------------ lifecycle

    @property
    def name(self) -> str:
        return self.link.name

    @property
    def request_timeout_s(self) -> float:
        """The link's answer timeout (one request)."""
        return self.link.timeout_s

    @property
    def connected(self) -> bool:
        return bool(self._client is not None and self._client.connected)

    @property
    def up(self) -> bool:
        """Connected, and its last poll had an answer (a device may take the TCP connection
        and never answer; a link without reads counts as up once connected)."""
        return self.connected and self.answering

    async def __aenter__(self) -> ModbusLink:
        _quiet_pymodbus()
        self._client = self._make_client()
        await self._ensure_connected()
        return self

    async def __aexit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        if self._client is not None:
            self._client.close()
            self._client = None

    def _make_client(self) -> Any:
        from pymodbus.client import AsyncModbusSerialClient, AsyncModbusTcpClient
        from pymodbus.framer import FramerType

        link = self.link
        # Retries and reconnection are ours (backoff, per-point verdicts), not pymodbus's.
        if isinstance(link, ModbusTcpLink):
            return AsyncModbusTcpClient(
                link.host, port=link.port, timeout=link.timeout_s, retries=0, reconnect_delay=0
            )
        return AsyncModbusSerialClient(
            link.device,
            framer=FramerType.RTU,
            baudrate=link.baud,
            bytesize=link.data_bits,
            parity=link.parity,
            stopbits=link.stop_bits,
            timeout=link.timeout_s,
            retries=0,
            reconnect_delay=0,
        )

    async def _ensure_connected(self) -> bool:
        if self._client is None:
            raise RuntimeError("use 'async with ModbusLink(...)' before talking to the link")
        if self._client.connected:
            return True
        if self.clock.io.monotonic() < self._next_connect_at:
            return False
        try:
            ok = bool(
                await wait_for(self.clock.io, self._client.connect(), self.link.timeout_s + 1.0)
            )
        except Exception as exc:  # refused, a serial port that vanished, DNS, a timeout ...
            ok = False
            reason = describe_connect_error(self.link, exc)
        else:
            reason = self._why_not_connected()
        if ok:
            if self._reconnect_delay > self._reconnect.first() or self.cycles:
                self._events.recovered(
                    self.endpoint, "modbus.connected", link=self.name, endpoint=self.endpoint
                )
            self._reconnect_delay = self._reconnect.first()
            self.connect_error = None
            return True
        self.connect_error = reason
        self._events.problem(
            self.endpoint,
            "modbus.connect_failed",
            self._clock(),
            link=self.name,
            endpoint=self.endpoint,
            reason=reason,
            retry_in_s=round(self._reconnect_delay, 2),
        )
        self._next_connect_at = self.clock.io.monotonic() + self._reconnect_delay
        self._reconnect_delay = self._reconnect.after(self._reconnect_delay)
        return False

    def _why_not_connected(self) -> str:
        """pymodbus only says False; name the likely cause for the log and ``probe``."""
        if isinstance(self.link, ModbusRtuLink):
            if not os.path.exists(self.link.device):
                return f"serial device {self.link.device} does not exist"
            if not os.access(self.link.device, os.R_OK | os.W_OK):
                return f"no permission to open {self.link.device}"
            return f"cannot open {self.link.device}"
        return "connection refused or host unreachable"

    # ------------------------------------------------------------------ requests

    async def _request(
        self,
        call: Callable[[Any], Awaitable[Any]],
        check: Callable[[Any], str | None],
        *,
        attempts: int | None = None,
        timeout_s: float | None = None,
    ) -> Any:
        """Send one request under the link lock, paced, with retries; raise ``_RequestFailed``.

        ``attempts`` and ``timeout_s`` override the link's retries and timeout (the stop's
        one short try per output).
        """
        attempts = self.link.retries + 1 if attempts is None else attempts
        wait_s = self.link.timeout_s + 1.0 if timeout_s is None else timeout_s
        reason = "not attempted"
        async with self._lock:
            for attempt in range(attempts):
                if attempt:
                    await self.clock.io.sleep(RETRY_BACKOFF.nth(attempt))
                if not await self._ensure_connected():
                    why = f": {self.connect_error}" if self.connect_error else ""
                    raise _RequestFailed(f"not connected{why}")
                gap = self._last_request_end + self.link.request_gap_s - self.clock.io.monotonic()
                if gap > 0:
                    await self.clock.io.sleep(gap)
                self.requests += 1
                try:
                    response = await wait_for(self.clock.io, call(self._client), wait_s)
                except TimeoutError:
                    shown_s = self.link.timeout_s if timeout_s is None else timeout_s
                    reason = f"no answer within {shown_s:g} s"
                    continue
                except Exception as exc:  # pymodbus raises ModbusException subclasses and OSError
                    reason = _describe(exc)
                    if not self._client.connected:
                        self._next_connect_at = 0.0
                    continue
                finally:
                    self._last_request_end = self.clock.io.monotonic()
                if response.isError():
                    code = getattr(response, "exception_code", None)
                    raise _RequestFailed(exception_reply_text(code), code)
                problem = check(response)
                if problem is None:
                    return response
                reason = problem
        raise _RequestFailed(f"{reason} ({attempts} attempt{'' if attempts == 1 else 's'})")

    async def _read_registers(
        self,
        unit_id: int,
        table: str,
        address: int,
        count: int,
        *,
        attempts: int | None = None,
        timeout_s: float | None = None,
    ) -> list[int]:
        async def call(client: Any) -> Any:
            if table == "input":
                return await client.read_input_registers(address, count=count, device_id=unit_id)
            return await client.read_holding_registers(address, count=count, device_id=unit_id)

        def check(response: Any) -> str | None:
            got = len(getattr(response, "registers", []) or [])
            return None if got == count else f"short reply: {got} of {count} registers"

        response = await self._request(call, check, attempts=attempts, timeout_s=timeout_s)
        return [int(r) for r in response.registers[:count]]

    async def read_registers(self, unit_id: int, table: str, address: int, count: int) -> list[int]:
        """Read raw registers (``input`` or ``holding``); raise :class:`DeviceError` on failure."""
        try:
            return await self._read_registers(unit_id, table, address, count)
        except _RequestFailed as exc:
            raise DeviceError(exc.reason, endpoint=self.endpoint, register=address) from None

    # ------------------------------------------------------------------ inputs

    def input_names(self) -> tuple[str, ...]:
        return tuple(self.inputs)

    def samples(self, now: float) -> dict[str, PointSample]:
        """Latest sample per input point, as it arrived (the core judges its age)."""
        return dict(self._samples)

    async def poll(self) -> list[PointSample]:
        """One cycle: every planned read once; returns the new sample of every input point.

        A failed read gives its points ``comm-failure`` (value ``None``, ``received_at``
        the time of the failed attempt); the other reads go on.
        """
        fresh: list[PointSample] = []
        answered = 0
        for read in self.plan:
            try:
                registers = await self._read_registers(
                    read.unit_id, read.table, read.address, read.count
                )
            except _RequestFailed as exc:
                now = self._clock()
                self._events.problem(
                    f"read:{read.unit_id}:{read.table}:{read.address}",
                    "modbus.read_failed",
                    now,
                    link=self.name,
                    endpoint=self.endpoint,
                    points=list(read.point_names),
                    unit_id=read.unit_id,
                    table=read.table,
                    address=read.address,
                    count=read.count,
                    reason=exc.reason,
                )
                for name in read.point_names:
                    fresh.append(PointSample(name, None, now, "comm-failure"))
                continue
            now = self._clock()
            answered += 1
            self._events.recovered(
                f"read:{read.unit_id}:{read.table}:{read.address}",
                "modbus.read_recovered",
                now,
                link=self.name,
                points=list(read.point_names),
            )
            for part in read.slices:
                regs = registers[part.offset : part.offset + part.count]
                decoded = decode_point(part.point, regs)
                self._note_decoded(part.point, regs, decoded, now)
                fresh.append(
                    PointSample(part.point.name, decoded.value, now, decoded.transport, decoded.raw)
                )
        for sample in fresh:
            self._samples[sample.name] = sample
        if self.plan:
            self.answering = answered > 0
        return fresh

    def _note_decoded(
        self, point: ModbusInput, regs: Sequence[int], decoded: Decoded, now: float
    ) -> None:
        if decoded.transport == "ok":
            self._events.recovered(
                point.name, "modbus.point_recovered", now, point=point.name, link=self.name
            )
            return
        self._events.problem(
            point.name,
            "modbus.point_unreliable",
            now,
            point=point.name,
            link=self.name,
            reliability=decoded.transport,
            raw=[f"0x{r:04X}" for r in regs],
            value=decoded.raw if isinstance(decoded.raw, int) else repr(decoded.raw),
            detail=decoded.detail,
        )

    async def read_point(self, name: str) -> PointReading:
        """Read one input point on its own (commissioning); :class:`DeviceError` on failure."""
        point = self.inputs[name]
        try:
            regs = await self._read_registers(
                point.unit_id, point.table, point.address, point.registers
            )
        except _RequestFailed as exc:
            raise DeviceError(
                exc.reason, endpoint=self.endpoint, point=name, register=point.address
            ) from None
        return PointReading(point, tuple(regs), decode_point(point, regs))

    # ------------------------------------------------------------------ outputs

    def output_names(self) -> tuple[str, ...]:
        return tuple(self.outputs)

    def output_state(self, name: str) -> OutputState:
        return self._outputs[name]

    async def read_output(self, name: str) -> OutputReading:
        """Read an output's coil or register back; raise :class:`DeviceError` on failure."""
        point = self.outputs[name]
        try:
            raw = await self._read_output_raw(point)
        except _RequestFailed as exc:
            raise DeviceError(
                exc.reason, endpoint=self.endpoint, point=name, register=point.address
            ) from None
        on = True if raw == point.on_value else False if raw == point.off_value else None
        return OutputReading(point, raw, on)

    async def _read_output_raw(
        self, point: ModbusOutput, *, attempts: int | None = None, timeout_s: float | None = None
    ) -> int:
        if point.table == "coil":

            async def call(client: Any) -> Any:
                return await client.read_coils(point.address, count=1, device_id=point.unit_id)

            def check(response: Any) -> str | None:
                return (
                    None
                    if len(getattr(response, "bits", []) or []) >= 1
                    else "short reply: no coil"
                )

            response = await self._request(call, check, attempts=attempts, timeout_s=timeout_s)
            return 1 if response.bits[0] else 0
        return (
            await self._read_registers(
                point.unit_id, "holding", point.address, 1, attempts=attempts, timeout_s=timeout_s
            )
        )[0]

    async def set_output(self, name: str, on: bool) -> OutputState:
        """Write the on or off value, read it back if configured; the state says what happened.

        Writes of one output wait for each other (first come, first served), so the last
        one asked for is the last one made. What the output should be is not kept here:
        its owner (the service's output writer) says so, and re-asserts through
        :meth:`reassert_due`.
        """
        async with self._output_locks[name]:
            return await self._write_output(name, on)

    async def set_output_once(self, name: str, on: bool, timeout_s: float) -> OutputState:
        """At stop: write (and read back) with one try of at most ``timeout_s`` per request.

        Without retries the link's lock is held briefly, so every output of a slow link
        gets its own try within the stop's budget. Called for all outputs at once, the
        writes queue on the link's lock ahead of the read-backs (the lock is first come,
        first served), so each output is written before any is read back.
        """
        async with self._output_locks[name]:
            return await self._write_output(name, on, attempts=1, timeout_s=timeout_s)

    async def _write_output(
        self, name: str, on: bool, *, attempts: int | None = None, timeout_s: float | None = None
    ) -> OutputState:
        """Write and read back one output; the caller holds the output's lock."""
        point = self.outputs[name]
        value = point.on_value if on else point.off_value
        now = self._clock()
        state = replace(self._outputs[name], wanted=on, written_at=now)

        if point.table == "coil":

            async def write(client: Any) -> Any:
                return await client.write_coil(point.address, bool(value), device_id=point.unit_id)
        else:

            async def write(client: Any) -> Any:
                return await client.write_register(point.address, value, device_id=point.unit_id)

        step = "write"
        try:
            await self._request(
                write, lambda _response: None, attempts=attempts, timeout_s=timeout_s
            )
            step = "read back"
            if point.read_back:
                raw = await self._read_output_raw(point, attempts=attempts, timeout_s=timeout_s)
        except _RequestFailed as exc:
            # The detail says which step failed: a written output whose read-back failed
            # is not the same as a write that never arrived (probe tells the user which).
            state = replace(state, verdict="comm-failure", detail=f"{step} failed: {exc.reason}")
            self._events.problem(
                name,
                "modbus.write_failed",
                now,
                point=name,
                link=self.name,
                endpoint=self.endpoint,
                address=point.address,
                value=value,
                reason=exc.reason,
            )
        else:
            if not point.read_back:
                state = replace(state, verdict="unverified", detail=None)
            else:
                confirmed = (
                    True if raw == point.on_value else False if raw == point.off_value else None
                )
                state = replace(state, confirmed=confirmed, confirmed_at=self._clock())
                if raw == value:
                    state = replace(state, verdict="ok", detail=None)
                    self._events.recovered(
                        name, "modbus.output_confirmed", point=name, link=self.name
                    )
                else:
                    detail = f"wrote {value}, read back {raw}"
                    state = replace(state, verdict="mismatch", detail=detail)
                    self._events.problem(
                        name,
                        "modbus.output_mismatch",
                        now,
                        point=name,
                        link=self.name,
                        address=point.address,
                        written=value,
                        raw=raw,
                    )
        self._outputs[name] = state
        return state

    async def reassert_due(self, now: float, wanted: Mapping[str, bool]) -> list[OutputState]:
        """Write ``wanted`` again to each of its outputs that is due (``reassert_s``) or whose
        last write failed; ``wanted`` holds the commanded outputs (others are left alone)."""
        done: list[OutputState] = []
        for name, point in self.outputs.items():
            if name not in wanted:
                continue
            async with self._output_locks[name]:
                on = wanted.get(name)
                if on is None:
                    continue
                state = self._outputs[name]
                overdue = state.written_at is None or now - state.written_at >= point.reassert_s
                if overdue or state.verdict in ("comm-failure", "mismatch"):
                    done.append(await self._write_output(name, on))
        return done

    # ------------------------------------------------------------------ loop

    async def run(
        self,
        *,
        on_cycle: Callable[[], None] | None = None,
        commanded: Callable[[], Mapping[str, bool]] | None = None,
    ) -> None:
        """Poll every ``poll_interval_s`` and re-assert the ``commanded()`` outputs, until
        cancelled.

        The interval is measured and waited on the link's clock; ``on_cycle`` is called
        after each cycle (the service starts its zones once every link was polled).
        """
        while True:
            started = self._clock()
            await self.poll()
            if commanded is not None:
                await self.reassert_due(self._clock(), commanded())
            self.cycles += 1
            if on_cycle is not None:
                on_cycle()
            await self.clock.sleep(max(0.0, self.link.poll_interval_s - (self._clock() - started)))


def _describe(exc: BaseException) -> str:
    """A failed request in our words: pymodbus's own retry count ("after 0 retries", ours
    are counted by ``_request``) and its boilerplate are left out."""
    text = str(exc).strip() or type(exc).__name__
    if "No response received of the last requests" in text:
        return "no answer to the last requests (pymodbus closes the connection)"
    if "No response received" in text:
        return "no answer"
    text = text.removeprefix("Modbus Error: ").strip()
    return text if len(text) < 200 else text[:197] + "..."


def describe_connect_error(link: ModbusTcpLink | ModbusRtuLink, exc: BaseException) -> str:
    """Why a connection attempt raised, in words an installer can act on.

    A serial adapter (or its driver) that cannot do the configured line settings makes
    the port's set-up fail with EINVAL, which pyserial reports as a bare
    ``(22, 'Invalid argument')``; say which settings it refused instead.
    """
    code = getattr(exc, "errno", None)
    args = getattr(exc, "args", ())
    if code is None and args and isinstance(args[0], int):
        code = args[0]
    if isinstance(link, ModbusRtuLink) and code == errno.EINVAL:
        return (
            f"the serial port {link.device} refused the line settings {link.baud} baud "
            f"{link.data_bits}{link.parity}{link.stop_bits} (invalid argument): "
            "check that the adapter supports them"
        )
    return f"{type(exc).__name__}: {exc}"
