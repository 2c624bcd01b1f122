"""Site configuration models: the YAML file's shape, frozen once loaded.

Everything the user types and sees is in the site's units (``C`` or ``F``);
inside roomloop every temperature is Celsius. Absolute temperatures
(:data:`Temperature`) and temperature differences (:data:`TemperatureDelta`)
are converted on the way in and back on the way out, driven by the validation
context ``{"units": "F"}`` that the loader passes. Without a context the
values are taken as Celsius.

Cross-references between sections (a zone naming a point, a point naming a
link, ...) are checked by :mod:`roomloop.config.checks`, which can report all
of them at once; the models here check one object at a time.
"""

from __future__ import annotations

import datetime as dt
import math
import re
import zoneinfo
from typing import Annotated, Any, Literal

from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    PlainSerializer,
    PrivateAttr,
    SerializationInfo,
    ValidationInfo,
    field_validator,
    model_validator,
)

# --------------------------------------------------------------------------- units


def _units(context: Any) -> str:
    if isinstance(context, dict):
        units = context.get("units", "C")
        if units in ("C", "F"):
            return str(units)
    return "C"


def _abs_in(value: Any, info: ValidationInfo) -> Any:
    if _units(info.context) == "F" and _is_number(value):
        return (float(value) - 32.0) * 5.0 / 9.0
    return value


def _delta_in(value: Any, info: ValidationInfo) -> Any:
    if _units(info.context) == "F" and _is_number(value):
        return float(value) * 5.0 / 9.0
    return value


def _abs_out(value: float, info: SerializationInfo) -> float:
    if _units(info.context) == "F":
        return value * 9.0 / 5.0 + 32.0
    return value


def _delta_out(value: float, info: SerializationInfo) -> float:
    if _units(info.context) == "F":
        return value * 9.0 / 5.0
    return value


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


def _finite(value: float) -> float:
    if not math.isfinite(value):
        raise ValueError("must be a finite number")
    return value


Temperature = Annotated[
    float,
    BeforeValidator(_abs_in),
    PlainSerializer(_abs_out, return_type=float),
]
"""An absolute temperature: typed in the site's units, held in Celsius."""

TemperatureDelta = Annotated[
    float,
    BeforeValidator(_delta_in),
    PlainSerializer(_delta_out, return_type=float),
]
"""A temperature difference: typed in K (or F degrees), held in K."""

Name = Annotated[
    str,
    Field(min_length=1, max_length=64, pattern=r"^[a-z0-9][a-z0-9_-]*$"),
]
"""Names appear in MQTT topics and log events: lower case, digits, ``-`` and ``_``."""

Seconds = Annotated[float, Field(gt=0, allow_inf_nan=False)]
Fraction = Annotated[float, Field(ge=0, le=1, allow_inf_nan=False)]


class Strict(BaseModel):
    """Base of every config model: frozen, and unknown keys are errors (a typo is never ignored)."""

    model_config = ConfigDict(frozen=True, extra="forbid", populate_by_name=False)


# --------------------------------------------------------------------------- site


class SiteInfo(Strict):
    """Who and where this site is."""

    name: Name
    units: Literal["C", "F"] = "C"
    timezone: str = "UTC"
    state_dir: str = "/var/lib/roomloop"

    @field_validator("timezone")
    @classmethod
    def _known_zone(cls, value: str) -> str:
        try:
            zoneinfo.ZoneInfo(value)
        except (zoneinfo.ZoneInfoNotFoundError, ValueError) as exc:
            raise ValueError(
                f"unknown time zone {value!r} (use an IANA name such as Europe/Vienna)"
            ) from exc
        return value


# --------------------------------------------------------------------------- links

BAUD_RATES = (1200, 2400, 4800, 9600, 14400, 19200, 38400, 57600, 115200)


class ModbusLinkBase(Strict):
    """What every Modbus link shares: timing of requests on the wire."""

    name: Name
    timeout_s: Seconds = 1.0
    retries: Annotated[int, Field(ge=0, le=10)] = 2
    request_gap_s: Annotated[float, Field(ge=0, le=10)] = 0.02
    """Pause between two requests on this link (slow devices and RS-485 turn-around)."""
    poll_interval_s: Seconds = 5.0
    max_gap_registers: Annotated[int, Field(ge=0, le=100)] = 8
    """Unused registers a coalesced read may bridge between two points."""


class ModbusTcpLink(ModbusLinkBase):
    type: Literal["modbus-tcp"]
    host: Annotated[str, Field(min_length=1)]
    port: Annotated[int, Field(ge=1, le=65535)] = 502


class ModbusRtuLink(ModbusLinkBase):
    type: Literal["modbus-rtu"]
    device: Annotated[str, Field(min_length=1)]
    baud: int = 9600
    parity: Literal["N", "E", "O"] = "E"
    """Modbus over Serial Line V1.02 asks for even parity by default."""
    data_bits: int = 8
    """Modbus RTU characters carry 8 data bits (Modbus over Serial Line V1.02)."""
    stop_bits: Literal[1, 2] = 1

    @field_validator("data_bits")
    @classmethod
    def _rtu_data_bits(cls, value: int) -> int:
        if value != 8:
            raise ValueError(
                f"Modbus RTU sends 8 data bits per character, not {value} "
                "(7 data bits is Modbus ASCII, which roomloop does not speak)"
            )
        return value

    @field_validator("baud")
    @classmethod
    def _standard_baud(cls, value: int) -> int:
        if value not in BAUD_RATES:
            raise ValueError(
                f"{value} is not a standard baud rate; use one of "
                + ", ".join(str(b) for b in BAUD_RATES)
            )
        return value


Link = Annotated[ModbusTcpLink | ModbusRtuLink, Field(discriminator="type")]


class Tls(Strict):
    ca_file: str | None = None
    cert_file: str | None = None
    key_file: str | None = None
    insecure: bool = False
    """Skip the host name check (a self-signed broker on a site network); never the default."""


class Broker(Strict):
    """The site's MQTT broker: monitoring, commands and MQTT points go through it."""

    host: Annotated[str, Field(min_length=1)]
    port: Annotated[int, Field(ge=1, le=65535)] = 1883
    client_id: str | None = None
    keepalive_s: Annotated[int, Field(ge=5, le=3600)] = 30
    username: str | None = None
    password_file: str | None = None
    password_env: str | None = None
    tls: Tls | None = None
    topic_prefix: str | None = None
    """Defaults to ``roomloop/<site name>``."""
    publish_interval_s: Seconds = 60.0
    command_rate_per_min: Annotated[int, Field(ge=1, le=600)] = 30

    @model_validator(mode="after")
    def _one_password_source(self) -> Broker:
        if self.password_file is not None and self.password_env is not None:
            raise ValueError("give password_file or password_env, not both")
        if (self.password_file or self.password_env) and not self.username:
            raise ValueError("a password needs a username")
        if self.tls is not None and (self.tls.cert_file is None) != (self.tls.key_file is None):
            raise ValueError("tls.cert_file and tls.key_file go together")
        return self

    @field_validator("topic_prefix")
    @classmethod
    def _clean_prefix(cls, value: str | None) -> str | None:
        if value is None:
            return None
        if (
            not value
            or value.startswith("/")
            or value.endswith("/")
            or any(c in value for c in "#+")
        ):
            raise ValueError("a topic prefix has no leading or trailing '/', and no '#' or '+'")
        return value


# --------------------------------------------------------------------------- points

MODBUS_MAX_ADDRESS = 0xFFFF
SentinelVerdict = Literal["over-range", "under-range", "comm-failure"]


def _sentinel_map(value: Any) -> Any:
    """A list of raw values, or a mapping raw value -> verdict, as one mapping.

    Keys may be written in hex (``0x8000``); YAML may hand them over as text.
    """
    if isinstance(value, list | tuple):
        value = {item: None for item in value}
    if not isinstance(value, dict):
        return value
    out: dict[Any, Any] = {}
    for written, verdict in value.items():
        key = written
        if isinstance(written, str):
            try:
                key = int(written.strip(), 0)
            except ValueError:
                raise ValueError(
                    f"{key!r} is not a raw register value (e.g. 32768 or 0x8000)"
                ) from None
        out[key] = verdict
    return out


DATA_TYPE_REGISTERS = {"int16": 1, "uint16": 1, "int32": 2, "uint32": 2, "float32": 2}


class Reliability(Strict):
    """How an input point's readings are judged (BACnet-style reliability)."""

    stale_after_s: Seconds = 120.0
    max_rate_k_per_min: Annotated[TemperatureDelta, Field(gt=0, allow_inf_nan=False)] = 2.0
    """A room does not change faster than this; a jump beyond it is ``implausible``."""
    stuck_after_s: Seconds | None = 10800.0
    """No movement beyond the resolution for this long while the relay is on: ``stuck``."""
    resolution_k: Annotated[TemperatureDelta, Field(ge=0, allow_inf_nan=False)] = 0.1
    recovery_s: Annotated[float, Field(ge=0, allow_inf_nan=False)] = 60.0
    """A point must read good this long before it is trusted again."""


class InputBase(Strict):
    name: Name
    valid_range: tuple[Temperature, Temperature] = (-30.0, 60.0)
    reliability: Reliability = Reliability()
    unit: Literal["C", "F"] = "C"
    """The unit the device sends; converted to Celsius on arrival."""
    scale: Annotated[float, Field(allow_inf_nan=False)] = 1.0
    offset: Annotated[float, Field(allow_inf_nan=False)] = 0.0
    """value = raw * scale + offset, in the device's unit."""

    @field_validator("valid_range")
    @classmethod
    def _ordered_range(cls, value: tuple[float, float]) -> tuple[float, float]:
        low, high = value
        _finite(low)
        _finite(high)
        if low >= high:
            raise ValueError("valid_range is [low, high] with low below high")
        return value

    @field_validator("scale")
    @classmethod
    def _nonzero_scale(cls, value: float) -> float:
        if value == 0:
            raise ValueError("scale 0 would read every value as the offset")
        return value


class ModbusInput(InputBase):
    type: Literal["modbus-input"]
    link: Name
    unit_id: Annotated[int, Field(ge=0, le=247)] = 1
    table: Literal["input", "holding"] = "input"
    address: Annotated[int, Field(ge=0, le=MODBUS_MAX_ADDRESS)]
    data_type: Literal["int16", "uint16", "int32", "uint32", "float32"] = "int16"
    count: Annotated[int, Field(ge=1, le=125)] | None = None
    """Registers the value spans; implied by data_type, checked against it if given."""
    word_order: Literal["big", "little"] = "big"
    byte_order: Literal["big", "little"] = "big"
    sentinels: Annotated[dict[int, SentinelVerdict | None], BeforeValidator(_sentinel_map)] = {}
    """Raw register values the device sends instead of a reading (e.g. 0x7FFF, 0x8000).

    A list lets roomloop judge each by which half of the valid range it would fall in
    (0x7FFF ``over-range``, 0x8001 ``under-range``); a mapping names the verdict per
    value, e.g. ``{0x7FFF: over-range, 0x8000: comm-failure, 0x8001: under-range}``.
    """

    def sentinel_verdict(self, value: int) -> SentinelVerdict | None:
        """The configured verdict of a sentinel value (None: judge it by the valid range)."""
        return self.sentinels.get(value)

    @property
    def sentinel_values(self) -> tuple[int, ...]:
        return tuple(self.sentinels)

    @model_validator(mode="after")
    def _fits(self) -> ModbusInput:
        need = DATA_TYPE_REGISTERS[self.data_type]
        if self.count is not None and self.count != need:
            raise ValueError(f"a {self.data_type} value spans {need} register(s), not {self.count}")
        if self.address + need - 1 > MODBUS_MAX_ADDRESS:
            raise ValueError(f"address {self.address} + {need} registers runs past 65535")
        return self

    @property
    def registers(self) -> int:
        return DATA_TYPE_REGISTERS[self.data_type]


class MqttInput(InputBase):
    type: Literal["mqtt-input"]
    topic: Annotated[str, Field(min_length=1)]
    field: str | None = None
    """Dotted path into a JSON payload (``sensors.0.temp``); none for a plain number."""

    @field_validator("topic")
    @classmethod
    def _no_wildcards(cls, value: str) -> str:
        if "#" in value or "+" in value:
            raise ValueError("an input topic names one topic; wildcards are not allowed")
        return value


class ModbusOutput(Strict):
    type: Literal["modbus-output"]
    name: Name
    link: Name
    unit_id: Annotated[int, Field(ge=0, le=247)] = 1
    table: Literal["coil", "holding"] = "coil"
    address: Annotated[int, Field(ge=0, le=MODBUS_MAX_ADDRESS)]
    on_value: Annotated[int, Field(ge=0, le=0xFFFF)] = 1
    off_value: Annotated[int, Field(ge=0, le=0xFFFF)] = 0
    read_back: bool = True
    reassert_s: Seconds = 60.0
    """Write the wanted state again this often, so a relay module that lost power is corrected."""

    @model_validator(mode="after")
    def _distinct(self) -> ModbusOutput:
        if self.on_value == self.off_value:
            raise ValueError("on_value and off_value must differ")
        if self.table == "coil" and (self.on_value, self.off_value) not in ((1, 0), (0, 1)):
            raise ValueError("a coil is 1 or 0: on_value and off_value must be 1 and 0")
        return self


class MqttOutput(Strict):
    type: Literal["mqtt-output"]
    name: Name
    command_topic: Annotated[str, Field(min_length=1)]
    on_payload: str = "on"
    off_payload: str = "off"
    state_topic: str | None = None
    state_timeout_s: Seconds = 10.0
    reassert_s: Seconds = 300.0

    @model_validator(mode="after")
    def _distinct(self) -> MqttOutput:
        if self.on_payload == self.off_payload:
            raise ValueError("on_payload and off_payload must differ")
        for topic in (self.command_topic, self.state_topic):
            if topic is not None and ("#" in topic or "+" in topic):
                raise ValueError("output topics name one topic; wildcards are not allowed")
        return self


InputPoint = ModbusInput | MqttInput
OutputPoint = ModbusOutput | MqttOutput
Point = Annotated[ModbusInput | MqttInput | ModbusOutput | MqttOutput, Field(discriminator="type")]

# --------------------------------------------------------------------------- zones

HeatingType = Literal["forced-air", "hydronic", "underfloor", "electric", "steam"]
Level = Literal["comfort", "standby", "economy", "protection"]
Mode = Literal["auto", "hold", "off"]
LEVELS: tuple[Level, ...] = ("comfort", "standby", "economy", "protection")
DAYS = ("mon", "tue", "wed", "thu", "fri", "sat", "sun")


class Setpoints(Strict):
    """Set point per level; the defaults follow the usual KNX offsets (REFERENCES.md)."""

    comfort: Temperature = 20.0
    standby: Temperature = 18.0
    economy: Temperature = 16.0
    protection: Temperature = 7.0

    def for_level(self, level: Level) -> float:
        return float(getattr(self, level))


class Limits(Strict):
    """The range any set point (program, hold or command) is clamped to."""

    min: Temperature = 5.0
    max: Temperature = 28.0


class TuningInput(Strict):
    """Tuning as written in the file; whatever is left out comes from the heating-type preset."""

    differential_k: Annotated[TemperatureDelta, Field(gt=0, le=5)] | None = None
    anticipator_gain_k: Annotated[TemperatureDelta, Field(ge=0, le=10)] | None = None
    anticipator_time_constant_s: Seconds | None = None
    cycle_rate_cph: Annotated[float, Field(gt=0, le=30)] | None = None
    min_on_s: Annotated[float, Field(ge=0, le=7200)] | None = None
    min_off_s: Annotated[float, Field(ge=0, le=7200)] | None = None
    max_cycles_per_hour: Annotated[int, Field(ge=1, le=60)] | None = None
    droop_compensation: bool | None = None
    droop_time_s: Seconds | None = None
    smoothing_s: Annotated[float, Field(ge=0, le=14400, allow_inf_nan=False)] | None = None
    """Time constant of the smoothing of the temperature the relay switches on; left out:
    one cycle period (3600 / cycle rate); 0: none."""


class Tuning(BaseModel):
    """Effective tuning of a zone: every value set, each with where it came from."""

    model_config = ConfigDict(frozen=True)

    differential_k: float
    anticipator_gain_k: float
    anticipator_time_constant_s: float
    cycle_rate_cph: float
    min_on_s: float
    min_off_s: float
    max_cycles_per_hour: int
    droop_compensation: bool
    droop_time_s: float
    smoothing_s: float | None = None
    """``None``: one cycle period (the controller derives it from the cycle rate)."""


class FailSafe(Strict):
    """What the zone does with no reliable temperature."""

    policy: Literal["off", "fixed-duty", "learned-duty"] = "learned-duty"
    sensor_timeout_s: Seconds = 600.0
    duty: Fraction = 0.3
    """On-fraction for ``fixed-duty``, and for ``learned-duty`` before anything was learned."""
    period_s: Annotated[float, Field(ge=60, le=14400)] = 1200.0
    learn_hours: Annotated[float, Field(gt=0, le=48)] = 4.0
    min_duty: Fraction = 0.1
    max_duty: Fraction = 0.7
    backup_point: Name | None = None
    """A second sensor (e.g. a pipe or outdoor-wall probe) that keeps protection working."""
    recovery_s: Annotated[float, Field(ge=0, le=7200)] = 120.0

    @model_validator(mode="after")
    def _bounds(self) -> FailSafe:
        if self.min_duty > self.max_duty:
            raise ValueError("min_duty must not exceed max_duty")
        return self


class ProgramEntry(Strict):
    """From ``at`` on the given days, mode ``auto`` uses ``level``."""

    days: list[str] | str
    at: str
    level: Level

    @field_validator("days")
    @classmethod
    def _days(cls, value: list[str] | str) -> list[str]:
        return expand_days(value)

    @field_validator("at")
    @classmethod
    def _time(cls, value: str) -> str:
        match = re.fullmatch(r"([01]?\d|2[0-3]):([0-5]\d)", value.strip())
        if not match:
            raise ValueError(f"{value!r} is not a time of day HH:MM (00:00 to 23:59)")
        return f"{int(match.group(1)):02d}:{match.group(2)}"

    @property
    def minute_of_day(self) -> int:
        hours, minutes = self.at.split(":")
        return int(hours) * 60 + int(minutes)


def expand_days(value: list[str] | str) -> list[str]:
    """``"mon-fri"``, ``"sat,sun"``, ``"all"`` or a list of day names, to the list of day names."""
    parts = value if isinstance(value, list) else [p for p in re.split(r"[,\s]+", value) if p]
    out: list[str] = []
    for raw in parts:
        part = str(raw).strip().lower()
        if part in ("all", "daily", "every-day"):
            days = list(DAYS)
        elif "-" in part:
            first, _, last = part.partition("-")
            if first not in DAYS or last not in DAYS:
                raise ValueError(f"{part!r} is not a day range such as mon-fri")
            i, j = DAYS.index(first), DAYS.index(last)
            days = list(DAYS[i : j + 1]) if i <= j else list(DAYS[i:] + DAYS[: j + 1])
        elif part in DAYS:
            days = [part]
        else:
            raise ValueError(
                f"{part!r} is not a day (mon, tue, wed, thu, fri, sat, sun, or a range mon-fri)"
            )
        for day in days:
            if day not in out:
                out.append(day)
    if not out:
        raise ValueError("name at least one day")
    return sorted(out, key=DAYS.index)


_CALENDAR_WHEN = re.compile(r"(\d{4})-(\d{2})-(\d{2})(?:[ T]([01]?\d|2[0-3]):([0-5]\d))?")


def _calendar_when(value: Any) -> str:
    """A calendar bound as ``YYYY-MM-DD`` or ``YYYY-MM-DD HH:MM`` (the site's local time)."""
    if isinstance(value, dt.datetime):
        if value.tzinfo is not None:
            raise ValueError("give the local time of the site, without an offset")
        return value.strftime("%Y-%m-%d %H:%M")
    if isinstance(value, dt.date):
        return value.isoformat()
    if not isinstance(value, str):
        raise ValueError("a date YYYY-MM-DD or a local date and time 'YYYY-MM-DD HH:MM' (quoted)")
    match = _CALENDAR_WHEN.fullmatch(value.strip())
    if not match:
        raise ValueError(
            f"{value!r} is not a date YYYY-MM-DD or a local date and time 'YYYY-MM-DD HH:MM'"
        )
    year, month, day, hour, minute = match.groups()
    try:
        dt.date(int(year), int(month), int(day))
    except ValueError as exc:
        raise ValueError(f"{value!r} is not a date of the calendar: {exc}") from None
    date = f"{year}-{month}-{day}"
    return date if hour is None else f"{date} {int(hour):02d}:{minute}"


def calendar_wall(value: str, *, end: bool) -> tuple[dt.date, int]:
    """A normalised calendar bound as (local date, minute of day). A bare date starts at its
    00:00; as an ``end`` it includes the whole day, so it ends at the next day's 00:00."""
    date = dt.date.fromisoformat(value[:10])
    if len(value) > 10:
        hours, minutes = value[11:].split(":")
        return date, int(hours) * 60 + int(minutes)
    return (date + dt.timedelta(days=1), 0) if end else (date, 0)


class CalendarEntry(Strict):
    """A stretch of dates whose level replaces the weekly program in mode ``auto``: a holiday
    closure of the whole site, a one-off event in one room.

    ``start`` and ``end`` are dates (``end`` included: the entry lasts to the end of that day)
    or local date-times ``"YYYY-MM-DD HH:MM"`` (``end`` is then the instant it stops).
    """

    name: Name
    start: str
    end: str
    level: Level
    zones: list[Name] | None = None
    """The zones it applies to; left out: every zone of the site."""

    @field_validator("start", "end", mode="before")
    @classmethod
    def _when(cls, value: Any) -> str:
        return _calendar_when(value)

    @model_validator(mode="after")
    def _order(self) -> CalendarEntry:
        if calendar_wall(self.end, end=True) <= calendar_wall(self.start, end=False):
            raise ValueError(f"end {self.end} is not after start {self.start}")
        return self

    def applies_to(self, zone: str) -> bool:
        return self.zones is None or zone in self.zones


class Zone(Strict):
    """A controlled space: inputs, one output, a heating type, set points, tuning, fail-safe."""

    name: Name
    inputs: Annotated[list[Name], Field(min_length=1)]
    combine: Literal["mean", "median", "min", "first-ok"] = "mean"
    output: Name
    heating: HeatingType
    setpoints: Setpoints = Setpoints()
    limits: Limits = Limits()
    tuning: TuningInput = TuningInput()
    fail_safe: FailSafe = FailSafe()
    program: list[ProgramEntry] = []
    mode: Mode = "auto"
    """The mode at first start; afterwards the persisted mode wins."""
    default_level: Level = "comfort"
    """The level in mode ``auto`` when the program is empty."""
    protection_in_off: bool = True
    """In mode ``off``, still heat below the protection set point (frost protection)."""
    tick_s: Annotated[float, Field(ge=1, le=300)] = 10.0
    safe_state: Literal["off", "on"] = "off"
    """The output's state at start, at stop and when roomloop cannot decide."""

    _tuning: Tuning | None = PrivateAttr(default=None)
    _origins: dict[str, str] = PrivateAttr(default_factory=dict)

    def model_post_init(self, context: Any, /) -> None:
        from roomloop.config.presets import resolve_tuning

        tuning, origins = resolve_tuning(self.heating, self.tuning)
        self._tuning = tuning
        self._origins = origins

    @property
    def effective(self) -> Tuning:
        """The tuning the controller uses, presets filled in."""
        assert self._tuning is not None
        return self._tuning

    @property
    def origins(self) -> dict[str, str]:
        """For each tuning key: ``file``, ``preset <type>`` or ``derived from cycle rate``."""
        return dict(self._origins)


# --------------------------------------------------------------------------- heat sources

SourceKind = Literal["boiler", "heat-pump", "electric"]
StalePolicy = Literal["ignore", "assume-calling", "fixed-duty"]

SOURCE_TIMING_KEYS = (
    "valve_opening_s",
    "pump_pre_run_s",
    "pump_overrun_s",
    "min_on_s",
    "min_off_s",
    "max_starts_per_hour",
    "pump_exercise_after_s",
    "pump_exercise_s",
)

SOURCE_DEFAULTS: dict[str, dict[str, float]] = {
    # Each value with where it comes from (the tags of ../shared/REFERENCES.md).
    "boiler": {
        # Thermal (wax) manifold actuators open in about 2-5 min: common practice, no source.
        "valve_opening_s": 180.0,
        # A boiler's pump starts with the burner: common practice, no source.
        "pump_pre_run_s": 0.0,
        # Pump overrun after a boiler stops about 2-5 min, often set by the boiler maker:
        # common practice, no source.
        "pump_overrun_s": 180.0,
        # Burner minimum run and anti-cycling pause of a few minutes: recalled from memory.
        "min_on_s": 120.0,
        "min_off_s": 180.0,
        # At most 6 burner starts an hour: common practice, no source.
        "max_starts_per_hour": 6,
        # A daily pump kick against seizing in summer, about a minute: recalled from memory.
        "pump_exercise_after_s": 86400.0,
        "pump_exercise_s": 60.0,
    },
    "heat-pump": {
        # Same manifold actuators as for a boiler: common practice, no source.
        "valve_opening_s": 180.0,
        # Flow established (the unit's flow switch proven) before the compressor starts:
        # common practice, no source.
        "pump_pre_run_s": 60.0,
        # Little residual heat in a heat pump's condenser, but the unit may defrost or run
        # its own overrun: common practice, no source.
        "pump_overrun_s": 120.0,
        # Compressor minimum run about 5-10 min (oil return): recalled from memory.
        "min_on_s": 360.0,
        # Compressor anti-short-cycle: at least 3-5 min off between starts: common practice,
        # no source.
        "min_off_s": 300.0,
        # 3-4 starts per hour for small compressors: common practice, no source.
        "max_starts_per_hour": 3,
        "pump_exercise_after_s": 86400.0,
        "pump_exercise_s": 60.0,
    },
    "electric": {
        "valve_opening_s": 180.0,
        # An electric flow boiler heats at once and keeps little heat: common practice,
        # no source.
        "pump_pre_run_s": 0.0,
        "pump_overrun_s": 60.0,
        # Contactor wear bounds the cycling, not the heater: common practice, no source.
        "min_on_s": 60.0,
        "min_off_s": 60.0,
        "max_starts_per_hour": 12,
        "pump_exercise_after_s": 86400.0,
        "pump_exercise_s": 60.0,
    },
}
"""Timing defaults of each source kind; a heat source's ``timing`` overrides any of them."""

_NAME_RE = r"[a-z0-9][a-z0-9_-]{0,63}"
_SERVED = re.compile(rf"(?:(?P<site>{_NAME_RE})/)?(?P<zone>{_NAME_RE})")


def served_zone_parts(text: str) -> tuple[str | None, str]:
    """``"office"`` -> ``(None, "office")``; ``"north/office"`` -> ``("north", "office")``."""
    match = _SERVED.fullmatch(text)
    if match is None:
        raise ValueError(
            f"{text!r} is not a zone name or SITE/ZONE (lower case, digits, '-' and '_')"
        )
    return match.group("site"), match.group("zone")


class SourceTimingInput(Strict):
    """A heat source's timing as written; whatever is left out comes from its kind."""

    valve_opening_s: Annotated[float, Field(ge=0, le=1800, allow_inf_nan=False)] | None = None
    """The source fires only once the first calling zone's valve has been open this long."""
    pump_pre_run_s: Annotated[float, Field(ge=0, le=600, allow_inf_nan=False)] | None = None
    pump_overrun_s: Annotated[float, Field(ge=0, le=3600, allow_inf_nan=False)] | None = None
    min_on_s: Annotated[float, Field(ge=0, le=7200, allow_inf_nan=False)] | None = None
    min_off_s: Annotated[float, Field(ge=0, le=7200, allow_inf_nan=False)] | None = None
    max_starts_per_hour: Annotated[int, Field(ge=1, le=60)] | None = None
    pump_exercise_after_s: Annotated[float, Field(ge=3600, le=30 * 86400)] | None = None
    """The pump runs ``pump_exercise_s`` after it has been idle this long (against seizing)."""
    pump_exercise_s: Annotated[float, Field(ge=0, le=900, allow_inf_nan=False)] | None = None


class SourceTiming(BaseModel):
    """Effective timing of a heat source: every value set."""

    model_config = ConfigDict(frozen=True)

    valve_opening_s: float
    pump_pre_run_s: float
    pump_overrun_s: float
    min_on_s: float
    min_off_s: float
    max_starts_per_hour: int
    pump_exercise_after_s: float
    pump_exercise_s: float


class RemoteStale(Strict):
    """What a source does with a remote zone whose demand it can no longer trust: the zone's
    daemon is offline (its last will) or nothing came from the zone for ``timeout_s``."""

    policy: StalePolicy = "fixed-duty"
    timeout_s: Annotated[float, Field(ge=10, le=86400, allow_inf_nan=False)] = 300.0
    """Longer than the remote site's ``publish_interval_s`` (its state is re-sent that often)."""
    duty: Fraction = 0.3
    """``fixed-duty``: the stale zone counts as calling this fraction of each period."""
    period_s: Annotated[float, Field(ge=60, le=14400)] = 1200.0


def _topic_prefix(value: str) -> str:
    if not value or value.startswith("/") or value.endswith("/") or any(c in value for c in "#+"):
        raise ValueError("a topic prefix has no leading or trailing '/', and no '#' or '+'")
    return value


class HeatSource(Strict):
    """A boiler, heat pump or electric source with an enable output and an optional pump,
    serving local zones (``office``) or zones of other sites on the broker (``SITE/ZONE``)."""

    name: Name
    kind: SourceKind
    output: Name
    """The source's enable output (a relay point)."""
    pump_output: Name | None = None
    zones: Annotated[list[str], Field(min_length=1)]
    timing: SourceTimingInput = SourceTimingInput()
    remote_stale: RemoteStale = RemoteStale()
    remote_prefixes: dict[Name, str] = {}
    """Topic prefix of a remote site whose zones this source serves; default ``roomloop/<SITE>``."""

    _timing: SourceTiming | None = PrivateAttr(default=None)
    _origins: dict[str, str] = PrivateAttr(default_factory=dict)

    @field_validator("zones")
    @classmethod
    def _served(cls, value: list[str]) -> list[str]:
        for text in value:
            served_zone_parts(text)
        if len(set(value)) != len(value):
            raise ValueError("a zone is listed twice")
        return value

    @field_validator("remote_prefixes")
    @classmethod
    def _prefixes(cls, value: dict[str, str]) -> dict[str, str]:
        for prefix in value.values():
            _topic_prefix(prefix)
        return value

    def model_post_init(self, context: Any, /) -> None:
        defaults = SOURCE_DEFAULTS[self.kind]
        values: dict[str, Any] = {}
        for key in SOURCE_TIMING_KEYS:
            given = getattr(self.timing, key)
            values[key] = defaults[key] if given is None else given
            self._origins[key] = f"kind {self.kind}" if given is None else "file"
        self._timing = SourceTiming(**values)

    @property
    def effective(self) -> SourceTiming:
        """The timing the source logic uses, kind defaults filled in."""
        assert self._timing is not None
        return self._timing

    @property
    def origins(self) -> dict[str, str]:
        """For each timing key: ``file`` or ``kind <kind>``."""
        return dict(self._origins)

    @property
    def local_zones(self) -> list[str]:
        return [z for z in self.zones if "/" not in z]

    @property
    def remote_zones(self) -> list[str]:
        return [z for z in self.zones if "/" in z]

    def remote_prefix(self, site: str) -> str:
        """The topic prefix the remote ``site`` publishes under."""
        return self.remote_prefixes.get(site, f"roomloop/{site}")


class Logging(Strict):
    level: Literal["debug", "info", "warning", "error"] = "info"
    format: Literal["auto", "json", "console"] = "auto"
    """``auto``: JSON lines for journald when stdout is not a terminal, readable lines on one."""


class Site(Strict):
    """One YAML file, one daemon process."""

    site: SiteInfo
    links: list[Link] = []
    broker: Broker | None = None
    points: list[Point] = []
    zones: Annotated[list[Zone], Field(min_length=1)]
    calendar: list[CalendarEntry] = []
    """Holidays and one-off events: date ranges whose level replaces the weekly program."""
    heat_sources: list[HeatSource] = []
    """Boilers, heat pumps and electric sources fired on the demand of the zones they serve."""
    logging: Logging = Logging()

    @property
    def name(self) -> str:
        return self.site.name

    @property
    def topic_prefix(self) -> str:
        if self.broker is not None and self.broker.topic_prefix:
            return self.broker.topic_prefix
        return f"roomloop/{self.site.name}"

    def calendar_for(self, zone: str) -> list[CalendarEntry]:
        """The calendar entries that apply to ``zone``, in file order (a later one wins)."""
        return [entry for entry in self.calendar if entry.applies_to(zone)]

    def point(self, name: str) -> ModbusInput | MqttInput | ModbusOutput | MqttOutput:
        for point in self.points:
            if point.name == name:
                return point
        raise KeyError(name)

    def link(self, name: str) -> ModbusTcpLink | ModbusRtuLink:
        for link in self.links:
            if link.name == name:
                return link
        raise KeyError(name)

    def zone(self, name: str) -> Zone:
        for zone in self.zones:
            if zone.name == name:
                return zone
        raise KeyError(name)
