"""Register decoding against outside check values (REFERENCES.md) and round trips."""

from __future__ import annotations

import math
import struct
from typing import Any

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from roomloop.config.models import ModbusInput
from roomloop.io.codec import (
    CodecError,
    decode_point,
    decode_raw,
    encode_point,
    encode_raw,
    order_name,
)

ORDERS = {  # letter name -> (word_order, byte_order)
    "ABCD": ("big", "big"),
    "CDAB": ("little", "big"),
    "BADC": ("big", "little"),
    "DCBA": ("little", "little"),
}


def point(**fields: Any) -> ModbusInput:
    base: dict[str, Any] = {"type": "modbus-input", "name": "p", "link": "l", "address": 0}
    base.update(fields)
    return ModbusInput(**base)


# REFERENCES.md: IEEE 754 float32 21.5 = 0x41AC0000 in four register orders [published; computed]
FLOAT_21_5 = {
    "ABCD": [0x41AC, 0x0000],
    "CDAB": [0x0000, 0x41AC],
    "BADC": [0xAC41, 0x0000],
    "DCBA": [0x0000, 0xAC41],
}


@pytest.mark.parametrize("name", sorted(FLOAT_21_5))
def test_float32_21_5_in_every_order(name: str) -> None:
    word, byte = ORDERS[name]
    assert order_name(word, byte) == name  # type: ignore[arg-type]
    assert decode_raw(FLOAT_21_5[name], "float32", word, byte) == 21.5  # type: ignore[arg-type]
    assert encode_raw(21.5, "float32", word, byte) == FLOAT_21_5[name]  # type: ignore[arg-type]
    decoded = decode_point(
        point(data_type="float32", word_order=word, byte_order=byte), FLOAT_21_5[name]
    )
    assert decoded.value == 21.5 and decoded.transport == "ok"


def test_int16_times_ten_transmitter() -> None:
    # REFERENCES.md: transmitters send int16 x 10: 21.5 C -> 0x00D7, -5.5 C -> 0xFFC9 [trade]
    p = point(scale=0.1)
    assert decode_point(p, [0x00D7]).value == pytest.approx(21.5)
    assert decode_point(p, [0xFFC9]).value == pytest.approx(-5.5)
    assert encode_point(p, 21.5) == [0x00D7]
    assert encode_point(p, -5.5) == [0xFFC9]
    # the same registers read as uint16 are not negative
    assert decode_raw([0xFFC9], "uint16") == 65481


def test_int16_byte_order_little() -> None:
    # 0x00D7 with its bytes swapped on the wire (BADC for 16-bit values)
    assert decode_point(point(scale=0.1, byte_order="little"), [0xD700]).value == pytest.approx(
        21.5
    )


def test_ds18b20_raw_values() -> None:
    # REFERENCES.md: DS18B20 datasheet: raw 0x0191 = 25.0625 C, 0xFF5E = -10.125 C,
    # power-on reset value 0x0550 = 85.0 C [published]
    p = point(scale=0.0625, valid_range=(-55, 125))
    assert decode_point(p, [0x0191]).value == 25.0625
    assert decode_point(p, [0xFF5E]).value == -10.125
    assert decode_point(p, [0x0550]).value == 85.0
    # configured as a sentinel, the power-on value is no reading at all
    reset = decode_point(point(scale=0.0625, valid_range=(-55, 125), sentinels=(0x0550,)), [0x0550])
    assert (
        reset.value is None and reset.transport == "over-range" and "0x0550" in (reset.detail or "")
    )


def test_sentinels_common_transmitter_values() -> None:
    # REFERENCES.md: sentinels 0x7FFF over range, 0x8000 not available, 0x8001 under range [trade]
    p = point(scale=0.1, sentinels=(0x7FFF, 0x8000, 0x8001))
    assert decode_point(p, [0x7FFF]).transport == "over-range"
    assert decode_point(p, [0x8000]).transport == "under-range"
    assert decode_point(p, [0x8001]).transport == "under-range"
    assert all(decode_point(p, [r]).value is None for r in (0x7FFF, 0x8000, 0x8001))
    # a sentinel written as the signed value matches too
    assert decode_point(point(scale=0.1, sentinels=(-32768,)), [0x8000]).value is None
    # an ordinary value next to a sentinel is untouched
    assert decode_point(p, [0x7FFE]).transport == "ok"  # 3276.6 C: the core judges its range
    assert decode_point(p, [0x7FFE]).value == pytest.approx(3276.6)


def test_sentinels_with_a_verdict_each() -> None:
    # REFERENCES.md: 0x7FFF over range, 0x8000 not available, 0x8001 under range [trade]:
    # "not available" is no range verdict, so the site file can name it per value.
    p = point(
        scale=0.1, sentinels={0x7FFF: "over-range", 0x8000: "comm-failure", 0x8001: "under-range"}
    )
    assert decode_point(p, [0x7FFF]).transport == "over-range"
    assert decode_point(p, [0x8000]).transport == "comm-failure"
    assert decode_point(p, [0x8001]).transport == "under-range"
    assert all(decode_point(p, [r]).value is None for r in (0x7FFF, 0x8000, 0x8001))
    assert decode_point(p, [0x00D7]).value == pytest.approx(21.5)


def test_32_bit_sentinel_compared_in_value_order() -> None:
    p = point(data_type="uint32", word_order="little", sentinels=(0xFFFFFFFF,))
    assert decode_point(p, [0xFFFF, 0xFFFF]).value is None
    q = point(
        data_type="int32", word_order="little", sentinels=(0x12345678,), valid_range=(-1e12, 1e12)
    )
    assert decode_point(q, [0x5678, 0x1234]).value is None
    assert decode_point(q, [0x1234, 0x5678]).value == 0x56781234


def test_nan_and_infinity_rejected() -> None:
    p = point(data_type="float32")
    nan = decode_point(p, encode_raw(float("nan"), "float32"))
    assert nan.value is None and nan.transport == "comm-failure"
    up = decode_point(p, encode_raw(float("inf"), "float32"))
    down = decode_point(p, encode_raw(float("-inf"), "float32"))
    assert (up.value, up.transport) == (None, "over-range")
    assert (down.value, down.transport) == (None, "under-range")
    # a finite float32 that overflows after scaling
    big = decode_point(point(data_type="float32", scale=1e300), encode_raw(3e38, "float32"))
    assert big.value is None and big.transport == "over-range"


def test_values_outside_the_valid_range_are_delivered_unjudged() -> None:
    # range is the core's judgement (roomloop.core.reliability), for Modbus, MQTT and the
    # simulator alike; the codec only decodes
    p = point(scale=0.1, valid_range=(-10, 50))
    high = decode_point(p, encode_raw(501, "int16"))
    assert (high.transport, high.raw) == ("ok", 501)
    assert high.value == pytest.approx(50.1)
    low = decode_point(p, encode_raw(-101, "int16"))
    assert low.transport == "ok"
    assert low.value == pytest.approx(-10.1)


def test_fahrenheit_device() -> None:
    # 70.7 F = 21.5 C from F = C x 9/5 + 32 [published: NIST SP 811, temperature conversion]
    p = point(unit="F", scale=0.1)
    assert decode_point(p, [707]).value == pytest.approx(21.5)
    assert encode_point(p, 21.5) == [707]


def test_offset_applies_before_the_unit() -> None:
    # value = raw * scale + offset: 6150 * 0.01 - 40 = 21.5
    p = point(data_type="uint16", scale=0.01, offset=-40.0)
    assert decode_point(p, [6150]).value == pytest.approx(21.5)


def test_wrong_register_count_is_a_verdict_not_a_crash() -> None:
    assert decode_point(point(data_type="float32"), [0x41AC]).transport == "comm-failure"
    with pytest.raises(CodecError):
        decode_raw([0x41AC], "float32")
    with pytest.raises(CodecError):
        decode_raw([0x1_0000], "uint16")
    with pytest.raises(CodecError):
        encode_raw(70000, "int16")


TYPES = ["int16", "uint16", "int32", "uint32", "float32"]
LIMITS = {
    "int16": (-(2**15), 2**15 - 1),
    "uint16": (0, 2**16 - 1),
    "int32": (-(2**31), 2**31 - 1),
    "uint32": (0, 2**32 - 1),
}


@settings(max_examples=300, deadline=None)
@given(
    data_type=st.sampled_from(TYPES),
    order=st.sampled_from(sorted(ORDERS)),
    data=st.data(),
)
def test_round_trip_every_type_and_order(data_type: Any, order: str, data: st.DataObject) -> None:
    word, byte = ORDERS[order]
    if data_type == "float32":
        value: float = data.draw(st.floats(width=32, allow_nan=False, allow_infinity=False))
    else:
        low, high = LIMITS[data_type]
        value = data.draw(st.integers(low, high))
    registers = encode_raw(value, data_type, word, byte)  # type: ignore[arg-type]
    assert all(0 <= r <= 0xFFFF for r in registers)
    assert decode_raw(registers, data_type, word, byte) == value  # type: ignore[arg-type]
    # independent reference: struct on the ABCD bytes, reordered by hand
    fmt = {"int16": ">h", "uint16": ">H", "int32": ">i", "uint32": ">I", "float32": ">f"}[data_type]
    abcd = struct.pack(fmt, value)
    letters = dict(zip("ABCD", abcd, strict=False))
    wire = bytes(
        letters[c] for c in (order if len(abcd) == 4 else ("BA" if byte == "little" else "AB"))
    )
    assert registers == [int.from_bytes(wire[i : i + 2], "big") for i in range(0, len(wire), 2)]


@settings(max_examples=300, deadline=None)
@given(
    registers=st.lists(st.integers(0, 0xFFFF), min_size=2, max_size=2),
    order=st.sampled_from(sorted(ORDERS)),
)
def test_any_float_registers_give_a_verdict(registers: list[int], order: str) -> None:
    word, byte = ORDERS[order]
    decoded = decode_point(point(data_type="float32", word_order=word, byte_order=byte), registers)
    assert decoded.transport in ("ok", "over-range", "under-range", "comm-failure")
    if decoded.value is not None:
        assert math.isfinite(decoded.value)
    # a value is always delivered as ok (its range is the core's to judge), and ok has one
    assert (decoded.transport == "ok") == (decoded.value is not None)
