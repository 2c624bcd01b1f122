"""The register map, pure: layout, value encodings, reads and writes refused with the right code."""

from __future__ import annotations

import itertools
import math
import struct
from dataclasses import replace

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from roomloop.bms.registers import (
    ILLEGAL_ADDRESS,
    ILLEGAL_VALUE,
    LAYOUT,
    MapError,
    RegisterMap,
    ZoneSnapshot,
    decode_float32,
    decode_int16x10,
    encode_float32,
    encode_int16x10,
)
from roomloop.config.loader import site_from_data
from roomloop.config.models import BMS_FIXED_REGISTERS, Site
from roomloop.core.controller import ZoneController
from roomloop.core.settings import ZoneSettings
from roomloop.core.types import ZoneOutputs


def make_site(**bms: object) -> Site:
    data = {
        "site": {"name": "regs"},
        "links": [{"name": "io", "type": "modbus-tcp", "host": "127.0.0.1"}],
        "points": [
            {"name": "t1", "type": "modbus-input", "link": "io", "address": 0},
            {"name": "t2", "type": "modbus-input", "link": "io", "address": 1},
            {"name": "r1", "type": "modbus-output", "link": "io", "address": 0},
            {"name": "r2", "type": "modbus-output", "link": "io", "address": 1},
        ],
        "zones": [
            {"name": "a", "inputs": ["t1"], "output": "r1", "heating": "hydronic"},
            {
                "name": "b", "inputs": ["t2"], "output": "r2", "heating": "electric",
                "fail_safe": {"backup_point": "t1"},
                "setpoints": {"comfort": 21.5, "standby": 19, "economy": 16, "protection": 6},
            },
        ],
        "bms": dict(bms),
    }
    return site_from_data(data, "test")


def snapshot(site: Site, zone: str, **outputs: object) -> ZoneSnapshot:
    settings = ZoneSettings.from_site(site, zone)
    state = ZoneController(settings).initial_state(1000.0)
    out = ZoneOutputs(
        demand=True, reason="cut-in", temperature=-5.5, setpoint=21.5, level="comfort",
        mode="auto", anticipator_k=0.3, droop_k=0.1, reliability={"t1": "ok", "t2": "stuck"},
    )
    return ZoneSnapshot(replace(out, **outputs), state, 1000.0, True, 0b101, 12.7)  # type: ignore[arg-type]


# --------------------------------------------------------------------------- encodings


def test_float32_word_orders_match_ieee_754() -> None:
    # REFERENCES.md: IEEE 754 float32 21.5 = 0x41AC0000; ABCD 41AC 0000, CDAB 0000 41AC
    # [published; computed]
    assert encode_float32(21.5, "big") == [0x41AC, 0x0000]
    assert encode_float32(21.5, "little") == [0x0000, 0x41AC]
    assert decode_float32([0x41AC, 0x0000], "big") == 21.5
    assert decode_float32([0x0000, 0x41AC], "little") == 21.5


def test_int16_tenths_match_the_trade_convention() -> None:
    # REFERENCES.md: int16 x 10, 21.5 C -> 0x00D7, -5.5 C -> 0xFFC9 (common practice, no source)
    assert encode_int16x10(21.5) == 0x00D7
    assert encode_int16x10(-5.5) == 0xFFC9
    assert decode_int16x10(0xFFC9) == -5.5
    assert encode_int16x10(1e9) == 0x7FFF  # clipped, never the 0x8000 "not available" word


@settings(max_examples=200, deadline=None)
@given(st.floats(min_value=-3276.7, max_value=3276.7, allow_nan=False))
def test_int16_round_trip_within_half_a_tenth(value: float) -> None:
    assert abs(decode_int16x10(encode_int16x10(value)) - value) <= 0.05 + 1e-9


@settings(max_examples=200, deadline=None)
@given(st.floats(width=32, allow_nan=False), st.sampled_from(["big", "little"]))
def test_float32_round_trip_is_exact(value: float, order: str) -> None:
    words = encode_float32(value, order)
    assert all(0 <= w <= 0xFFFF for w in words)
    assert decode_float32(words, order) == value
    # independent reference: the standard library's own big-endian binary32 bytes
    raw = struct.pack(">f", value)
    high = int.from_bytes(raw[:2], "big")
    assert words[0 if order == "big" else 1] == high


# --------------------------------------------------------------------------- layout


@pytest.mark.parametrize("data_type", ["int16x10", "float32"])
def test_layout_agrees_with_the_config_check_counts(data_type: str) -> None:
    assert RegisterMap.fixed_registers(data_type) == BMS_FIXED_REGISTERS[data_type]
    site = make_site(data_type=data_type, base_address=1000, zone_block=50)
    regmap = RegisterMap(site)
    a = regmap.zone_registers("a")
    b = regmap.zone_registers("b")
    assert a[0].address == 1000 and b[0].address == 1050
    assert len(a) == len(LAYOUT) + 1 and len(b) == len(LAYOUT) + 2  # b has a backup point
    end = a[-1].address + a[-1].words
    assert end - 1000 == BMS_FIXED_REGISTERS[data_type] + 1
    # registers of one zone follow each other without gaps or overlaps
    for first, second in itertools.pairwise(b):
        assert second.address == first.address + first.words


def test_rows_name_every_register_with_type_scale_unit() -> None:
    rows = RegisterMap(make_site()).rows()
    temp = next(r for r in rows if r["name"] == "a.temperature")
    expected = {"address": "0", "type": "int16", "scale": "0.1", "unit": "C", "access": "R"}
    assert temp == temp | expected
    mode = next(r for r in rows if r["name"] == "a.mode")
    assert mode["access"] == "RW" and "0 auto, 1 hold, 2 off" in mode["meaning"]


# --------------------------------------------------------------------------- reads


def test_read_encodes_the_snapshot_int16() -> None:
    site = make_site()
    regmap = RegisterMap(site)
    snaps = {"a": snapshot(site, "a"), "b": snapshot(site, "b", level="economy")}
    words = regmap.read(0, BMS_FIXED_REGISTERS["int16x10"] + 1, snaps.get)
    by_name = {r.field: words[r.address] for r in regmap.zone_registers("a")}
    assert by_name["temperature"] == 0xFFC9
    assert by_name["setpoint"] == 215
    assert by_name["comfort_setpoint"] == 200
    assert by_name["anticipator"] == 3
    assert by_name["demand"] == 1
    assert by_name["alarms"] == 0b101
    assert by_name["fail_safe_minutes_today"] == 12
    assert by_name["output_confirmed"] == 1
    assert by_name["reliability.t1"] == 0
    b = {r.field: r for r in regmap.zone_registers("b")}
    assert regmap.read(b["comfort_setpoint"].address, 1, snaps.get) == [215]
    assert regmap.read(b["level"].address, 1, snaps.get) == [2]
    assert regmap.read(b["reliability.t2"].address, 1, snaps.get) == [6]  # stuck


def test_float32_read_and_missing_temperature() -> None:
    site = make_site(data_type="float32", word_order="little")
    regmap = RegisterMap(site)
    snaps = {"a": snapshot(site, "a", temperature=None)}
    reg = regmap.register("a", "temperature")
    words = regmap.read(reg.address, 2, snaps.get)
    assert math.isnan(decode_float32(words, "little"))
    sp = regmap.register("a", "setpoint")
    assert regmap.read(sp.address, 2, snaps.get) == [0x0000, 0x41AC]  # 21.5, CDAB


def test_fahrenheit_site_reads_and_writes_in_fahrenheit() -> None:
    data = make_site().model_dump(mode="python")
    data["site"]["units"] = "F"
    for zone in data["zones"]:
        zone["setpoints"] = {"comfort": 68, "standby": 64.4, "economy": 60.8, "protection": 44.6}
        zone["limits"] = {"min": 41, "max": 82.4}
        zone.pop("tuning")
    site = site_from_data(data, "test")
    regmap = RegisterMap(site)
    reg = regmap.register("a", "comfort_setpoint")
    assert regmap.read(reg.address, 1, {"a": snapshot(site, "a")}.get) == [680]
    write = regmap.decode_writes(reg.address, [716])[0]  # 71.6 F = 22 C
    assert regmap.commands(write, 0.0) == [("level", "comfort"), ("setpoint", pytest.approx(22.0))]


@pytest.mark.parametrize(
    ("address", "count", "code"),
    [(19, 1, ILLEGAL_ADDRESS), (90, 20, ILLEGAL_ADDRESS), (0, 126, ILLEGAL_VALUE),
     (0, 0, ILLEGAL_VALUE), (65535, 1, ILLEGAL_ADDRESS)],
)
def test_reads_outside_the_map_are_refused(address: int, count: int, code: int) -> None:
    site = make_site()
    regmap = RegisterMap(site)
    snaps = {"a": snapshot(site, "a"), "b": snapshot(site, "b")}
    with pytest.raises(MapError) as caught:
        regmap.read(address, count, snaps.get)
    assert caught.value.code == code


# --------------------------------------------------------------------------- writes


def test_writes_decode_to_commands() -> None:
    regmap = RegisterMap(make_site())
    hold = regmap.register("a", "hold_setpoint").address
    minutes = regmap.register("a", "hold_minutes").address
    assert minutes == hold + 1  # one write-multiple sets a hold and its length
    writes = regmap.decode_writes(hold, [0x00D7, 90, 1, 2])
    commands = [c for w in writes for c in regmap.commands(w, 1000.0)]
    assert commands == [
        ("setpoint", 21.5), ("hold_until", 1000.0 + 90 * 60), ("mode", "hold"),
        ("level", "economy"),
    ]
    assert regmap.commands(regmap.decode_writes(minutes, [0])[0], 1000.0) == [
        ("hold_until", None)
    ]


def test_write_refusals() -> None:
    regmap = RegisterMap(make_site())
    temp = regmap.register("a", "temperature").address
    mode = regmap.register("a", "mode").address
    hold = regmap.register("a", "hold_setpoint").address
    comfort = regmap.register("a", "comfort_setpoint").address
    cases = [
        (temp, [200], ILLEGAL_ADDRESS),  # read-only
        (19, [1], ILLEGAL_ADDRESS),  # outside the map
        (mode, [3], ILLEGAL_VALUE),  # no fourth mode
        (hold, [0x8000], ILLEGAL_VALUE),  # "not available" is no set point
        (comfort, [200, 200, 5, 0, 0, 0], ILLEGAL_ADDRESS),  # runs on into demand (read-only)
    ]
    for address, words, code in cases:
        with pytest.raises(MapError) as caught:
            regmap.decode_writes(address, words)
        assert caught.value.code == code, (address, words)
    too_hot = regmap.decode_writes(comfort, [400])[0]
    with pytest.raises(MapError) as caught:
        regmap.commands(too_hot, 0.0)
    assert caught.value.code == ILLEGAL_VALUE


@settings(max_examples=300, deadline=None)
@given(
    st.integers(min_value=0, max_value=260),
    st.lists(st.integers(min_value=0, max_value=0xFFFF), min_size=0, max_size=130),
    st.sampled_from(["int16x10", "float32"]),
)
def test_any_write_is_commands_or_a_refusal_with_a_modbus_code(
    address: int, words: list[int], data_type: str
) -> None:
    regmap = RegisterMap(make_site(data_type=data_type))
    try:
        writes = regmap.decode_writes(address, words)
        commands = [c for w in writes for c in regmap.commands(w, 1000.0)]
    except MapError as exc:
        assert exc.code in (ILLEGAL_ADDRESS, ILLEGAL_VALUE) and exc.reason
        return
    assert writes and all(w.register.access == "RW" for w in writes)
    for field, value in commands:
        assert field in ("setpoint", "mode", "level", "hold_until")
        if field == "setpoint":
            assert isinstance(value, float) and math.isfinite(value)
