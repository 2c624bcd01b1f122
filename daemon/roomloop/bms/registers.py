"""The BMS face's register map: which register holds what, and how values become words.

Pure (no I/O, no clock): the map is built from the site, a read turns zone
snapshots into register words, a write turns words into the zone commands the
service applies through its one command path. The same map is what
``roomloop bms-map`` prints for the BMS contractor, so the document and the
server cannot disagree.

Every zone is a block of ``zone_block`` registers from ``base_address + i *
zone_block`` (zone ``i`` in file order); the block starts with the fixed
entries of :data:`LAYOUT`, then one reliability register per input point and
one for the backup point. Temperatures are in the site's units, as ``int16``
tenths (``0x8000``: not available) or IEEE 754 ``float32`` over two registers
(NaN: not available) in the configured word order. Unused registers are
outside the map (exception 2).
"""

from __future__ import annotations

import math
import struct
from collections.abc import Callable
from dataclasses import dataclass
from typing import Literal

from roomloop.config.models import LEVELS, Bms, Level, Site, Zone
from roomloop.core.alarms import ALARM_KINDS
from roomloop.core.state import ZoneState
from roomloop.core.types import RELIABILITY_VALUES, ZoneOutputs
from roomloop.units import delta_from_kelvin, from_celsius, to_celsius

ILLEGAL_FUNCTION = 1
ILLEGAL_ADDRESS = 2
ILLEGAL_VALUE = 3
DEVICE_BUSY = 6
"""Modbus exception codes (Modbus Application Protocol V1.1b3, section 7)."""

MAX_READ = 125
MAX_WRITE = 123
"""Registers per read / per write-multiple request (Modbus Application Protocol V1.1b3)."""

NOT_AVAILABLE_INT16 = 0x8000
MODES = ("auto", "hold", "off")
CONFIRMED = ("no", "yes", "unknown")

Kind = Literal["temperature", "delta", "enum", "bool", "uint16", "bits"]
Access = Literal["R", "RW"]


class MapError(Exception):
    """A request the map refuses; ``code`` is the Modbus exception to answer."""

    def __init__(self, code: int, reason: str) -> None:
        super().__init__(reason)
        self.code = code
        self.reason = reason


@dataclass(frozen=True, slots=True)
class Field:
    """One entry of a zone block, before it has an address."""

    name: str
    kind: Kind
    access: Access
    meaning: str
    choices: tuple[str, ...] = ()


LAYOUT: tuple[Field, ...] = (
    Field("temperature", "temperature", "R", "zone temperature"),
    Field("setpoint", "temperature", "R", "active set point"),
    Field("standby_setpoint", "temperature", "R", "standby set point"),
    Field("economy_setpoint", "temperature", "R", "economy set point"),
    Field("protection_setpoint", "temperature", "R", "protection (frost) set point"),
    Field("anticipator", "delta", "R", "anticipator term (virtual heat)"),
    Field("droop", "delta", "R", "droop compensation term"),
    Field(
        "comfort_setpoint", "temperature", "RW",
        "comfort set point (the site file's, or the held one after a write); a write holds "
        "that temperature at level comfort until mode auto",
    ),
    Field(
        "hold_setpoint", "temperature", "RW",
        "set point of the running hold (else the active set point); a write holds it",
    ),
    Field(
        "hold_minutes", "uint16", "RW",
        "minutes left of the hold (0: no hold or indefinite); a write of N holds for N "
        "minutes, 0 makes the hold indefinite",
    ),
    Field("mode", "enum", "RW", "mode", MODES),
    Field("level", "enum", "RW", "level in force", LEVELS),
    Field("demand", "bool", "R", "heat demand after all protections (1: relay on)"),
    Field("fail_safe", "bool", "R", "fail-safe engaged (no reliable temperature)"),
    Field("fail_safe_minutes_today", "uint16", "R", "minutes in fail-safe since local midnight"),
    Field("alarms", "bits", "R", "active alarms, one bit each", ALARM_KINDS),
    Field("output_confirmed", "enum", "R", "output read-back agrees", CONFIRMED),
)


@dataclass(frozen=True, slots=True)
class Register:
    """One value of the map, at its address (0-based, as on the wire)."""

    address: int
    zone: str
    field: str
    kind: Kind
    access: Access
    meaning: str
    words: int
    choices: tuple[str, ...] = ()
    point: str | None = None
    """For a reliability register: the point it describes."""

    @property
    def name(self) -> str:
        return f"{self.zone}.{self.field}"


@dataclass(frozen=True, slots=True)
class ZoneSnapshot:
    """What the face shows of one zone: the latest decision and what the service adds."""

    outputs: ZoneOutputs | None
    """None before the zone's first decision."""
    state: ZoneState
    at: float
    """Now, POSIX seconds (the hold's minutes left are counted from it)."""
    output_confirmed: bool | None = None
    alarm_bits: int = 0
    fail_safe_minutes_today: float = 0.0


@dataclass(frozen=True, slots=True)
class Write:
    """One decoded write: a register and the value written (site units, or a choice)."""

    register: Register
    value: float | int | str


Command = tuple[str, object]
"""A zone command as the core takes it: field and value (Celsius, POSIX seconds)."""


# --------------------------------------------------------------------------- words


def encode_float32(value: float, word_order: str) -> list[int]:
    """IEEE 754 binary32, high word first (``big``, ABCD) or low word first (``little``, CDAB)."""
    high, low = struct.unpack(">HH", struct.pack(">f", value))
    return [high, low] if word_order == "big" else [low, high]


def decode_float32(words: list[int], word_order: str) -> float:
    high, low = (words[0], words[1]) if word_order == "big" else (words[1], words[0])
    return float(struct.unpack(">f", struct.pack(">HH", high, low))[0])


def encode_int16x10(value: float) -> int:
    """Tenths as a two's-complement int16, clipped to +-3276.7."""
    raw = max(-32767, min(32767, round(value * 10.0)))
    return raw & 0xFFFF


def decode_int16x10(word: int) -> float:
    raw = word - 0x10000 if word & 0x8000 else word
    return raw / 10.0


# --------------------------------------------------------------------------- the map


class RegisterMap:
    """The whole site's map: entries, reads and writes."""

    def __init__(self, site: Site, bms: Bms | None = None) -> None:
        self.site = site
        self.bms = bms if bms is not None else (site.bms or Bms())
        self.units = site.site.units
        self.analog_words = 2 if self.bms.data_type == "float32" else 1
        self.registers: list[Register] = []
        self._at: dict[int, tuple[Register, int]] = {}
        for index, zone in enumerate(site.zones):
            start = self.bms.base_address + index * self.bms.zone_block
            self._lay_out(zone, start)
        self.zones = {zone.name: zone for zone in site.zones}

    def _lay_out(self, zone: Zone, start: int) -> None:
        address = start
        entries: list[tuple[Field, str | None]] = [(f, None) for f in LAYOUT]
        points = [*zone.inputs]
        if zone.fail_safe.backup_point:
            points.append(zone.fail_safe.backup_point)
        for point in points:
            entries.append(
                (
                    Field(
                        f"reliability.{point}", "enum", "R",
                        f"reliability of point {point}", RELIABILITY_VALUES,
                    ),
                    point,
                )
            )
        for spec, described in entries:
            words = self.analog_words if spec.kind in ("temperature", "delta") else 1
            register = Register(
                address, zone.name, spec.name, spec.kind, spec.access, spec.meaning, words,
                spec.choices, described,
            )
            self.registers.append(register)
            for i in range(words):
                self._at[address + i] = (register, i)
            address += words
        used = address - start
        assert used <= self.bms.zone_block, "config checks keep every zone inside its block"

    @staticmethod
    def fixed_registers(data_type: str) -> int:
        """Registers of the fixed part of a block (the config checks use the same count)."""
        words = 2 if data_type == "float32" else 1
        return sum(words if f.kind in ("temperature", "delta") else 1 for f in LAYOUT)

    # ------------------------------------------------------------------ document

    def type_of(self, register: Register) -> str:
        if register.kind in ("temperature", "delta"):
            return "float32" if self.analog_words == 2 else "int16"
        return "uint16"

    def scale_of(self, register: Register) -> str:
        if register.kind in ("temperature", "delta") and self.analog_words == 1:
            return "0.1"
        return "1"

    def unit_of(self, register: Register) -> str:
        if register.kind == "temperature":
            return self.units
        if register.kind == "delta":
            return "K" if self.units == "C" else "F-deg"
        if register.field in ("hold_minutes", "fail_safe_minutes_today"):
            return "min"
        return ""

    def meaning_of(self, register: Register) -> str:
        text = register.meaning
        if register.kind == "enum":
            text += ": " + ", ".join(f"{i} {c}" for i, c in enumerate(register.choices))
        elif register.kind == "bits":
            text += ": " + ", ".join(f"bit {i} {c}" for i, c in enumerate(register.choices))
        elif register.kind == "temperature" and register.field == "temperature":
            missing = "0x8000" if self.analog_words == 1 else "NaN"
            text += f" ({missing}: not available)"
        if register.kind == "temperature" and self.bms.data_type == "float32":
            text += f"; word order {'ABCD' if self.bms.word_order == 'big' else 'CDAB'}"
        return text

    def rows(self) -> list[dict[str, str]]:
        """The map as the document rows: address, name, type, scale, unit, access, meaning."""
        return [
            {
                "address": str(r.address),
                "name": r.name,
                "type": self.type_of(r),
                "scale": self.scale_of(r),
                "unit": self.unit_of(r),
                "access": r.access,
                "meaning": self.meaning_of(r),
            }
            for r in self.registers
        ]

    # ------------------------------------------------------------------ reads

    def words_of(self, register: Register, snapshot: ZoneSnapshot) -> list[int]:
        """The register's words for one zone snapshot."""
        value = self._value(register, snapshot)
        if register.kind in ("temperature", "delta"):
            number = None if value is None else float(value)
            if number is not None and register.kind == "temperature" and self.units == "F":
                number = from_celsius(number, "F")
            elif number is not None and register.kind == "delta" and self.units == "F":
                number = delta_from_kelvin(number, "F")
            if self.analog_words == 2:
                return encode_float32(math.nan if number is None else number, self.bms.word_order)
            return [NOT_AVAILABLE_INT16 if number is None else encode_int16x10(number)]
        number_int = 0 if value is None else int(value)
        return [max(0, min(0xFFFF, number_int))]

    def _value(self, register: Register, snap: ZoneSnapshot) -> float | int | None:
        of_field = _FIELD_VALUES.get(register.field)
        if of_field is not None:
            return of_field(self.zones[register.zone], snap)
        assert register.point is not None
        out = snap.outputs
        reliability = (
            dict(out.reliability).get(register.point) if out is not None else None
        ) or _remembered(snap.state, register.point)
        return RELIABILITY_VALUES.index(reliability)

    def read(
        self, address: int, count: int, snapshot: Callable[[str], ZoneSnapshot | None]
    ) -> list[int]:
        """Words at ``address``..``address + count - 1``, or :class:`MapError`."""
        if not 1 <= count <= MAX_READ:
            raise MapError(ILLEGAL_VALUE, f"a read asks for 1 to {MAX_READ} registers, not {count}")
        missing = [a for a in range(address, address + count) if a not in self._at]
        if missing:
            raise MapError(ILLEGAL_ADDRESS, f"register {missing[0]} is not in the map")
        words: list[int] = []
        cache: dict[str, ZoneSnapshot | None] = {}
        done: dict[int, list[int]] = {}
        for a in range(address, address + count):
            register, offset = self._at[a]
            if register.address not in done:
                if register.zone not in cache:
                    cache[register.zone] = snapshot(register.zone)
                snap = cache[register.zone]
                if snap is None:
                    raise MapError(DEVICE_BUSY, f"zone {register.zone!r} has not started yet")
                done[register.address] = self.words_of(register, snap)
            words.append(done[register.address][offset])
        return words

    # ------------------------------------------------------------------ writes

    def decode_writes(self, address: int, words: list[int]) -> list[Write]:
        """The values a write request carries, checked against the map (not yet the zone)."""
        if not 1 <= len(words) <= MAX_WRITE:
            raise MapError(ILLEGAL_VALUE, f"a write carries 1 to {MAX_WRITE} registers")
        writes: list[Write] = []
        a = address
        end = address + len(words)
        while a < end:
            entry = self._at.get(a)
            if entry is None:
                raise MapError(ILLEGAL_ADDRESS, f"register {a} is not in the map")
            register, offset = entry
            if register.access != "RW":
                raise MapError(ILLEGAL_ADDRESS, f"register {a} ({register.name}) is read-only")
            if offset != 0 or a + register.words > end:
                raise MapError(
                    ILLEGAL_ADDRESS, f"{register.name} spans {register.words} registers from "
                    f"{register.address}: write them together",
                )
            chunk = words[a - address : a - address + register.words]
            writes.append(Write(register, self._decode(register, chunk)))
            a += register.words
        return writes

    def _decode(self, register: Register, chunk: list[int]) -> float | int | str:
        if register.kind == "temperature":
            if self.analog_words == 2:
                value = decode_float32(chunk, self.bms.word_order)
            else:
                if chunk[0] == NOT_AVAILABLE_INT16:
                    raise MapError(ILLEGAL_VALUE, f"{register.name}: 0x8000 is not a value")
                value = decode_int16x10(chunk[0])
            if not math.isfinite(value):
                raise MapError(ILLEGAL_VALUE, f"{register.name}: not a finite number")
            return value
        if register.kind == "enum":
            if chunk[0] >= len(register.choices):
                raise MapError(
                    ILLEGAL_VALUE,
                    f"{register.name}: {chunk[0]} is not one of 0..{len(register.choices) - 1}",
                )
            return register.choices[chunk[0]]
        return chunk[0]

    def commands(self, write: Write, now: float) -> list[Command]:
        """The zone commands a decoded write means (Celsius, POSIX seconds), or MapError.

        A comfort set point outside the zone's limits is refused here, before the level
        change it comes with, so a refused write changes nothing.
        """
        register, value = write.register, write.value
        zone = self.zones[register.zone]
        if register.kind == "temperature":
            celsius = float(value)
            if self.units == "F":
                celsius = to_celsius(celsius, "F")
            if register.field == "comfort_setpoint":
                low, high = zone.limits.min, zone.limits.max
                if not low - 1e-6 <= celsius <= high + 1e-6:
                    raise MapError(ILLEGAL_VALUE, f"{register.name}: outside the zone's limits")
                return [("level", "comfort"), ("setpoint", celsius)]
            return [("setpoint", celsius)]
        if register.field == "hold_minutes":
            minutes = int(value)
            return [("hold_until", None if minutes == 0 else now + minutes * 60.0)]
        return [(register.field, value)]

    # ------------------------------------------------------------------ helpers

    def register(self, zone: str, field: str) -> Register:
        for r in self.registers:
            if r.zone == zone and r.field == field:
                return r
        raise KeyError(f"{zone}.{field}")

    def zone_registers(self, zone: str) -> list[Register]:
        return [r for r in self.registers if r.zone == zone]


def _level_setpoint(level: Level) -> Callable[[Zone, ZoneSnapshot], float]:
    """The site file's set point of ``level`` (read-only registers)."""
    return lambda zone, snap: zone.setpoints.for_level(level)


def _comfort_setpoint(zone: Zone, snap: ZoneSnapshot) -> float:
    held = _comfort_hold(snap.state)
    return zone.setpoints.for_level("comfort") if held is None else held


def _hold_setpoint(zone: Zone, snap: ZoneSnapshot) -> float | None:
    state, out = snap.state, snap.outputs
    if state.mode == "hold" and state.hold_setpoint is not None:
        return state.hold_setpoint
    return None if out is None else out.setpoint


def _hold_minutes(zone: Zone, snap: ZoneSnapshot) -> int:
    state = snap.state
    if state.mode != "hold" or state.hold_until is None:
        return 0
    return max(0, math.ceil((state.hold_until - snap.at) / 60.0))


def _mode_value(zone: Zone, snap: ZoneSnapshot) -> int | None:
    mode = snap.state.mode if snap.outputs is None else snap.outputs.mode
    return MODES.index(mode) if mode in MODES else None


def _level_value(zone: Zone, snap: ZoneSnapshot) -> int | None:
    level = snap.state.scheduled_level if snap.outputs is None else snap.outputs.level
    return LEVELS.index(level) if level in LEVELS else None


def _confirmed_value(zone: Zone, snap: ZoneSnapshot) -> int:
    confirmed = snap.output_confirmed
    return 2 if confirmed is None else int(confirmed)


_FIELD_VALUES: dict[str, Callable[[Zone, ZoneSnapshot], float | int | None]] = {
    "temperature": lambda zone, snap: None if snap.outputs is None else snap.outputs.temperature,
    "setpoint": lambda zone, snap: None if snap.outputs is None else snap.outputs.setpoint,
    "standby_setpoint": _level_setpoint("standby"),
    "economy_setpoint": _level_setpoint("economy"),
    "protection_setpoint": _level_setpoint("protection"),
    "comfort_setpoint": _comfort_setpoint,
    "hold_setpoint": _hold_setpoint,
    "anticipator": lambda zone, snap: (
        snap.state.anticipator_k if snap.outputs is None else snap.outputs.anticipator_k
    ),
    "droop": lambda zone, snap: (
        snap.state.droop_k if snap.outputs is None else snap.outputs.droop_k
    ),
    "hold_minutes": _hold_minutes,
    "mode": _mode_value,
    "level": _level_value,
    "demand": lambda zone, snap: (
        int(snap.state.relay_on) if snap.outputs is None else int(snap.outputs.demand)
    ),
    "fail_safe": lambda zone, snap: int(
        snap.state.fail_safe if snap.outputs is None else snap.outputs.fail_safe
    ),
    "fail_safe_minutes_today": lambda zone, snap: math.floor(snap.fail_safe_minutes_today),
    "alarms": lambda zone, snap: snap.alarm_bits,
    "output_confirmed": _confirmed_value,
}
"""How each zone field's value is read from a snapshot; a point's reliability is not here."""


def _comfort_hold(state: ZoneState) -> float | None:
    """The temperature of a running hold at level comfort (what a comfort write starts)."""
    if state.mode == "hold" and state.hold_level == "comfort":
        return state.hold_setpoint
    return None


def _remembered(state: ZoneState, point: str) -> str:
    """A point's reliability from the state alone (before the zone's first decision)."""
    for memory in (*state.points, state.backup):
        if memory is not None and memory.name == point:
            return memory.reliability
    return "stale"
