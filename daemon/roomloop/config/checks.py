"""Cross-checks of a site: the references and sums that no single model can see.

The models check one object at a time. Here the sections meet: a zone naming a
point that does not exist, two zones switching one relay, set points out of order,
minimum run times that leave no room for the cycle rate, two outputs on one coil.

The checks run on :class:`SiteParts`, the section items that validated on their own,
each with its index in the file, so a broken zone does not hide a dangling reference
in another. Every :class:`Finding` names the key path of the offending value; the
loader turns it into a file line.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from typing import Any, Literal

from roomloop.config.models import (
    ASHRAE_DEAD_BAND,
    BMS_FIXED_REGISTERS,
    LEVELS,
    Alarms,
    Bms,
    Broker,
    CalendarEntry,
    HeatSource,
    Logging,
    ModbusInput,
    ModbusOutput,
    ModbusRtuLink,
    ModbusTcpLink,
    MqttInput,
    MqttOutput,
    Site,
    SiteInfo,
    Zone,
)
from roomloop.config.presets import COMPRESSOR_MIN_OFF_S
from roomloop.units import delta_from_kelvin, from_celsius

KeyPath = tuple[str | int, ...]
AnyPoint = ModbusInput | MqttInput | ModbusOutput | MqttOutput
AnyLink = ModbusTcpLink | ModbusRtuLink


@dataclass(frozen=True)
class Finding:
    """One cross-check problem: where (key path) and what."""

    path: KeyPath
    message: str


@dataclass
class SiteParts:
    """The pieces of a site that validated, with their positions in the file."""

    units: Literal["C", "F"] = "C"
    site: SiteInfo | None = None
    broker: Broker | None = None
    broker_present: bool = False
    logging: Logging | None = None
    links: list[tuple[int, AnyLink]] = field(default_factory=list)
    points: list[tuple[int, AnyPoint]] = field(default_factory=list)
    zones: list[tuple[int, Zone]] = field(default_factory=list)
    calendar: list[tuple[int, CalendarEntry]] = field(default_factory=list)
    heat_sources: list[tuple[int, HeatSource]] = field(default_factory=list)
    invalid_names: dict[str, set[str]] = field(default_factory=dict)
    """Names of items that failed validation: not reported again as unknown."""
    bms: Bms | None = None
    alarms: Alarms | None = None

    @classmethod
    def from_site(cls, site: Site) -> SiteParts:
        return cls(
            units=site.site.units,
            site=site.site,
            broker=site.broker,
            broker_present=site.broker is not None,
            logging=site.logging,
            links=list(enumerate(site.links)),
            points=list(enumerate(site.points)),
            zones=list(enumerate(site.zones)),
            calendar=list(enumerate(site.calendar)),
            bms=site.bms,
            alarms=site.alarms,
            heat_sources=list(enumerate(site.heat_sources)),
        )


def check_site(site: Site) -> list[Finding]:
    """Every cross-check problem of a whole (already validated) site."""
    return check_parts(SiteParts.from_site(site))


def check_parts(parts: SiteParts) -> list[Finding]:
    """Every cross-check problem of the parts that validated."""
    findings: list[Finding] = []
    findings += _duplicate_names("links", parts.links)
    findings += _duplicate_names("points", parts.points)
    findings += _duplicate_names("zones", parts.zones)
    findings += _duplicate_names("calendar", parts.calendar)
    findings += _calendar_zones(parts)
    findings += _point_links(parts)
    findings += _modbus_overlaps(parts)
    findings += _serial_devices(parts)
    findings += _zone_references(parts)
    findings += _bms_face(parts)
    findings += _point_topics(parts)
    findings += _outdoor_point(parts)
    findings += check_heat_sources(parts)
    for index, zone in parts.zones:
        findings += _setpoints(index, zone, parts.units)
        findings += _tuning(index, zone, parts.units)
        findings += _program(index, zone)
        findings += _cooling(index, zone, parts.units, parts.calendar)
    return findings


def _calendar_zones(parts: SiteParts) -> list[Finding]:
    """Every zone a calendar entry names exists (a typo would silently skip a holiday)."""
    known = {zone.name for _, zone in parts.zones} | parts.invalid_names.get("zones", set())
    findings: list[Finding] = []
    for index, entry in parts.calendar:
        for position, name in enumerate(entry.zones or ()):
            if name not in known:
                findings.append(
                    Finding(
                        ("calendar", index, "zones", position),
                        f"no zone named {name!r} (zones: {', '.join(sorted(known)) or 'none'})",
                    )
                )
        findings += _calendar_changeover(parts, index, entry)
    return findings


def _calendar_changeover(parts: SiteParts, index: int, entry: CalendarEntry) -> list[Finding]:
    """A calendar changeover: a zone it names must take it; one for every zone, some zone."""
    if entry.changeover is None:
        return []
    zones = [zone for _, zone in parts.zones if entry.applies_to(zone.name)]
    problems = [(z.name, changeover_problem(z, entry.changeover)) for z in zones]
    where: KeyPath = ("calendar", index, "changeover")
    if entry.zones is not None:
        return [Finding(where, f"zone {name!r}: {p}") for name, p in problems if p is not None]
    if zones and all(p is not None for _, p in problems):
        return [Finding(where, f"changeover {entry.changeover}: no zone of the site can take it")]
    return []


def warnings_of_parts(parts: SiteParts) -> list[Finding]:
    """What is probably a mistake but may be right: ``check`` prints it, the site still loads."""
    return _one_based_registers(parts)


def site_warnings(site: Site) -> list[Finding]:
    """The warnings of a whole (already validated) site (``run`` may log them)."""
    return warnings_of_parts(SiteParts.from_site(site))


_REFERENCE_BLOCKS = {3: "input", 4: "holding"}


def _one_based_registers(parts: SiteParts) -> list[Finding]:
    """Addresses 30001-39999 and 40001-49999 are usually reference numbers, not addresses.

    Device manuals often list registers as 3xxxx (input) and 4xxxx (holding) reference
    numbers counted from 1 (Modicon's numbering, recalled from memory). On the wire an item
    numbered X is addressed X - 1 (Modbus Application Protocol Specification V1.1b3, section
    4.4), and roomloop takes that wire address, so 40001 is most likely address 0.
    """
    findings: list[Finding] = []
    for index, point in parts.points:
        if not isinstance(point, ModbusInput | ModbusOutput):
            continue
        block, rest = divmod(point.address, 10000)
        table = _REFERENCE_BLOCKS.get(block)
        if table is None or rest == 0:
            continue
        findings.append(
            Finding(
                ("points", index, "address"),
                f"{point.address} looks like a one-based {block}xxxx reference number from a "
                f"device manual; roomloop takes the address on the wire (counted from 0): for "
                f"reference {point.address} write table: {table} and address: {rest - 1}. "
                "If the device really uses this address, ignore this warning",
            )
        )
    return findings


def _outdoor_point(parts: SiteParts) -> list[Finding]:
    """The site's outdoor point exists and is an input (a relay gives no temperature)."""
    if parts.site is None or parts.site.outdoor_point is None:
        return []
    name = parts.site.outdoor_point
    if name in parts.invalid_names.get("points", set()):
        return []
    where: KeyPath = ("site", "outdoor_point")
    for _, point in parts.points:
        if point.name == name:
            if isinstance(point, ModbusOutput | MqttOutput):
                return [Finding(where, f"point {name!r} is an output; name an input point")]
            return []
    inputs = (p.name for _, p in parts.points if isinstance(p, ModbusInput | MqttInput))
    known = ", ".join(sorted(inputs))
    return [Finding(where, f"unknown point {name!r} (input points: {known or 'none'})")]


# --------------------------------------------------------------------------- formatting


def temperature_text(celsius: float, units: str) -> str:
    """An absolute temperature as the user typed it: ``20 °C`` or ``68 °F``."""
    return f"{_num(from_celsius(celsius, units))} °{units}"


def delta_text(kelvin: float, units: str) -> str:
    """A temperature difference in the site's units: ``0.5 K`` or ``0.9 °F``."""
    if units == "F":
        return f"{_num(delta_from_kelvin(kelvin, units))} °F"
    return f"{_num(kelvin)} K"


def _num(value: float) -> str:
    return f"{round(value, 2):g}"


# --------------------------------------------------------------------------- names and links


def _duplicate_names(section: str, items: list[tuple[int, Any]]) -> list[Finding]:
    findings: list[Finding] = []
    first: dict[str, int] = {}
    for index, item in items:
        name = item.name
        if name in first:
            findings.append(
                Finding(
                    (section, index, "name"),
                    f"duplicate name {name!r}: {section}[{first[name]}] has it already; names "
                    "must be unique",
                )
            )
        else:
            first[name] = index
    return findings


def _point_links(parts: SiteParts) -> list[Finding]:
    findings: list[Finding] = []
    links = {link.name for _, link in parts.links}
    bad_links = parts.invalid_names.get("links", set())
    for index, point in parts.points:
        if isinstance(point, ModbusInput | ModbusOutput):
            if point.link not in links and point.link not in bad_links:
                known = ", ".join(sorted(links)) or "none defined"
                findings.append(
                    Finding(
                        ("points", index, "link"),
                        f"unknown link {point.link!r} (links: {known})",
                    )
                )
            if point.unit_id == 0:
                findings.append(
                    Finding(
                        ("points", index, "unit_id"),
                        "unit id 0 is the broadcast address: no device answers it; use the "
                        "device's id (1-247)",
                    )
                )
        elif not parts.broker_present:
            findings.append(
                Finding(
                    ("points", index, "type"),
                    f"an {point.type} point needs the site's MQTT broker: add a 'broker' section",
                )
            )
    return findings


def _modbus_overlaps(parts: SiteParts) -> list[Finding]:
    """Two outputs on one coil or register fight each other; so do an output and an input there."""
    findings: list[Finding] = []
    outputs: dict[tuple[str, int, str, int], tuple[int, str]] = {}
    for index, point in parts.points:
        if isinstance(point, ModbusOutput):
            key = (point.link, point.unit_id, point.table, point.address)
            if key in outputs:
                other_index, other = outputs[key]
                findings.append(
                    Finding(
                        ("points", index, "address"),
                        f"{point.table} {point.address} of unit {point.unit_id} on link "
                        f"{point.link!r} "
                        f"is already output {other!r} (points[{other_index}]); one output per "
                        "coil or register",
                    )
                )
            else:
                outputs[key] = (index, point.name)
    for index, point in parts.points:
        if isinstance(point, ModbusInput) and point.table == "holding":
            for address in range(point.address, point.address + point.registers):
                hit = outputs.get((point.link, point.unit_id, "holding", address))
                if hit is not None:
                    findings.append(
                        Finding(
                            ("points", index, "address"),
                            f"holding register {address} of unit {point.unit_id} on link "
                            f"{point.link!r} "
                            f"is written by output {hit[1]!r}; an input cannot read a relay's "
                            "register",
                        )
                    )
                    break
    return findings


def _serial_devices(parts: SiteParts) -> list[Finding]:
    findings: list[Finding] = []
    seen: dict[str, str] = {}
    for index, link in parts.links:
        if isinstance(link, ModbusRtuLink):
            if link.device in seen:
                findings.append(
                    Finding(
                        ("links", index, "device"),
                        f"serial device {link.device!r} is already link {seen[link.device]!r}; "
                        "one serial port is one link (put every unit id on it)",
                    )
                )
            else:
                seen[link.device] = link.name
    return findings


def _bms_face(parts: SiteParts) -> list[Finding]:
    """The zone blocks fit the register space and each zone's points fit its block."""
    bms = parts.bms
    if bms is None:
        return []
    findings: list[Finding] = []
    end = bms.base_address + len(parts.zones) * bms.zone_block
    if parts.zones and end > 0x10000:
        findings.append(
            Finding(
                ("bms", "zone_block"),
                f"{len(parts.zones)} zones of {bms.zone_block} registers from "
                f"{bms.base_address} run past register 65535",
            )
        )
    fixed = BMS_FIXED_REGISTERS[bms.data_type]
    for _index, zone in parts.zones:
        points = len(zone.inputs) + (1 if zone.fail_safe.backup_point else 0)
        if fixed + points > bms.zone_block:
            findings.append(
                Finding(
                    ("bms", "zone_block"),
                    f"zone {zone.name!r} needs {fixed + points} registers "
                    f"({points} point reliabilities), more than zone_block {bms.zone_block}",
                )
            )
    if bms.rtu is not None:
        for _index, link in parts.links:
            if isinstance(link, ModbusRtuLink) and link.device == bms.rtu.device:
                findings.append(
                    Finding(
                        ("bms", "rtu", "device"),
                        f"serial device {bms.rtu.device!r} is already link {link.name!r}; "
                        "the BMS face needs a port of its own",
                    )
                )
    return findings


# --------------------------------------------------------------------------- zones
def _prefix(parts: SiteParts) -> str | None:
    """The topic prefix the site will use, if the sections that set it validated."""
    if parts.broker is not None and parts.broker.topic_prefix:
        return parts.broker.topic_prefix
    if parts.site is None or (parts.broker_present and parts.broker is None):
        return None
    return f"roomloop/{parts.site.name}"




def _short(text: str, limit: int = 60) -> str:
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _point_topics(parts: SiteParts) -> list[Finding]:
    """No point topic inside roomloop's own tree, and no input reading a command topic.

    roomloop publishes its state and takes commands under ``<prefix>/``: an output whose
    command topic is there (another zone's ``cmd/setpoint``, the site's ``status``) would
    turn its on/off payloads into commands, and an input there reads roomloop's own values
    back. An input (or an output's read-back) on a topic with a ``cmd`` level reads the
    commands sent to some roomloop, never a device's reading.
    """
    findings: list[Finding] = []
    prefix = _prefix(parts)
    for index, point in parts.points:
        topics: list[tuple[str, str | None, bool]] = []
        if isinstance(point, MqttInput):
            topics.append(("topic", point.topic, True))
        elif isinstance(point, MqttOutput):
            topics.append(("command_topic", point.command_topic, False))
            topics.append(("state_topic", point.state_topic, True))
        for key, topic, read in topics:
            if topic is None:
                continue
            where: KeyPath = ("points", index, key)
            if prefix is not None and (topic == prefix or topic.startswith(prefix + "/")):
                findings.append(
                    Finding(
                        where,
                        f"{key} is inside roomloop's own topic tree {_short(prefix)}/...: "
                        "roomloop publishes its state and takes commands there; use the "
                        "device's own topic",
                    )
                )
            elif read and "cmd" in topic.split("/"):
                findings.append(
                    Finding(
                        where,
                        f"{key} has a 'cmd' level: it would read commands sent to a "
                        "roomloop, not the device's own value",
                    )
                )
    return findings


# --------------------------------------------------------------------------- zones


@dataclass(frozen=True)
class _PointIndex:
    """The points a zone may name, for the reference checks."""

    points: dict[str, AnyPoint]
    invalid: set[str]
    known: str

    def unknown(self, name: str, where: KeyPath) -> list[Finding]:
        """A finding for a name no point has (none for a point that failed on its own)."""
        if name in self.invalid:
            return []
        return [Finding(where, f"unknown point {name!r} (points: {self.known})")]


def _zone_references(parts: SiteParts) -> list[Finding]:
    points = {point.name: point for _, point in parts.points}
    index_of = _PointIndex(
        points,
        parts.invalid_names.get("points", set()),
        ", ".join(sorted(points)) or "none defined",
    )
    findings: list[Finding] = []
    used_outputs: dict[str, str] = {}
    for index, zone in parts.zones:
        findings += _zone_inputs(index, zone, index_of)
        findings += _zone_output(index, zone, index_of, used_outputs)
        findings += _zone_backup(index, zone, index_of)
    return findings


def _zone_inputs(index: int, zone: Zone, known: _PointIndex) -> list[Finding]:
    findings: list[Finding] = []
    seen_inputs: set[str] = set()
    for j, name in enumerate(zone.inputs):
        where: KeyPath = ("zones", index, "inputs", j)
        if name in seen_inputs:
            findings.append(Finding(where, f"input {name!r} is listed twice"))
            continue
        seen_inputs.add(name)
        point = known.points.get(name)
        if point is None:
            findings += known.unknown(name, where)
        elif isinstance(point, ModbusOutput | MqttOutput):
            findings.append(
                Finding(
                    where,
                    f"{name!r} is an output ({point.type}); a zone's inputs are temperature inputs",
                )
            )
    return findings


def zone_outputs(zone: Zone) -> list[tuple[KeyPath, str]]:
    """A zone's output points with their key paths under the zone: heating, cooling, changeover."""
    found: list[tuple[KeyPath, str]] = []
    if zone.output is not None:
        found.append((("output",), zone.output))
    if zone.cooling is not None:
        found.append((("cooling", "output"), zone.cooling.output))
    if zone.changeover.output is not None:
        found.append((("changeover", "output"), zone.changeover.output))
    return found


def _zone_output(
    index: int, zone: Zone, known: _PointIndex, used_outputs: dict[str, str]
) -> list[Finding]:
    findings: list[Finding] = []
    for keys, name in zone_outputs(zone):
        where: KeyPath = ("zones", index, *keys)
        output = known.points.get(name)
        if output is None:
            findings += known.unknown(name, where)
        elif isinstance(output, ModbusInput | MqttInput):
            findings.append(
                Finding(
                    where,
                    f"{name!r} is an input ({output.type}); a zone's output must be a "
                    "relay output",
                )
            )
        elif name in used_outputs:
            findings.append(
                Finding(
                    where,
                    f"output {name!r} is already switched by zone {used_outputs[name]!r}; "
                    "two zones (or two calls) cannot share one relay",
                )
            )
        else:
            used_outputs[name] = zone.name
    return findings


def _zone_backup(index: int, zone: Zone, known: _PointIndex) -> list[Finding]:
    backup = zone.fail_safe.backup_point
    if backup is None:
        return []
    where: KeyPath = ("zones", index, "fail_safe", "backup_point")
    point = known.points.get(backup)
    if point is None:
        return known.unknown(backup, where)
    if isinstance(point, ModbusOutput | MqttOutput):
        return [
            Finding(where, f"{backup!r} is an output; the backup point must be a temperature input")
        ]
    if backup in zone.inputs:
        return [
            Finding(
                where,
                f"{backup!r} is already one of the zone's inputs; a backup must be a second sensor",
            )
        ]
    return []


def _setpoints(index: int, zone: Zone, units: str) -> list[Finding]:
    findings: list[Finding] = []
    base: KeyPath = ("zones", index)
    low, high = zone.limits.min, zone.limits.max
    if low >= high:
        findings.append(
            Finding(
                (*base, "limits", "min"),
                f"limits.min {temperature_text(low, units)} must be below limits.max "
                f"{temperature_text(high, units)}",
            )
        )
    for upper, lower in itertools.pairwise(LEVELS):
        above = zone.setpoints.for_level(upper)
        below = zone.setpoints.for_level(lower)
        if below > above:
            findings.append(
                Finding(
                    (*base, "setpoints", lower),
                    f"{lower} {temperature_text(below, units)} is above {upper} "
                    f"{temperature_text(above, units)}; set points go comfort >= standby >= "
                    "economy >= protection",
                )
            )
    if low < high:
        for level in LEVELS:
            value = zone.setpoints.for_level(level)
            if not low - 1e-9 <= value <= high + 1e-9:
                findings.append(
                    Finding(
                        (*base, "setpoints", level),
                        f"{level} {temperature_text(value, units)} is outside the zone's limits "
                        f"{temperature_text(low, units)} to {temperature_text(high, units)}",
                    )
                )
    return findings


def _tuning(
    index: int,
    zone: Zone,
    units: str,
    cooling: bool = False,
) -> list[Finding]:
    findings: list[Finding] = []
    if cooling:
        assert zone.cooling_effective is not None
        tuning, origins = zone.cooling_effective, zone.cooling_origins
        base: KeyPath = ("zones", index, "cooling")
        preset_key: KeyPath = (*base, "type")
    else:
        tuning, origins = zone.effective, zone.origins
        base = ("zones", index)
        preset_key = (*base, "heating")

    def where(*keys: str) -> KeyPath:
        """The first of ``keys`` the file gave, else the zone's heating (the preset's source)."""
        for key in keys:
            if origins.get(key) == "file":
                return (*base, "tuning", key)
        return preset_key

    def shown(key: str) -> str:
        return "" if origins.get(key) == "file" else f" ({origins.get(key)})"

    period = 3600.0 / tuning.cycle_rate_cph
    if tuning.min_on_s + tuning.min_off_s > period + 1e-9:
        findings.append(
            Finding(
                where("min_on_s", "min_off_s", "cycle_rate_cph"),
                f"min_on_s {_num(tuning.min_on_s)} s{shown('min_on_s')} + min_off_s "
                f"{_num(tuning.min_off_s)} s"
                f"{shown('min_off_s')} is longer than the cycle period 3600 / "
                f"{_num(tuning.cycle_rate_cph)} cph"
                f"{shown('cycle_rate_cph')} = {_num(period)} s: the cycle rate cannot be reached",
            )
        )
    if tuning.max_cycles_per_hour < tuning.cycle_rate_cph - 1e-9:
        findings.append(
            Finding(
                where("max_cycles_per_hour", "cycle_rate_cph"),
                "max_cycles_per_hour "
                f"{tuning.max_cycles_per_hour}{shown('max_cycles_per_hour')} is below the "
                f"cycle rate {_num(tuning.cycle_rate_cph)} cph{shown('cycle_rate_cph')}: "
                "short-cycle protection would stop every design cycle",
            )
        )
    derived = origins.get("anticipator_time_constant_s") == "derived from cycle rate"
    if derived and tuning.anticipator_gain_k <= tuning.differential_k:
        findings.append(
            Finding(
                where("anticipator_gain_k", "differential_k"),
                f"anticipator_gain_k {delta_text(tuning.anticipator_gain_k, units)} must "
                "exceed differential_k "
                f"{delta_text(tuning.differential_k, units)} to derive the time constant from "
                "the cycle rate; "
                "raise the gain or give anticipator_time_constant_s",
            )
        )
    if not math.isfinite(
        tuning.anticipator_time_constant_s
    ):  # pragma: no cover - models refuse inf
        findings.append(Finding(where("anticipator_time_constant_s"), "must be a finite number"))
    return findings


def _cooling(
    index: int, zone: Zone, units: str, calendar: list[tuple[int, CalendarEntry]]
) -> list[Finding]:
    """The cooling call: set points in order and within the limits, the dead band wherever
    ``auto`` is reachable (ASHRAE Standard 90.1), its tuning, a compressor's minimum off time,
    its rest before it reverses, the changeover output's hold."""
    cooling = zone.cooling
    if cooling is None:
        if zone.changeover.mode in ("cool", "auto"):
            return [
                Finding(
                    ("zones", index, "changeover", "mode"),
                    f"changeover {zone.changeover.mode} needs a cooling call (cooling.output)",
                )
            ]
        return []
    base: KeyPath = ("zones", index, "cooling")
    findings: list[Finding] = []
    if zone.output is None and zone.changeover.mode in ("heat", "auto"):
        findings.append(
            Finding(
                ("zones", index, "changeover", "mode"),
                f"changeover {zone.changeover.mode} needs a heating output (output)",
            )
        )
    sp = cooling.setpoints
    levels = ("comfort", "standby", "economy")
    for lower, upper in itertools.pairwise(levels):
        if float(getattr(sp, upper)) < float(getattr(sp, lower)):
            findings.append(
                Finding(
                    (*base, "setpoints", upper),
                    f"cooling {upper} {temperature_text(float(getattr(sp, upper)), units)} is "
                    f"below cooling {lower} {temperature_text(float(getattr(sp, lower)), units)}; "
                    "cooling set points go comfort <= standby <= economy <= overheat",
                )
            )
    if sp.overheat is not None and sp.overheat < sp.economy:
        findings.append(
            Finding(
                (*base, "setpoints", "overheat"),
                f"overheat {temperature_text(sp.overheat, units)} is below cooling economy "
                f"{temperature_text(sp.economy, units)}; the overheat limit is the highest",
            )
        )
    low, high = zone.limits.min, zone.limits.max
    for level in levels:
        value = float(getattr(sp, level))
        if low < high and not low - 1e-9 <= value <= high + 1e-9:
            findings.append(
                Finding(
                    (*base, "setpoints", level),
                    f"cooling {level} {temperature_text(value, units)} is outside the zone's "
                    f"limits {temperature_text(low, units)} to {temperature_text(high, units)}",
                )
            )
    findings += _dead_band(index, zone, units, calendar)
    findings += _tuning(index, zone, units, cooling=True)
    tuning = zone.cooling_effective
    assert tuning is not None
    if cooling.type == "direct-expansion" and tuning.min_off_s < COMPRESSOR_MIN_OFF_S:
        origin = zone.cooling_origins.get("min_off_s")
        findings.append(
            Finding(
                (*base, "tuning", "min_off_s") if origin == "file" else (*base, "type"),
                f"min_off_s {_num(tuning.min_off_s)} s is too short for a compressor "
                f"(direct-expansion): at least {_num(COMPRESSOR_MIN_OFF_S)} s, a compressor "
                "needs 3-5 min off between starts",
            )
        )
    findings += _changeover_times(index, zone)
    return findings


def _changeover_times(index: int, zone: Zone) -> list[Finding]:
    """A compressor that heats and cools rests before it reverses; a changeover output is
    switched at least one tick before the call it is set for (with ``hold_s`` below a tick
    the output and the call would change in the same step)."""
    findings: list[Finding] = []
    co, base = zone.changeover, ("zones", index, "changeover")
    given = co.model_fields_set
    assert zone.cooling is not None
    if (
        zone.cooling.type == "direct-expansion"
        and zone.output is not None
        and co.min_changeover_s < COMPRESSOR_MIN_OFF_S
    ):
        # COMPRESSOR_MIN_OFF_S: a compressor needs 3-5 min off between starts
        # (REFERENCES.md [trade]: common practice, no source); in a heat pump the heating
        # and the cooling call run the one compressor, so the changeover is such a rest.
        findings.append(
            Finding(
                (*base, "min_changeover_s"),
                f"min_changeover_s {_num(co.min_changeover_s)} s is too short for a compressor "
                "(direct-expansion) that heats and cools: at least "
                f"{_num(COMPRESSOR_MIN_OFF_S)} s between a heating and a cooling call, "
                "for compressor protection: a compressor needs 3-5 min off between starts, "
                "also before it starts the other way round",
            )
        )
    if co.output is not None and co.hold_s < zone.tick_s - 1e-9:
        if "hold_s" in given:
            where: KeyPath = (*base, "hold_s")
            hold = f"hold_s {_num(co.hold_s)} s"
        else:
            where = ("zones", index, "tick_s")
            hold = f"hold_s {_num(co.hold_s)} s (default)"
        findings.append(
            Finding(
                where,
                f"{hold} is shorter than the zone's tick_s {_num(zone.tick_s)} s: the "
                "changeover output would switch in the same tick as the call, not before it; "
                f"give hold_s at least one tick ({_num(zone.tick_s)} s)",
            )
        )
    return findings


def dead_band_k(zone: Zone, units: str) -> float:
    """The zone's dead band (K): as written, else the ASHRAE Standard 90.1 minimum."""
    given = zone.changeover.dead_band_k
    return ASHRAE_DEAD_BAND[units] if given is None else float(given)


def _auto_reached_by(
    zone: Zone, calendar: list[tuple[int, CalendarEntry]]
) -> str | None:
    """What makes changeover ``auto`` reachable for the zone: ``""`` its own changeover (as
    written, or left out with both calls), else the first program or calendar entry that
    switches it to ``auto`` (None: nothing does, so the zone never runs in ``auto``)."""
    if zone.changeover_mode == "auto":
        return ""
    for k, entry in enumerate(zone.program):
        if entry.changeover == "auto":
            return f"program[{k}] (at {entry.at})"
    for _, item in calendar:
        if item.changeover == "auto" and item.applies_to(zone.name):
            return f"calendar entry {item.name!r}"
    return None


def _dead_band(
    index: int, zone: Zone, units: str, calendar: list[tuple[int, CalendarEntry]]
) -> list[Finding]:
    """Wherever ``auto`` is reachable (the zone's changeover, or a program or calendar entry
    that switches it there), each level's cooling set point at least the dead band above its
    heating one; otherwise the service refuses the entry's changeover at run time
    (``program.changeover_refused``).

    ASHRAE Standard 90.1 (zone thermostatic controls): where a zone's heating and cooling are
    changed over automatically, the set points keep a dead band of at least 5 F (3 C).
    """
    if zone.output is None:
        return []
    by = _auto_reached_by(zone, calendar)
    if by is None:
        return []
    auto = (
        "changeover auto needs"
        if not by
        else f"{by} switches the zone to changeover auto (its own is "
        f"{zone.changeover_mode}), which needs"
    )
    findings: list[Finding] = []
    base: KeyPath = ("zones", index)
    minimum = ASHRAE_DEAD_BAND[units]
    given = zone.changeover.dead_band_k
    if given is not None and given < minimum - 1e-9:
        findings.append(
            Finding(
                (*base, "changeover", "dead_band_k"),
                f"dead band {delta_text(given, units)} is below {delta_text(minimum, units)}, "
                "the least ASHRAE Standard 90.1 allows between heating and cooling set points",
            )
        )
    band = max(dead_band_k(zone, units), minimum)
    assert zone.cooling is not None
    for level in ("comfort", "standby", "economy"):
        heat = float(getattr(zone.setpoints, level))
        cool = float(getattr(zone.cooling.setpoints, level))
        if cool - heat < band - 1e-9:
            findings.append(
                Finding(
                    (*base, "cooling", "setpoints", level),
                    f"cooling {level} {temperature_text(cool, units)} is less than the dead band "
                    f"{delta_text(band, units)} above heating {level} "
                    f"{temperature_text(heat, units)}: {auto} at least "
                    f"{delta_text(minimum, units)} between them (ASHRAE Standard 90.1)",
                )
            )
    return findings


def _program(index: int, zone: Zone) -> list[Finding]:
    findings: list[Finding] = []
    seen: dict[tuple[str, int], int] = {}
    for k, entry in enumerate(zone.program):
        for day in entry.days:
            key = (day, entry.minute_of_day)
            if key in seen and zone.program[seen[key]].level != entry.level:
                findings.append(
                    Finding(
                        ("zones", index, "program", k, "at"),
                        f"{day} {entry.at} is already program[{seen[key]}] with level "
                        f"{zone.program[seen[key]].level!r}; one level per time",
                    )
                )
                break
            seen.setdefault(key, k)
    for k, entry in enumerate(zone.program):
        problem = changeover_problem(zone, entry.changeover)
        if problem is not None:
            findings.append(Finding(("zones", index, "program", k, "changeover"), problem))
    return findings


def changeover_problem(zone: Zone, changeover: str | None) -> str | None:
    """Why the zone cannot take ``changeover`` from its program (None: it can)."""
    if changeover is None:
        return None
    if zone.cooling is None:
        return f"changeover {changeover} needs a cooling call (cooling.output) in this zone"
    if zone.output is None and changeover in ("heat", "auto"):
        return f"changeover {changeover} needs a heating output (output) in this zone"
    return None


# --------------------------------------------------------------------------- heat sources


def check_heat_sources(parts: SiteParts) -> list[Finding]:
    """A heat source's references and conflicts.

    Refused: a local zone that does not exist, a remote ``SITE/ZONE`` of this very site or
    without a broker, a zone served by two sources, an enable or pump output that is not an
    output or that a zone or another source already switches, a remote prefix for a site
    none of the source's zones names.
    """
    findings = _duplicate_names("heat_sources", parts.heat_sources)
    findings += _served_zones(parts)
    findings += _source_outputs(parts)
    return findings


def _served_zones(parts: SiteParts) -> list[Finding]:
    known = {zone.name for _, zone in parts.zones} | parts.invalid_names.get("zones", set())
    here = parts.site.name if parts.site is not None else None
    served: dict[str, str] = {}
    findings: list[Finding] = []
    for index, source in parts.heat_sources:
        remote_sites: set[str] = set()
        for position, text in enumerate(source.zones):
            where: KeyPath = ("heat_sources", index, "zones", position)
            site, zone = text.split("/", 1) if "/" in text else (None, text)
            problem = None
            if site is None and zone not in known:
                problem = f"no zone named {zone!r} (zones: {', '.join(sorted(known)) or 'none'})"
            elif site is not None and site == here:
                problem = f"{site!r} is this site: write the local zone as {zone!r}"
            elif site is not None and not parts.broker_present:
                problem = (
                    f"remote zone {text!r} is heard over MQTT: the site needs a 'broker' section"
                )
            elif text in served:
                problem = (
                    f"zone {text!r} is already served by heat source {served[text]!r}; a zone "
                    "has one heat source"
                )
            if site is not None:
                remote_sites.add(site)
            if problem is not None:
                findings.append(Finding(where, problem))
            else:
                served[text] = source.name
        for site in source.remote_prefixes:
            if site not in remote_sites:
                findings.append(
                    Finding(
                        ("heat_sources", index, "remote_prefixes", site),
                        f"no zone of site {site!r} is served by this source (zones: "
                        f"{', '.join(source.zones)})",
                    )
                )
    return findings


def _source_outputs(parts: SiteParts) -> list[Finding]:
    points = {point.name: point for _, point in parts.points}
    bad_points = parts.invalid_names.get("points", set())
    known = ", ".join(sorted(points)) or "none defined"
    users: dict[str, str] = {
        name: f"zone {zone.name!r}" for _, zone in parts.zones for _, name in zone_outputs(zone)
    }
    findings: list[Finding] = []
    for index, source in parts.heat_sources:
        for key in ("output", "pump_output"):
            name = getattr(source, key)
            if name is None:
                continue
            where: KeyPath = ("heat_sources", index, key)
            point = points.get(name)
            what = "enable" if key == "output" else "pump"
            if point is None:
                if name not in bad_points:
                    findings.append(Finding(where, f"unknown point {name!r} (points: {known})"))
            elif isinstance(point, ModbusInput | MqttInput):
                findings.append(
                    Finding(
                        where,
                        f"{name!r} is an input ({point.type}); a source's {what} output must be "
                        "a relay output",
                    )
                )
            elif name in users:
                findings.append(
                    Finding(
                        where,
                        f"output {name!r} is already switched by {users[name]}; a source's "
                        f"{what} output is its own relay",
                    )
                )
            else:
                users[name] = f"heat source {source.name!r} ({key})"
    return findings
