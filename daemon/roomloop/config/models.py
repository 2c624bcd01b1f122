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
import ipaddress
import math
import re
import zoneinfo
from collections.abc import Mapping
from typing import Annotated, Any, Literal

from pydantic import (
    AfterValidator,
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
from pydantic import Strict as StrictType

from roomloop.config.presets import (
    COOLING_PRESETS,
    PRESET_KEYS,
    PRESETS,
    Preset,
    time_constant_for_cycle_rate,
)
from roomloop.units import delta_from_kelvin, delta_to_kelvin, from_celsius, to_celsius

# --------------------------------------------------------------------------- units


def _units(context: Any) -> str:
    if isinstance(context, dict):
        units = context.get("units", "C")
        if units in ("C", "F"):
            return str(units)
    return "C"


def _abs_in(value: Any, info: ValidationInfo) -> Any:
    if _units(info.context) == "F" and _is_number(value):
        return to_celsius(float(value), "F")
    return value


def _delta_in(value: Any, info: ValidationInfo) -> Any:
    if _units(info.context) == "F" and _is_number(value):
        return delta_to_kelvin(float(value), "F")
    return value


def _abs_out(value: float, info: SerializationInfo) -> float:
    if _units(info.context) == "F":
        return from_celsius(value, "F")
    return value


def _delta_out(value: float, info: SerializationInfo) -> float:
    if _units(info.context) == "F":
        return delta_from_kelvin(value, "F")
    return value


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


def _finite(value: float) -> float:
    if not math.isfinite(value):
        raise ValueError("must be a finite number")
    return value


def _not_a_bool(value: Any) -> Any:
    """For number choices (``Literal[1, 2]``), which strict mode cannot take: ``true`` is no 1."""
    if isinstance(value, bool):
        raise ValueError(f"must be a number, not {str(value).lower()}")
    return value


class WrittenInt(int):
    """A whole number with the text YAML read it from, where the number loses that text
    (``0730`` is octal 472 in YAML 1.1): the loader makes it, a hint quotes the text. It is
    an ``int`` everywhere else (pydantic gives the model a plain one)."""

    yaml_text: str

    def __new__(cls, value: int, text: str) -> WrittenInt:
        number = super().__new__(cls, value)
        number.yaml_text = text
        return number

    def __getnewargs__(self) -> tuple[int, str]:  # type: ignore[override]
        return int(self), self.yaml_text


class WrittenFloat(float):
    """A number with the text YAML read it from, where the number loses that text
    (``7.30`` is 7.3), like :class:`WrittenInt`."""

    yaml_text: str

    def __new__(cls, value: float, text: str) -> WrittenFloat:
        number = super().__new__(cls, value)
        number.yaml_text = text
        return number

    def __getnewargs__(self) -> tuple[float, str]:  # type: ignore[override]
        return float(self), self.yaml_text


def written_text(value: int | float) -> str:
    """The number as the file wrote it (the loader's text when the number lost it)."""
    return getattr(value, "yaml_text", None) or str(value)


Int = Annotated[int, StrictType()]
"""A whole number as written: ``true`` is no 1, ``12.0`` and ``"12"`` are no 12 (use it, not
``int``, for every whole-number key of the site file)."""

Float = Annotated[float, StrictType(), Field(allow_inf_nan=False)]
"""A finite number as written (an integer is fine): ``true`` is no 1.0 and ``"21"`` no 21.0
(use it, not ``float``, for every number key of the site file)."""

Temperature = Annotated[
    float,
    StrictType(),
    Field(allow_inf_nan=False),
    BeforeValidator(_abs_in),
    PlainSerializer(_abs_out, return_type=float),
]
"""An absolute temperature: typed in the site's units, held in Celsius."""

TemperatureDelta = Annotated[
    float,
    StrictType(),
    Field(allow_inf_nan=False),
    BeforeValidator(_delta_in),
    PlainSerializer(_delta_out, return_type=float),
]
"""A temperature difference: typed in K (or F degrees), held in K."""

Name = Annotated[
    str,
    Field(min_length=1, max_length=64, pattern=r"^[a-z0-9][a-z0-9_-]*$"),
]
"""Names appear in MQTT topics and log events: lower case, digits, ``-`` and ``_``."""

WEEK_S = 7 * 86400.0
Seconds = Annotated[Float, Field(gt=0, le=WEEK_S)]
"""A duration: above 0 and at most a week; each key adds its own sensible lower bound."""
Fraction = Annotated[Float, Field(ge=0, le=1)]

MQTT_STRING_MAX_BYTES = 65535
"""An MQTT string (a topic among them) carries a two-byte length: at most 65535 bytes of UTF-8
(MQTT 3.1.1, OASIS Standard 2014, section 1.5.3; MQTT 5.0, OASIS Standard 2019, section 1.5.4)."""

PREFIX_HEADROOM_BYTES = 128
"""What roomloop appends to its topic prefix at most: ``/zone/<zone, up to 64 bytes>/cmd/<field>``
and the other per-zone topics fit in 128 bytes, so a prefix of at most 65535 - 128 bytes keeps
every topic roomloop builds within MQTT's limit."""

_MQTT_SPEC = "MQTT 3.1.1 section 1.5.3, MQTT 5.0 section 1.5.4"


def _mqtt_string(value: str, what: str, limit: int = MQTT_STRING_MAX_BYTES) -> None:
    """An MQTT UTF-8 string: no U+0000, well-formed UTF-8, at most ``limit`` bytes (the value
    itself is never repeated: it may be 70,000 characters long)."""
    if "\x00" in value:
        raise ValueError(
            f"{what} contains a NUL character (U+0000), which MQTT forbids ({_MQTT_SPEC})"
        )
    try:
        size = len(value.encode("utf-8"))
    except UnicodeEncodeError:
        raise ValueError(f"{what} is not valid UTF-8 (a lone surrogate; {_MQTT_SPEC})") from None
    if size > limit:
        raise ValueError(
            f"{what} is {size} bytes of UTF-8; MQTT allows a topic at most "
            f"{MQTT_STRING_MAX_BYTES} bytes ({_MQTT_SPEC})"
            + (
                f", and roomloop appends up to {MQTT_STRING_MAX_BYTES - limit} bytes to it"
                if limit < MQTT_STRING_MAX_BYTES
                else ""
            )
        )


def _topic(value: str) -> str:
    _mqtt_string(value, "the topic")
    return value


Topic = Annotated[str, Field(min_length=1), AfterValidator(_topic)]
"""One MQTT topic name: NUL-free UTF-8 of at most 65535 bytes (wildcards are checked per key)."""


_HOST_LABEL = re.compile(r"[A-Za-z0-9_]([A-Za-z0-9_-]{0,61}[A-Za-z0-9_])?")


MODBUS_TCP_SCHEME = "the link is Modbus TCP, its host takes no scheme"
BROKER_SCHEME = "mqtt:// is implied; for mqtts:// add a tls: section"
"""What a URL in ``host`` is told about its scheme: the link's kind decides it, never the
scheme typed (``mqtt://`` on a Modbus link is no MQTT)."""


def _host(value: str, scheme_note: str) -> str:
    """A host name or an IP address, as the socket layer takes it: nothing else.

    Names follow RFC 1123 section 2.1 (labels of letters, digits and '-', at most 63
    characters, 253 in all; '_' is tolerated, as local networks use it). A name made of
    numbers only must be a dotted-quad IPv4 address (RFC 1123 section 2.1 asks to check
    that first); an IPv6 address is written without brackets. ``scheme_note``: what a URL's
    scheme is told, for the kind of peer the host names.
    """
    if any(c.isspace() for c in value):
        joined = "".join(value.split())
        try:
            fixed = f" (host: {_host(joined, scheme_note)}?)" if joined else ""
        except ValueError:
            fixed = ""  # no better guess than the plain rule
        raise ValueError(f"{value!r} contains a space: a host is one name or address{fixed}")
    if "://" in value:
        _scheme, _, rest = value.partition("://")
        host, _, port = rest.partition(":")
        hint = f"host: {host.rstrip('/') or '...'}" + (
            f" and port: {port.rstrip('/')}" if port else ""
        )
        raise ValueError(
            f"{value!r} is a URL; give the host alone ({hint}; port is its own key, "
            f"and {scheme_note})"
        )
    try:
        ipaddress.ip_address(value)
        return value
    except ValueError:
        pass
    if value.startswith("[") and value.endswith("]"):
        raise ValueError(f"{value!r}: write an IPv6 address without brackets")
    if ":" in value:
        host, _, port = value.rpartition(":")
        if port.isdigit() and host:
            raise ValueError(
                f"{value!r} has a port in it; write host: {host.strip('[]')} and port: {port} "
                "(port is its own key)"
            )
        raise ValueError(f"{value!r} is neither a host name nor an IP address")
    labels = value[:-1].split(".") if value.endswith(".") else value.split(".")
    if all(label.isdigit() for label in labels):
        raise ValueError(
            f"{value!r} is not an IPv4 address (four numbers 0-255, e.g. 192.168.1.20)"
        )
    if len(value) > 253 or not all(_HOST_LABEL.fullmatch(label) for label in labels):
        raise ValueError(
            f"{value!r} is not a host name (letters, digits, '-' and '.', RFC 1123) "
            "nor an IP address"
        )
    return value


def _modbus_tcp_host(value: str) -> str:
    return _host(value, MODBUS_TCP_SCHEME)


def _broker_host(value: str) -> str:
    return _host(value, BROKER_SCHEME)


ModbusTcpHost = Annotated[str, Field(min_length=1), AfterValidator(_modbus_tcp_host)]
"""A Modbus TCP device's or gateway's host name or IP address; the port is its own key."""
BrokerHost = Annotated[str, Field(min_length=1), AfterValidator(_broker_host)]
"""The MQTT broker's host name or IP address; the port is its own key."""


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
    outdoor_point: Name | None = None
    """An input point giving the outdoor temperature (optional): optimum start learns each
    zone's warm-up rate as a function of it."""

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
    timeout_s: Annotated[Seconds, Field(ge=0.05, le=60)] = 1.0
    retries: Annotated[Int, Field(ge=0, le=10)] = 2
    request_gap_s: Annotated[Float, Field(ge=0, le=10)] = 0.02
    """Pause between two requests on this link (slow devices and RS-485 turn-around)."""
    poll_interval_s: Annotated[Seconds, Field(ge=0.05)] = 5.0
    max_gap_registers: Annotated[Int, Field(ge=0, le=100)] = 8
    """Unused registers a coalesced read may bridge between two points."""


class ModbusTcpLink(ModbusLinkBase):
    type: Literal["modbus-tcp"]
    host: ModbusTcpHost
    port: Annotated[Int, Field(ge=1, le=65535)] = 502


class SerialLine(Strict):
    """A Modbus RTU serial line's settings: a link's, and the BMS face's RTU slave's."""

    device: Annotated[str, Field(min_length=1)]
    baud: Int = 9600
    parity: Literal["N", "E", "O"] = "E"
    """Modbus over Serial Line V1.02 asks for even parity by default."""
    data_bits: Int = 8
    """Modbus RTU characters carry 8 data bits (Modbus over Serial Line V1.02)."""
    stop_bits: Annotated[Literal[1, 2], BeforeValidator(_not_a_bool)] = 1

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


class ModbusRtuLink(ModbusLinkBase, SerialLine):
    type: Literal["modbus-rtu"]


Link = Annotated[ModbusTcpLink | ModbusRtuLink, Field(discriminator="type")]


class Tls(Strict):
    ca_file: str | None = None
    cert_file: str | None = None
    key_file: str | None = None
    insecure: bool = False
    """Skip the host name check (a self-signed broker on a site network); never the default."""


_ENV_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]{0,254}")

SECRET_KEYS = frozenset({"password_file", "password_env"})
"""Keys whose values are never printed: a password typed into one by mistake stays unseen."""


class Broker(Strict):
    """The site's MQTT broker: monitoring, commands and MQTT points go through it."""

    host: BrokerHost
    port: Annotated[Int, Field(ge=1, le=65535)] = 1883
    client_id: str | None = None
    keepalive_s: Annotated[Int, Field(ge=5, le=3600)] = 30
    username: str | None = None
    password_file: str | None = None
    """An absolute path; never shown (a password typed here by mistake must not be echoed)."""
    password_env: str | None = None
    """An environment variable's name; never shown, like ``password_file``."""
    tls: Tls | None = None
    topic_prefix: str | None = None
    """Defaults to ``roomloop/<site name>``."""
    publish_interval_s: Annotated[Seconds, Field(ge=1)] = 60.0
    command_rate_per_min: Annotated[Int, Field(ge=1, le=600)] = 30

    @model_validator(mode="before")
    @classmethod
    def _tls_port(cls, data: Any) -> Any:
        """With ``tls`` and no ``port``, MQTT over TLS's registered port 8883 (IANA's service
        name registry, "secure-mqtt"; recalled from memory), not plain MQTT's 1883."""
        if isinstance(data, Mapping) and data.get("tls") is not None and "port" not in data:
            return {**data, "port": 8883}
        return data

    @model_validator(mode="after")
    def _one_password_source(self) -> Broker:
        if self.password_file is not None and self.password_env is not None:
            raise ValueError("give password_file or password_env, not both")
        if (self.password_file or self.password_env) and not self.username:
            raise ValueError("a password needs a username")
        if self.tls is not None and (self.tls.cert_file is None) != (self.tls.key_file is None):
            raise ValueError("tls.cert_file and tls.key_file go together")
        return self

    @field_validator("password_env")
    @classmethod
    def _variable_name(cls, value: str | None) -> str | None:
        """A variable name (letters, digits, '_', not starting with a digit: the portable
        names of IEEE Std 1003.1, Base Definitions, chapter 8). The value is never repeated."""
        if value is not None and not _ENV_NAME.fullmatch(value):
            raise ValueError(
                "is not an environment variable's name (letters, digits and '_', e.g. "
                "ROOMLOOP_BROKER_PASSWORD); if this is the password itself, move it out of the "
                "site file (the value is not shown)"
            )
        return value

    @field_validator("password_file")
    @classmethod
    def _password_path(cls, value: str | None) -> str | None:
        if value is not None and (not value.startswith("/") or any(c in value for c in "\x00\n\r")):
            raise ValueError(
                "must be the absolute path of a file holding the password (e.g. "
                "/etc/roomloop/broker-password); if this is the password itself, move it out "
                "of the site file (the value is not shown)"
            )
        return value

    @field_validator("topic_prefix")
    @classmethod
    def _clean_prefix(cls, value: str | None) -> str | None:
        """MQTT topic names carry no wildcards (MQTT 3.1.1 and 5.0, section 4.7.1); a name
        starting with ``$`` is the broker's own (``$SYS/...``; section 4.7.2): a client's
        subscriptions with wildcards never match it, so roomloop's commands would be lost."""
        if value is None:
            return None
        if not value or value.startswith("/") or value.endswith("/"):
            raise ValueError("a topic prefix has no leading or trailing '/'")
        if any(c in value for c in "#+"):
            raise ValueError(
                "a topic prefix has no '#' or '+': those are wildcards of subscriptions, never "
                "part of a topic name (MQTT 3.1.1 and 5.0, section 4.7.1)"
            )
        if value.startswith("$"):
            raise ValueError(
                "a topic prefix must not start with '$': such topics belong to the broker "
                "($SYS/...) and wildcard subscriptions never match them "
                "(MQTT 3.1.1 and 5.0, section 4.7.2)"
            )
        _mqtt_string(value, "the topic prefix", MQTT_STRING_MAX_BYTES - PREFIX_HEADROOM_BYTES)
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


BYTE_LETTERS: dict[str, tuple[Literal["big", "little"], Literal["big", "little"]]] = {
    "ABCD": ("big", "big"),
    "CDAB": ("little", "big"),
    "BADC": ("big", "little"),
    "DCBA": ("little", "little"),
}
"""The usual spellings of a 32-bit register layout -> (word_order, byte_order)."""


def _letters_layout(data: Any, spellings: str) -> tuple[str, tuple[str, str]] | None:
    """The letters of a ``word_order`` given as ABCD, CDAB, ... and the (word, byte) order
    they name; None when there is no such text (or it is ``big`` / ``little``); ValueError
    naming ``spellings`` for anything else."""
    if not isinstance(data, dict) or not isinstance(data.get("word_order"), str):
        return None
    if data["word_order"] in ("big", "little"):
        return None
    letters = data["word_order"].strip().upper()
    if letters not in BYTE_LETTERS:
        raise ValueError(
            f"word_order {data['word_order']!r} is not a register layout; use {spellings}"
        )
    return letters, BYTE_LETTERS[letters]


DATA_TYPE_REGISTERS = {"int16": 1, "uint16": 1, "int32": 2, "uint32": 2, "float32": 2}


class Reliability(Strict):
    """How an input point's readings are judged (BACnet-style reliability)."""

    stale_after_s: Annotated[Seconds, Field(ge=1)] = 120.0
    max_rate_k_per_min: Annotated[TemperatureDelta, Field(gt=0)] = 2.0
    """A room does not change faster than this; a jump beyond it is ``implausible``."""
    stuck_after_s: Annotated[Seconds, Field(ge=60)] | None = 10800.0
    """No movement beyond the resolution for this long while the relay is on: ``stuck``."""
    resolution_k: Annotated[TemperatureDelta, Field(ge=0)] = 0.1
    recovery_s: Annotated[Float, Field(ge=0, le=WEEK_S)] = 60.0
    """A point must read good this long before it is trusted again."""


class InputBase(Strict):
    name: Name
    valid_range: tuple[Temperature, Temperature] = (-30.0, 60.0)
    reliability: Reliability = Reliability()
    unit: Literal["C", "F"] = "C"
    """The unit the device sends; converted to Celsius on arrival."""
    scale: Float = 1.0
    offset: Float = 0.0
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
    unit_id: Annotated[Int, Field(ge=0, le=247)] = 1
    table: Literal["input", "holding"] = "input"
    address: Annotated[Int, Field(ge=0, le=MODBUS_MAX_ADDRESS)]
    data_type: Literal["int16", "uint16", "int32", "uint32", "float32"] = "int16"
    count: Annotated[Int, Field(ge=1, le=125)] | None = None
    """Registers the value spans; implied by data_type, checked against it if given."""
    word_order: Literal["big", "little"] = "big"
    """``big``: the high word first; ``little``: the low word first. ABCD, CDAB, BADC or DCBA
    set word_order and byte_order together."""
    byte_order: Literal["big", "little"] = "big"
    sentinels: Annotated[dict[int, SentinelVerdict | None], BeforeValidator(_sentinel_map)] = {}
    """Raw register values the device sends instead of a reading (e.g. 0x7FFF, 0x8000).

    A list lets roomloop judge each by which half of the valid range it would fall in
    (0x7FFF ``over-range``, 0x8001 ``under-range``); a mapping names the verdict per
    value, e.g. ``{0x7FFF: over-range, 0x8000: comm-failure, 0x8001: under-range}``.
    """

    @model_validator(mode="before")
    @classmethod
    def _byte_letters(cls, data: Any) -> Any:
        """``word_order: CDAB`` (and ABCD, BADC, DCBA) as device manuals write it.

        The letters name the bytes of the value most significant first, as IEEE 754 lays
        out a float32 (21.5 = 0x41AC0000: A = 0x41, B = 0xAC, C = D = 0x00), in the order
        they arrive: CDAB sends the low word first with each word's bytes high first.
        """
        found = _letters_layout(
            data, "big or little (with byte_order big / little), or ABCD, CDAB, BADC or DCBA"
        )
        if found is None:
            return data
        letters, (word, byte) = found
        given = data.get("byte_order")
        if given is not None and given != byte:
            raise ValueError(
                f"word_order {letters} sets byte_order {byte!r} already; drop byte_order "
                f"{given!r} (or write word_order and byte_order as big / little)"
            )
        return {**data, "word_order": word, "byte_order": byte}

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
    topic: Topic
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
    unit_id: Annotated[Int, Field(ge=0, le=247)] = 1
    table: Literal["coil", "holding"] = "coil"
    address: Annotated[Int, Field(ge=0, le=MODBUS_MAX_ADDRESS)]
    on_value: Annotated[Int, Field(ge=0, le=0xFFFF)] = 1
    off_value: Annotated[Int, Field(ge=0, le=0xFFFF)] = 0
    read_back: bool = True
    reassert_s: Annotated[Seconds, Field(ge=1)] = 60.0
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
    command_topic: Topic
    on_payload: str = "on"
    off_payload: str = "off"
    state_topic: Topic | None = None
    state_timeout_s: Annotated[Seconds, Field(ge=0.1, le=600)] = 10.0
    reassert_s: Annotated[Seconds, Field(ge=1)] = 300.0

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
CoolingType = Literal["direct-expansion", "chilled-water"]
ChangeoverMode = Literal["heat", "cool", "auto"]
CHANGEOVER_MODES: tuple[ChangeoverMode, ...] = ("heat", "cool", "auto")
ASHRAE_DEAD_BAND = {"C": 3.0, "F": 5.0 * 5.0 / 9.0}
"""The least dead band (K) between the heating and the cooling set point of a zone with
automatic changeover: 3 K, or 5 F on a Fahrenheit site (ASHRAE Standard 90.1, zone
thermostatic controls: a dead band of at least 5 F / 3 C, within which neither heating nor
cooling runs; REFERENCES.md [published])."""
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


class CallTuningInput(Strict):
    """One call's tuning as written (heating's or cooling's); what is left out comes from the
    heating type's or the cooling type's preset."""

    differential_k: Annotated[TemperatureDelta, Field(gt=0, le=5)] | None = None
    anticipator_gain_k: Annotated[TemperatureDelta, Field(ge=0, le=10)] | None = None
    anticipator_time_constant_s: Annotated[Seconds, Field(ge=10)] | None = None
    cycle_rate_cph: Annotated[Float, Field(gt=0, le=30)] | None = None
    min_on_s: Annotated[Float, Field(ge=0, le=7200)] | None = None
    min_off_s: Annotated[Float, Field(ge=0, le=7200)] | None = None
    max_cycles_per_hour: Annotated[Int, Field(ge=1, le=60)] | None = None
    """The most starts in any hour (for cooling: the compressor's)."""
    droop_compensation: bool | None = None
    droop_time_s: Annotated[Seconds, Field(ge=60)] | None = None


class TuningInput(CallTuningInput):
    """Tuning as written in the file; whatever is left out comes from the heating-type preset."""

    smoothing_s: Annotated[Float, Field(ge=0, le=14400)] | None = None
    """Time constant of the smoothing of the temperature the relay switches on; left out:
    the heating type's number of cycle periods (3600 / cycle rate each); 0: none."""
    proportional_gain: Annotated[Float, Field(ge=0, le=10)] | None = None
    """How many times the room's own offset from the set point is added to the temperature
    the relay switches on (beyond the once it is there already); left out: the heating
    type's (1 for underfloor, else 0)."""


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
    """``None``: ``smoothing_periods`` cycle periods (the controller derives it from the cycle
    rate; see :func:`roomloop.core.stages.constants.smoothing_time_s`)."""
    proportional_gain: float = 0.0
    smoothing_periods: float = 1.0
    """The smoothing, in cycle periods, when ``smoothing_s`` is left out (the preset's)."""


class CoolingTuningInput(CallTuningInput):
    """The cooling call's tuning as written; whatever is left out comes from the cooling type
    (the heating keys but ``smoothing_s`` and ``proportional_gain``)."""


class CoolingSetpoints(Strict):
    """The cooling set point per level: cooling runs above it. ``overheat`` is the optional
    limit that replaces frost protection for cooling (a plant room): above it the zone cools
    whatever the mode or level; left out, the zone never cools in mode ``off`` or at the
    ``protection`` level."""

    comfort: Temperature = 24.0
    standby: Temperature = 26.0
    economy: Temperature = 28.0
    overheat: Temperature | None = None

    def for_level(self, level: Level) -> float | None:
        if level == "protection":
            return self.overheat
        return float(getattr(self, level))


class Cooling(Strict):
    """A zone's cooling call: its output point, its cooling type and set points, its tuning."""

    output: Name
    type: CoolingType = "direct-expansion"
    setpoints: CoolingSetpoints = CoolingSetpoints()
    tuning: CoolingTuningInput = CoolingTuningInput()
    safe_state: Literal["off"] = "off"
    """The cooling output at start, at stop and when roomloop cannot decide: always off."""


class Changeover(Strict):
    """How a zone with both calls (or a heat pump) changes over between heating and cooling."""

    mode: ChangeoverMode | None = None
    """Which call the zone may make at first start (afterwards the persisted or commanded one);
    left out: ``auto`` with both calls, else the one the zone has."""
    dead_band_k: Annotated[TemperatureDelta, Field(gt=0, le=20)] | None = None
    """The least gap between the heating and the cooling set point in ``auto``; left out: the
    ASHRAE Standard 90.1 minimum (3 K, or 5 F on a Fahrenheit site), never less."""
    min_changeover_s: Annotated[Float, Field(ge=0, le=14400)] = 600.0
    """Least time from the end of a heating call to the start of a cooling call and back
    [common practice, no source: lets a heat pump's pressures and the water settle]."""
    output: Name | None = None
    """A heat pump's changeover (reversing valve) output: switched only while both calls are
    off, and held ``hold_s`` before a call starts."""
    energised_in: Literal["cooling", "heating"] = "cooling"
    """Which side the changeover output is energised in (the installation's wiring)."""
    hold_s: Annotated[Float, Field(ge=0, le=3600)] = 60.0
    """Least time the changeover output stays in its position before a call starts."""


class FailSafe(Strict):
    """What the zone does with no reliable temperature."""

    policy: Literal["off", "fixed-duty", "learned-duty"] = "learned-duty"
    sensor_timeout_s: Annotated[Seconds, Field(ge=10)] = 600.0
    duty: Fraction = 0.3
    """On-fraction for ``fixed-duty``, and for ``learned-duty`` before anything was learned."""
    period_s: Annotated[Float, Field(ge=60, le=14400)] = 1200.0
    learn_hours: Annotated[Float, Field(ge=0.5, le=48)] = 4.0
    min_duty: Fraction = 0.1
    max_duty: Fraction = 0.7
    backup_point: Name | None = None
    """A second sensor (e.g. a pipe or outdoor-wall probe) that keeps protection working."""
    recovery_s: Annotated[Float, Field(ge=0, le=7200)] = 120.0

    @model_validator(mode="after")
    def _bounds(self) -> FailSafe:
        if self.min_duty > self.max_duty:
            raise ValueError("min_duty must not exceed max_duty")
        return self


class ProgramEntry(Strict):
    """From ``at`` on the given days, mode ``auto`` uses ``level`` (and, in a zone with a
    cooling call, the ``changeover`` when the entry gives one)."""

    days: list[str] | str
    at: str
    level: Level
    changeover: ChangeoverMode | None = None
    """A zone with a cooling call switches to this changeover at the entry (it lasts until
    the next entry that gives one; a ``changeover`` command in between lasts until then)."""

    @field_validator("days")
    @classmethod
    def _days(cls, value: list[str] | str) -> list[str]:
        return expand_days(value)

    @field_validator("at", mode="before")
    @classmethod
    def _quoted(cls, value: Any) -> Any:
        """YAML reads a bare ``1730`` as a number, ``0730`` as octal 472 (YAML 1.1) and
        ``7.30`` as 7.3; the hint quotes the file's own digits as a time."""
        if isinstance(value, int | float) and not isinstance(value, bool):
            text = written_text(value)
            digits = text.lstrip("+")
            octal = isinstance(value, int) and len(digits) > 1 and digits.startswith("0")
            why = f" ({text} with a leading 0 is octal)" if octal and value != int(digits) else ""
            as_time = _time_of_digits(text)
            hint = f'at: "{as_time}"' if as_time else 'e.g. at: "07:30"'
            raise ValueError(
                f"YAML read this time as the number {value:g}{why}; "
                f"write times as HH:MM in quotes, {hint}"
            )
        return value

    @field_validator("at")
    @classmethod
    def _time(cls, value: str) -> str:
        match = re.fullmatch(r"([01]?\d|2[0-3]):([0-5]\d)", value.strip())
        if not match:
            as_time = _time_of_digits(value)
            hint = f'; write it as "{as_time}"' if as_time else ""
            raise ValueError(f"{value!r} is not a time of day HH:MM (00:00 to 23:59){hint}")
        return f"{int(match.group(1)):02d}:{match.group(2)}"

    @property
    def minute_of_day(self) -> int:
        hours, minutes = self.at.split(":")
        return int(hours) * 60 + int(minutes)


def _time_of_digits(text: str) -> str | None:
    """``1730``, ``0730``, ``730`` or ``7.30`` as the time ``HH:MM`` they mean, if one."""
    digits = re.fullmatch(r"(\d{1,2})\.?(\d\d)", text.strip())
    if digits is None or int(digits[1]) > 23 or int(digits[2]) > 59:
        return None
    return f"{int(digits[1]):02d}:{digits[2]}"


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
    changeover: ChangeoverMode | None = None
    """For the zones with a cooling call: the changeover during the entry (e.g. a summer)."""
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


class OptimumStart(Strict):
    """Optimum start: in mode ``auto``, heat early before a program switch to a warmer level
    so that the room reaches the new set point at the switch, by a learned warm-up rate."""

    enabled: bool = False
    earliest_s: Annotated[Float, Field(ge=0, le=86400)] | None = None
    """The early start never begins more than this before the switch; left out: the heating
    type's (9 h for underfloor, else 3 h: the usual maximum of an optimal start, ASHRAE
    Guideline 36 [recalled from memory])."""
    initial_rate_k_per_h: Annotated[Float, Field(ge=0.05, le=30)] | None = (
        None
    )
    """The warm-up rate (K/h) used until the zone has learned its own; left out: the heating
    type's value."""
    dead_time_s: Annotated[Float, Field(ge=0, le=14400)] | None = None
    """Time from the start of heating until the room starts to warm; left out: the heating
    type's value."""


class Zone(Strict):
    """A controlled space: inputs, a heating output and/or a cooling call, set points, tuning,
    fail-safe."""

    name: Name
    inputs: Annotated[list[Name], Field(min_length=1)]
    combine: Literal["mean", "median", "min", "first-ok"] = "mean"
    output: Name | None = None
    """The heating output; left out for a zone that only cools (then ``cooling`` is needed)."""
    heating: HeatingType = "forced-air"
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
    tick_s: Annotated[Float, Field(ge=1, le=300)] = 10.0
    safe_state: Literal["off", "on"] = "off"
    """The output's state at start, at stop and when roomloop cannot decide."""
    optimum_start: OptimumStart = OptimumStart()
    heater_w: Annotated[Float, Field(gt=0, le=1e7)] | None = None
    """The heat output while the relay is closed (W), if known: energy figures in
    ``report`` and the scale of the plant ``tune`` identifies."""

    cooling: Cooling | None = None
    """The cooling call (a second output), if the zone can cool."""
    changeover: Changeover = Changeover()

    _tuning: Tuning | None = PrivateAttr(default=None)
    _origins: dict[str, str] = PrivateAttr(default_factory=dict)
    _cooling_tuning: Tuning | None = PrivateAttr(default=None)
    _cooling_origins: dict[str, str] = PrivateAttr(default_factory=dict)

    @model_validator(mode="after")
    def _some_output(self) -> Zone:
        if self.output is None and self.cooling is None:
            raise ValueError("a zone needs an output (heating) or a cooling output, or both")
        if self.changeover.output is not None and (self.output is None or self.cooling is None):
            raise ValueError(
                "a changeover output needs both calls: the heating output and cooling.output"
            )
        return self

    def model_post_init(self, context: Any, /) -> None:
        tuning, origins = resolve_tuning(self.heating, self.tuning)
        self._tuning = tuning
        self._origins = origins
        if self.cooling is not None:
            ctuning, corigins = resolve_preset(
                COOLING_PRESETS[self.cooling.type], self.cooling.type, self.cooling.tuning
            )
            self._cooling_tuning = ctuning
            self._cooling_origins = corigins

    @property
    def cooling_effective(self) -> Tuning | None:
        """The cooling call's tuning, cooling-type presets filled in (None: no cooling)."""
        return self._cooling_tuning

    @property
    def cooling_origins(self) -> dict[str, str]:
        """Each cooling tuning key: ``file``, ``preset <type>`` or ``derived from cycle rate``."""
        return dict(self._cooling_origins)

    @property
    def changeover_mode(self) -> ChangeoverMode:
        """The changeover at first start: as written, else what the zone's outputs allow."""
        if self.changeover.mode is not None:
            return self.changeover.mode
        if self.cooling is None:
            return "heat"
        return "auto" if self.output is not None else "cool"

    @property
    def effective(self) -> Tuning:
        """The tuning the controller uses, presets filled in."""
        assert self._tuning is not None
        return self._tuning

    @property
    def origins(self) -> dict[str, str]:
        """For each tuning key: ``file``, ``preset <type>`` or ``derived from cycle rate``."""
        return dict(self._origins)


def resolve_tuning(heating: HeatingType, given: TuningInput) -> tuple[Tuning, dict[str, str]]:
    """Fill what the file left out from the heating type's preset; say where each value came from.

    An impossible derivation (gain not above the differential) leaves the time constant at
    the cycle period so the model still builds; :mod:`roomloop.config.checks` reports it.
    """
    return resolve_preset(PRESETS[heating], heating, given)


def resolve_preset(
    preset: Preset, heating: str, given: TuningInput | CoolingTuningInput
) -> tuple[Tuning, dict[str, str]]:
    """:func:`resolve_tuning` for any preset (a heating or a cooling type's)."""
    values: dict[str, object] = {}
    origins: dict[str, str] = {}
    for key in PRESET_KEYS:
        value = getattr(given, key)
        if value is None:
            values[key] = getattr(preset, key)
            origins[key] = f"preset {heating}"
        else:
            values[key] = value
            origins[key] = "file"
    values["droop_compensation"] = (
        True if given.droop_compensation is None else given.droop_compensation
    )
    origins["droop_compensation"] = (
        f"preset {heating}" if given.droop_compensation is None else "file"
    )
    smoothing = getattr(given, "smoothing_s", None)
    values["smoothing_s"] = smoothing
    origins["smoothing_s"] = "derived from cycle rate" if smoothing is None else "file"
    proportional = getattr(given, "proportional_gain", None)
    values["proportional_gain"] = preset.proportional_gain if proportional is None else proportional
    origins["proportional_gain"] = f"preset {heating}" if proportional is None else "file"
    values["smoothing_periods"] = preset.smoothing_periods
    if given.anticipator_time_constant_s is not None:
        values["anticipator_time_constant_s"] = given.anticipator_time_constant_s
        origins["anticipator_time_constant_s"] = "file"
    else:
        cph = float(values["cycle_rate_cph"])  # type: ignore[arg-type]
        gain = float(values["anticipator_gain_k"])  # type: ignore[arg-type]
        diff = float(values["differential_k"])  # type: ignore[arg-type]
        try:
            tau = time_constant_for_cycle_rate(cph, gain, diff)
        except ValueError:
            tau = 3600.0 / cph
        values["anticipator_time_constant_s"] = tau
        origins["anticipator_time_constant_s"] = "derived from cycle rate"
    return Tuning.model_validate(values), origins
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
        # The same daily pump kick as a boiler's: recalled from memory.
        "pump_exercise_after_s": 86400.0,
        "pump_exercise_s": 60.0,
    },
    "electric": {
        # Same manifold actuators as for a boiler: common practice, no source.
        "valve_opening_s": 180.0,
        # An electric flow boiler heats at once and keeps little heat: common practice,
        # no source.
        "pump_pre_run_s": 0.0,
        # Little residual heat to carry away, so a short overrun: common practice, no source.
        "pump_overrun_s": 60.0,
        # Contactor wear bounds the cycling, not the heater: common practice, no source
        # (the minimum times and the starts per hour alike).
        "min_on_s": 60.0,
        "min_off_s": 60.0,
        "max_starts_per_hour": 12,
        # The same daily pump kick as a boiler's: recalled from memory.
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

    valve_opening_s: Annotated[Float, Field(ge=0, le=1800)] | None = None
    """The source fires only once the first calling zone's valve has been open this long."""
    pump_pre_run_s: Annotated[Float, Field(ge=0, le=600)] | None = None
    pump_overrun_s: Annotated[Float, Field(ge=0, le=3600)] | None = None
    min_on_s: Annotated[Float, Field(ge=0, le=7200)] | None = None
    min_off_s: Annotated[Float, Field(ge=0, le=7200)] | None = None
    max_starts_per_hour: Annotated[Int, Field(ge=1, le=60)] | None = None
    pump_exercise_after_s: Annotated[Float, Field(ge=3600, le=30 * 86400)] | None = None
    """The pump runs ``pump_exercise_s`` after it has been idle this long (against seizing)."""
    pump_exercise_s: Annotated[Float, Field(ge=0, le=900)] | None = None


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
    timeout_s: Annotated[Float, Field(ge=10, le=86400)] = 300.0
    """Longer than the remote site's ``publish_interval_s`` (its state is re-sent that often)."""
    duty: Fraction = 0.3
    """``fixed-duty``: the stale zone counts as calling this fraction of each period."""
    period_s: Annotated[Float, Field(ge=60, le=14400)] = 1200.0


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


# --------------------------------------------------------------------------- BMS face and alarms

BMS_DATA_TYPES = ("int16x10", "float32")
BMS_FIXED_REGISTERS = {"int16x10": 17, "float32": 26}
"""Registers of a zone block before the per-point reliabilities (``roomloop.bms.registers``
lays them out; its tests check it agrees with these counts)."""


def _ip_network(value: str) -> str:
    import ipaddress

    try:
        ipaddress.ip_network(value.strip(), strict=False)
    except ValueError:
        raise ValueError(
            f"{value!r} is not an IP address or network (e.g. 192.0.2.10 or 192.0.2.0/24)"
        ) from None
    return value.strip()


ClientNetwork = Annotated[str, AfterValidator(_ip_network)]


class BmsRtu(SerialLine):
    """The BMS face as a Modbus RTU slave on a serial port (line settings as for a link)."""

    unit_id: Annotated[Int, Field(ge=1, le=247)] = 1
    """The slave address the BMS polls; requests for any other address get no answer."""


class Bms(Strict):
    """roomloop's own Modbus server for a building management system (the BMS face)."""

    address: str = "127.0.0.1"
    """Where the Modbus TCP server listens: loopback unless an address is given."""
    port: Annotated[Int, Field(ge=1, le=65535)] = 1502
    tcp: bool = True
    """Serve Modbus TCP (false: the RTU slave only)."""
    allow_clients: list[ClientNetwork] = []
    """TCP clients (addresses or networks) that may connect at all; empty: any."""
    allow_writes_from: list[ClientNetwork] = []
    """TCP clients that may write; empty: every client that may connect."""
    data_type: Literal["int16x10", "float32"] = "int16x10"
    """Temperatures as int16 in tenths, or IEEE 754 float32 over two registers."""
    word_order: Literal["big", "little"] = "big"
    """float32 only: ``big`` sends the high word first (ABCD), ``little`` the low word (CDAB).
    ABCD and CDAB are taken as these, as for a point."""
    base_address: Annotated[Int, Field(ge=0, le=MODBUS_MAX_ADDRESS)] = 0
    zone_block: Annotated[Int, Field(ge=1, le=1000)] = 100
    """Registers per zone: zone ``i`` (file order) starts at ``base_address + i * zone_block``."""
    write_rate_per_min: Annotated[Int, Field(ge=1, le=600)] = 30
    """Writes per zone and minute; more answer exception 6 (busy), like MQTT's rate limit."""
    rtu: BmsRtu | None = None

    @field_validator("address")
    @classmethod
    def _address(cls, value: str) -> str:
        import ipaddress

        try:
            ipaddress.ip_address(value.strip())
        except ValueError:
            raise ValueError(
                f"{value!r} is not an IP address to listen on (127.0.0.1, 0.0.0.0 or one of "
                "this machine's addresses)"
            ) from None
        return value.strip()

    @model_validator(mode="before")
    @classmethod
    def _byte_letters(cls, data: Any) -> Any:
        """``word_order: CDAB`` (and ABCD) with the meaning they have for a point; the BMS face
        sends each word's bytes high first, so BADC and DCBA are refused by name."""
        found = _letters_layout(data, "big (ABCD) or little (CDAB)")
        if found is None:
            return data
        letters, (word, byte) = found
        if byte != "big":
            raise ValueError(
                f"word_order {letters} swaps the bytes within each register, which the BMS "
                "face does not do; use big (ABCD) or little (CDAB)"
            )
        return {**data, "word_order": word}

    @model_validator(mode="after")
    def _fits(self) -> Bms:
        need = BMS_FIXED_REGISTERS[self.data_type] + 1
        if self.zone_block < need:
            raise ValueError(
                f"zone_block {self.zone_block} is too small: a {self.data_type} zone needs "
                f"{need} registers and one more per input point"
            )
        if not self.tcp and self.rtu is None:
            raise ValueError("tcp is false and there is no rtu section: nothing would be served")
        return self


class Alarms(Strict):
    """When a zone raises an alarm (the zone temperature alarms follow ASHRAE Guideline 36)."""

    cold_band_k: Annotated[TemperatureDelta, Field(gt=0, le=20)] = 2.0
    """Too cold: below the set point by more than this for ``delay_s``."""
    warm_band_k: Annotated[TemperatureDelta, Field(gt=0, le=20)] = 2.0
    """Too warm: above the set point by more than this for ``delay_s``."""
    delay_s: Annotated[Float, Field(ge=0, le=86400)] = 600.0
    clear_k: Annotated[TemperatureDelta, Field(ge=0, le=5)] = 0.5
    """Hysteresis: a temperature alarm clears once back inside its band by this much."""
    suppress_s_per_k: Annotated[Float, Field(ge=0, le=36000)] = 1080.0
    """Temperature alarms wait this long per K of a set-point change (the room needs time)."""
    suppress_max_s: Annotated[Float, Field(ge=0, le=86400)] = 7200.0
    sensor_fault_s: Annotated[Float, Field(ge=0, le=7 * 86400)] = 900.0
    """An input point unreliable this long raises ``sensor-fault``."""
    output_unconfirmed_s: Annotated[Float, Field(ge=0, le=86400)] = 120.0
    """The output's read-back disagreeing this long raises ``output-unconfirmed``."""

    @model_validator(mode="after")
    def _hysteresis(self) -> Alarms:
        if self.clear_k >= min(self.cold_band_k, self.warm_band_k):
            raise ValueError("clear_k must be smaller than cold_band_k and warm_band_k")
        return self
class History(Strict):
    """Each zone's trajectory, kept in SQLite under the state directory (``history``)."""

    enabled: bool = True
    commit_s: Annotated[Float, Field(ge=1, le=3600)] = 60.0
    """At most one commit this often: an SD card sees one write per batch, not one per tick."""
    keep_days: Annotated[Float, Field(gt=0, le=3660)] = 60.0
    """Rows older than this are pruned."""


class Site(Strict):
    """One YAML file, one daemon process."""

    site: SiteInfo
    links: list[Link] = []
    broker: Broker | None = None
    points: list[Point] = []
    zones: list[Zone] = []
    """At least one, unless the site has heat sources (whose zones may all be remote)."""
    calendar: list[CalendarEntry] = []
    """Holidays and one-off events: date ranges whose level replaces the weekly program."""
    heat_sources: list[HeatSource] = []
    """Boilers, heat pumps and electric sources fired on the demand of the zones they serve."""
    logging: Logging = Logging()
    bms: Bms | None = None
    alarms: Alarms = Alarms()
    history: History = History()

    @model_validator(mode="after")
    def _something_to_control(self) -> Site:
        if not self.zones and not self.heat_sources:
            raise ValueError("list at least one zone (or a heat source serving remote zones)")
        return self

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
