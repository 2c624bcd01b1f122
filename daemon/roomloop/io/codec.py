"""Register decoding: Modbus registers to a Celsius value and the transport facts, and back.

Pure functions, no pymodbus: the planner, the links, ``probe``, the demo's plant
server and the tests all share one definition of what a register pair means.

Word and byte order follow the usual letter names for a 32-bit value whose
big-endian bytes are A B C D:

=====  ==========  ==========  ===================
name   word_order  byte_order  registers on the wire
=====  ==========  ==========  ===================
ABCD   big         big         AB CD
CDAB   little      big         CD AB
BADC   big         little      BA DC
DCBA   little      little      DC BA
=====  ==========  ==========  ===================

For 16-bit types only the byte order matters.
"""

from __future__ import annotations

import math
import struct
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Literal

from roomloop.config.models import DATA_TYPE_REGISTERS, ModbusInput
from roomloop.core.types import Transport
from roomloop.units import from_celsius, to_celsius

DataType = Literal["int16", "uint16", "int32", "uint32", "float32"]
Order = Literal["big", "little"]

_STRUCT = {"int16": ">h", "uint16": ">H", "int32": ">i", "uint32": ">I", "float32": ">f"}


class CodecError(ValueError):
    """Registers that cannot be decoded at all (wrong count, not 16-bit values)."""


@dataclass(frozen=True, slots=True)
class Decoded:
    """What one point's registers mean, before any judgement of the value.

    ``value`` is Celsius, or ``None`` when the registers hold no number (a sentinel,
    NaN, infinity); ``transport`` is ``ok`` whenever there is a value, even one far
    outside the valid range: the core judges range (:mod:`roomloop.core.reliability`).
    ``detail`` says why there is no value, for the log.
    """

    value: float | None
    transport: Transport
    raw: int | float
    detail: str | None = None


def order_name(word_order: Order, byte_order: Order) -> str:
    """The letter name (ABCD, CDAB, BADC, DCBA) of a word/byte order pair."""
    return {
        ("big", "big"): "ABCD",
        ("little", "big"): "CDAB",
        ("big", "little"): "BADC",
        ("little", "little"): "DCBA",
    }[(word_order, byte_order)]


def registers_to_bytes(registers: Sequence[int], word_order: Order, byte_order: Order) -> bytes:
    """The value's bytes in big-endian (ABCD) order, whatever order the device sends."""
    for register in registers:
        if not isinstance(register, int) or not 0 <= register <= 0xFFFF:
            raise CodecError(f"{register!r} is not a 16-bit register value")
    words = list(registers)
    if byte_order == "little":
        words = [((w & 0xFF) << 8) | (w >> 8) for w in words]
    if word_order == "little":
        words.reverse()
    return b"".join(w.to_bytes(2, "big") for w in words)


def bytes_to_registers(data: bytes, word_order: Order, byte_order: Order) -> list[int]:
    """Inverse of :func:`registers_to_bytes`."""
    words = [int.from_bytes(data[i : i + 2], "big") for i in range(0, len(data), 2)]
    if word_order == "little":
        words.reverse()
    if byte_order == "little":
        words = [((w & 0xFF) << 8) | (w >> 8) for w in words]
    return words


def decode_raw(
    registers: Sequence[int],
    data_type: DataType,
    word_order: Order = "big",
    byte_order: Order = "big",
) -> int | float:
    """The number the registers hold, before scale, offset and unit."""
    need = DATA_TYPE_REGISTERS[data_type]
    if len(registers) != need:
        raise CodecError(f"a {data_type} value spans {need} register(s), got {len(registers)}")
    value: int | float = struct.unpack(
        _STRUCT[data_type], registers_to_bytes(registers, word_order, byte_order)
    )[0]
    return value


def encode_raw(
    value: int | float,
    data_type: DataType,
    word_order: Order = "big",
    byte_order: Order = "big",
) -> list[int]:
    """The registers a device would send for ``value`` (ints are rounded; out of range raises)."""
    number: int | float = float(value) if data_type == "float32" else round(value)
    try:
        data = struct.pack(_STRUCT[data_type], number)
    except struct.error as exc:
        raise CodecError(f"{value!r} does not fit a {data_type}: {exc}") from exc
    return bytes_to_registers(data, word_order, byte_order)


def unsigned_raw(registers: Sequence[int], word_order: Order, byte_order: Order) -> int:
    """The registers as one unsigned integer in ABCD order (what sentinels are compared with)."""
    return int.from_bytes(registers_to_bytes(registers, word_order, byte_order), "big")


def matched_sentinel(registers: Sequence[int], point: ModbusInput) -> int | None:
    """The configured 'no reading' value the raw registers match, or None.

    A sentinel matches the unsigned raw value (``0x8000``) or, for signed types,
    the signed one (``-32768``), so either spelling in the site file works.
    """
    if not point.sentinels:
        return None
    unsigned = unsigned_raw(registers, point.word_order, point.byte_order)
    candidates = {unsigned}
    if point.data_type in ("int16", "int32"):
        candidates.add(
            int(decode_raw(registers, point.data_type, point.word_order, point.byte_order))
        )
    for sentinel in point.sentinel_values:
        if sentinel in candidates:
            return sentinel
    return None


def is_sentinel(registers: Sequence[int], point: ModbusInput) -> bool:
    """True when the raw value is one of the point's configured 'no reading' values."""
    return matched_sentinel(registers, point) is not None


def decode_point(point: ModbusInput, registers: Sequence[int]) -> Decoded:
    """Decode one input point's registers into Celsius and a transport verdict; never raises.

    A sentinel gives no value and the verdict configured for it, or else ``over-range``
    or ``under-range`` by which half of the valid range its scaled value falls in (0x7FFF
    above, 0x8000/0x8001 below); NaN gives no value and ``comm-failure``; +-inf (or a value
    that overflows when scaled) gives no value and over/under-range. Any finite value is
    ``ok``, whatever its range: that judgement is the core's.
    """
    try:
        raw = decode_raw(registers, point.data_type, point.word_order, point.byte_order)
    except CodecError as exc:
        return Decoded(None, "comm-failure", 0, f"undecodable: {exc}")
    sentinel = matched_sentinel(registers, point)
    if sentinel is not None:
        configured = point.sentinel_verdict(sentinel)
        verdict: Transport
        if configured is not None:
            verdict = configured
        else:
            scaled = to_celsius(raw * point.scale + point.offset, point.unit)
            low, high = point.valid_range
            verdict = "over-range" if scaled >= (low + high) / 2 else "under-range"
        unsigned = unsigned_raw(registers, point.word_order, point.byte_order)
        hex_raw = f"0x{unsigned:0{4 * len(registers)}X}"
        return Decoded(None, verdict, raw, f"sentinel {hex_raw}")
    if isinstance(raw, float) and not math.isfinite(raw):
        if math.isnan(raw):
            return Decoded(None, "comm-failure", raw, "not a number (NaN)")
        return Decoded(None, "over-range" if raw > 0 else "under-range", raw, f"infinite ({raw})")
    celsius = to_celsius(raw * point.scale + point.offset, point.unit)
    if not math.isfinite(celsius):
        return Decoded(None, "over-range" if celsius > 0 else "under-range", raw, "overflows")
    return Decoded(celsius, "ok", raw)


def encode_point(point: ModbusInput, celsius: float) -> list[int]:
    """The registers a device set up like ``point`` sends for ``celsius`` (simulators, tests)."""
    device_value = (from_celsius(celsius, point.unit) - point.offset) / point.scale
    return encode_raw(device_value, point.data_type, point.word_order, point.byte_order)
