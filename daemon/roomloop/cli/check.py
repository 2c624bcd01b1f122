"""``roomloop check -c SITE.yaml``: validate a site and print it as roomloop will run it.

Problems come back from the loader as a :class:`~roomloop.errors.ConfigError` (the
command-line front prints them, one per line, and exits 2). On success the resolved
site is printed in the site's units: links, the broker (never a secret), points, and
each zone with its effective tuning and where every value came from.
"""

from __future__ import annotations

import argparse
import os
import sys
from collections.abc import Callable
from dataclasses import replace
from typing import TextIO

from roomloop.config.checks import dead_band_k, delta_text, temperature_text
from roomloop.config.loader import load_site_with_warnings
from roomloop.config.models import (
    BYTE_LETTERS,
    LEVELS,
    Broker,
    HeatSource,
    ModbusInput,
    ModbusOutput,
    ModbusRtuLink,
    ModbusTcpLink,
    MqttInput,
    MqttOutput,
    Site,
    Zone,
)
from roomloop.core.settings import ZoneSettings
from roomloop.core.stages.constants import smoothing_time_s
from roomloop.errors import ConfigProblem
from roomloop.history.store import history_path


def main(args: argparse.Namespace) -> int:
    site, warnings = load_site_with_warnings(args.config)
    for warning in warnings:
        print(_warning_text(warning), file=sys.stderr)
    try:
        print_site(site, sys.stdout)
        told = f" ({len(warnings)} warning{'s' if len(warnings) != 1 else ''})" if warnings else ""
        print(f"\n{args.config}: ok{told}", file=sys.stdout)
        sys.stdout.flush()
    except BrokenPipeError:
        # `roomloop check -c site.yaml | head`: the reader left; that is no error.
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    return 0


def _seconds(value: float, *, derived: bool) -> str:
    """A duration; one roomloop derived (not typed) is rounded to what matters: whole
    seconds, or tenths below 10 s (``519 s``, not ``519.371 s``)."""
    if not derived:
        return f"{_n(value)} s"
    return f"{round(value):d} s" if value >= 10 else f"{round(value, 1):g} s"


def _warning_text(problem: ConfigProblem) -> str:
    """``FILE:LINE: key.path: warning: message``, like an error line but marked."""
    return str(replace(problem, message=f"warning: {problem.message}"))


def _n(value: float) -> str:
    return f"{round(value, 3):g}"


def print_site(site: Site, out: TextIO) -> None:
    """The resolved site, readable, in the site's units."""
    units = site.site.units
    w = out.write
    info = site.site
    w(f"site {info.name}: units {units}, time zone {info.timezone}, state in {info.state_dir}\n")
    w(f"logging: level {site.logging.level}, format {site.logging.format}\n")
    outdoor = info.outdoor_point
    w(f"outdoor temperature: {'point ' + outdoor if outdoor else 'none'} (tune, optimum start)\n")
    w(f"history: {_history_text(site)}\n")

    w("\nlinks\n")
    if not site.links:
        w("  (none)\n")
    for link in site.links:
        timing = (
            f"timeout {_n(link.timeout_s)} s, retries {link.retries}, gap "
            f"{_n(link.request_gap_s)} s, "
            f"poll every {_n(link.poll_interval_s)} s, bridges up to {link.max_gap_registers} "
            "registers"
        )
        if isinstance(link, ModbusTcpLink):
            w(f"  {link.name}: modbus-tcp {link.host}:{link.port}; {timing}\n")
        elif isinstance(link, ModbusRtuLink):
            frame = f"{link.baud} baud {link.data_bits}{link.parity}{link.stop_bits}"
            w(f"  {link.name}: modbus-rtu {link.device} {frame}; {timing}\n")

    w("\nbroker\n")
    w(f"  {_broker_text(site.broker, site)}\n")

    w("\npoints\n")
    if not site.points:
        w("  (none)\n")
    for point in site.points:
        w(f"  {point.name}: {_point_text(point, units)}\n")

    w("\nzones\n")
    if not site.zones:
        w("  (none: the heat sources serve zones of other sites)\n")
    for zone in site.zones:
        _zone(zone, units, w, smoothing_time_s(ZoneSettings.from_site(site, zone.name)))

    w("\ncalendar (replaces the weekly program while it lasts)\n")
    if not site.calendar:
        w("  (none)\n")
    for entry in site.calendar:
        whole_day = len(entry.end) == 10
        until = f"{entry.end} (whole day)" if whole_day else entry.end
        zones = "every zone" if entry.zones is None else ", ".join(entry.zones)
        w(f"  {entry.name}: {entry.start} to {until}: {entry.level}"
          f"{_changeover(entry.changeover)}, {zones}\n")

    w("\nheat sources\n")
    if not site.heat_sources:
        w("  (none)\n")
    for source in site.heat_sources:
        _heat_source(source, site.topic_prefix, w)


def _history_text(site: Site) -> str:
    history = site.history
    if not history.enabled:
        return "off (report and tune then need a --history CSV)"
    return (
        f"{history_path(site.site.state_dir, site.name)}, a commit at most every "
        f"{_n(history.commit_s)} s, kept {_n(history.keep_days)} days"
    )


def _broker_text(broker: Broker | None, site: Site) -> str:
    if broker is None:
        return "(none: no publishing, no commands, no MQTT points)"
    parts = [
        f"{broker.host}:{broker.port}",
        f"client id {broker.client_id or '(random)'}",
    ]
    parts.append(f"keepalive {broker.keepalive_s} s")
    if broker.username:
        # Never the values: a password typed into either key by mistake stays unseen.
        if broker.password_file:
            secret = "password from the file broker.password_file names"
        elif broker.password_env:
            secret = "password from the variable broker.password_env names"
        else:
            secret = "no password"
        parts.append(f"user {broker.username} ({secret})")
    else:
        parts.append("anonymous")
    if broker.tls is not None:
        tls = "TLS"
        if broker.tls.ca_file:
            tls += f" CA {broker.tls.ca_file}"
        if broker.tls.cert_file:
            tls += f", client certificate {broker.tls.cert_file}"
        if broker.tls.insecure:
            tls += ", host name NOT checked"
        parts.append(tls)
    else:
        parts.append("no TLS")
    parts.append(f"topics under {site.topic_prefix}/")
    parts.append(f"state every {_n(broker.publish_interval_s)} s")
    parts.append(f"{broker.command_rate_per_min} commands/min per zone")
    return ", ".join(parts)


def _point_text(point: ModbusInput | MqttInput | ModbusOutput | MqttOutput, units: str) -> str:
    if isinstance(point, ModbusInput | MqttInput):
        low, high = point.valid_range
        common = (
            f"valid {temperature_text(low, units)} to {temperature_text(high, units)}, "
            f"device sends °{point.unit}"
        )
        if point.scale != 1.0 or point.offset != 0.0:
            common += f" as raw x {_n(point.scale)} + {_n(point.offset)}"
        if isinstance(point, ModbusInput):
            order = (
                f"{point.word_order}-word {point.byte_order}-byte, {_letters(point)}"
                if point.registers > 1
                else f"{point.byte_order}-byte"
            )
            text = (
                f"modbus-input on {point.link}, unit {point.unit_id}, {point.table} register "
                f"{point.address} "
                f"({point.data_type}, {order}); {common}"
            )
            if point.sentinels:
                text += ", no reading when raw is " + " or ".join(
                    f"0x{s & 0xFFFFFFFF:04X}"
                    + (f" ({verdict})" if (verdict := point.sentinel_verdict(s)) else "")
                    for s in point.sentinel_values
                )
            return text
        field = f", field {point.field}" if point.field else ", plain number"
        return f"mqtt-input {point.topic}{field}; {common}"
    if isinstance(point, ModbusOutput):
        back = "read back" if point.read_back else "no read-back"
        return (
            f"modbus-output on {point.link}, unit {point.unit_id}, {point.table} {point.address}, "
            f"on {point.on_value} / off {point.off_value}, {back}, re-sent every "
            f"{_n(point.reassert_s)} s"
        )
    state = (
        f"state on {point.state_topic} within {_n(point.state_timeout_s)} s"
        if point.state_topic
        else "no state topic"
    )
    return (
        f"mqtt-output {point.command_topic}, payloads {point.on_payload!r} / "
        f"{point.off_payload!r}, "
        f"{state}, re-sent every {_n(point.reassert_s)} s"
    )


def _letters(point: ModbusInput) -> str:
    """The layout as device manuals spell it (CDAB: low word first)."""
    for letters, orders in BYTE_LETTERS.items():
        if orders == (point.word_order, point.byte_order):
            return letters
    return "?"  # pragma: no cover - the four pairs are all the pairs


def _cooling_text(zone: Zone, units: str, write: Callable[[str], object]) -> None:
    """The cooling call and the changeover, when the zone can cool."""
    cooling, tuning = zone.cooling, zone.cooling_effective
    if cooling is None or tuning is None:
        return
    sp = cooling.setpoints
    shown = ", ".join(
        f"{level} {temperature_text(float(getattr(sp, level)), units)}"
        for level in ("comfort", "standby", "economy")
    )
    overheat = "none" if sp.overheat is None else temperature_text(sp.overheat, units)
    write(f"    cooling: {cooling.type}, output {cooling.output}; set points {shown}, "
          f"overheat limit {overheat}\n")
    time_constant = _seconds(
        tuning.anticipator_time_constant_s,
        derived=zone.cooling_origins.get("anticipator_time_constant_s") != "file",
    )
    write(
        f"      differential {delta_text(tuning.differential_k, units)}, anticipator gain "
        f"{delta_text(tuning.anticipator_gain_k, units)}, time constant "
        f"{time_constant}, cycle rate {_n(tuning.cycle_rate_cph)} "
        f"per hour, minimum on {_n(tuning.min_on_s)} s, minimum off {_n(tuning.min_off_s)} s, "
        f"most starts per hour {tuning.max_cycles_per_hour}, droop compensation "
        f"{'on' if tuning.droop_compensation else 'off'}\n"
    )
    co = zone.changeover
    band = dead_band_k(zone, units)
    valve = (
        "no changeover output"
        if co.output is None
        else f"changeover output {co.output} (energised in {co.energised_in}, held "
        f"{_n(co.hold_s)} s before a call)"
    )
    write(
        f"    changeover: {zone.changeover_mode} at first start, dead band "
        f"{delta_text(band, units)}, at least {_n(co.min_changeover_s)} s between a heating "
        f"and a cooling call, {valve}\n"
    )


def _smoothing_text(zone: Zone, used_s: float) -> str:
    """The switching temperature's smoothing: as given, or what the controller derives."""
    given = zone.effective.smoothing_s
    if given is not None:
        return "off" if given == 0 else f"{_n(given)} s"
    return "off" if used_s == 0 else _seconds(used_s, derived=True)


def _zone(
    zone: Zone, units: str, write: Callable[[str], object], smoothing_s: float
) -> None:
    """One zone; ``smoothing_s``: the smoothing its controller uses (from its settings)."""
    heating = f"{zone.heating}, output {zone.output}" if zone.output is not None else "no heating"
    write(f"  {zone.name}: {heating}, inputs {', '.join(zone.inputs)} ({zone.combine})\n")
    sp = ", ".join(
        f"{level} {temperature_text(zone.setpoints.for_level(level), units)}" for level in LEVELS
    )
    write(f"    set points: {sp}\n")
    heater = (
        f"{_n(zone.heater_w)} W (energy figures; tune's plant in watts)"
        if zone.heater_w is not None
        else "not given (no energy figures; tune's plant on a nominal 1000 W scale)"
    )
    write(f"    heater power: {heater}\n")
    write(
        f"    limits: {temperature_text(zone.limits.min, units)} to "
        f"{temperature_text(zone.limits.max, units)}; "
        f"mode at first start {zone.mode}, default level {zone.default_level}, "
        f"protection in off {'yes' if zone.protection_in_off else 'no'}, tick {_n(zone.tick_s)} s, "
        f"safe state {zone.safe_state}\n"
    )
    tuning = zone.effective
    origins = zone.origins
    rows = [
        ("differential", delta_text(tuning.differential_k, units), "differential_k"),
        ("anticipator gain", delta_text(tuning.anticipator_gain_k, units), "anticipator_gain_k"),
        (
            "anticipator time constant",
            _seconds(
                tuning.anticipator_time_constant_s,
                derived=origins.get("anticipator_time_constant_s") != "file",
            ),
            "anticipator_time_constant_s",
        ),
        ("cycle rate", f"{_n(tuning.cycle_rate_cph)} per hour", "cycle_rate_cph"),
        ("minimum on", f"{_n(tuning.min_on_s)} s", "min_on_s"),
        ("minimum off", f"{_n(tuning.min_off_s)} s", "min_off_s"),
        ("most cycles per hour", str(tuning.max_cycles_per_hour), "max_cycles_per_hour"),
        ("droop compensation", "on" if tuning.droop_compensation else "off", "droop_compensation"),
        ("droop time", f"{_n(tuning.droop_time_s)} s", "droop_time_s"),
        ("smoothing", _smoothing_text(zone, smoothing_s), "smoothing_s"),
        ("proportional gain", f"{_n(tuning.proportional_gain)}", "proportional_gain"),
    ]
    write("    tuning:\n")
    for label, value, key in rows:
        write(f"      {label:<27} {value:<14} {origins.get(key, '')}\n")
    _cooling_text(zone, units, write)
    fs = zone.fail_safe
    policy: str = fs.policy
    if fs.policy == "fixed-duty":
        policy += f" {fs.duty:.0%} of {_n(fs.period_s)} s"
    elif fs.policy == "learned-duty":
        policy += (
            f" over {_n(fs.learn_hours)} h, {fs.min_duty:.0%} to {fs.max_duty:.0%} of "
            f"{_n(fs.period_s)} s "
            f"(starts at {fs.duty:.0%})"
        )
    backup = f", backup point {fs.backup_point}" if fs.backup_point else ", no backup point"
    write(
        f"    fail-safe: {policy} after {_n(fs.sensor_timeout_s)} s without a reliable "
        f"input{backup}, "
        f"recovers after {_n(fs.recovery_s)} s\n"
    )
    if zone.program:
        write("    program:\n")
        for entry in zone.program:
            write(f"      {_days(entry.days):<24} {entry.at}  {entry.level}"
                  f"{_changeover(entry.changeover)}\n")
    else:
        write(f"    program: none (mode auto uses {zone.default_level})\n")


def _changeover(changeover: str | None) -> str:
    """A program or calendar entry's changeover, when it gives one (else the zone keeps its)."""
    return "" if changeover is None else f", changeover {changeover}"


def _days(days: list[str] | str) -> str:
    return days if isinstance(days, str) else ",".join(days)


def _heat_source(source: HeatSource, prefix: str, write: Callable[[str], object]) -> None:
    pump = f"pump {source.pump_output}" if source.pump_output else "no pump output"
    write(f"  {source.name}: {source.kind}, enable {source.output}, {pump}\n")
    write(f"    serves: {', '.join(source.zones)}\n")
    for text in source.remote_zones:
        site, zone = text.split("/", 1)
        write(f"    {text}: heard on {source.remote_prefix(site)}/zone/{zone}/demand\n")
    if source.remote_zones:
        stale = source.remote_stale
        policy: str = stale.policy
        if stale.policy == "fixed-duty":
            policy += f" {stale.duty:.0%} of {_n(stale.period_s)} s"
        write(
            f"    stale remote zone (site offline, or silent {_n(stale.timeout_s)} s): {policy}\n"
        )
    write(f"    state on {prefix}/source/{source.name}/state\n")
    timing = source.effective
    origins = source.origins
    rows = [
        ("valve opening", f"{_n(timing.valve_opening_s)} s", "valve_opening_s"),
        ("pump pre-run", f"{_n(timing.pump_pre_run_s)} s", "pump_pre_run_s"),
        ("pump overrun", f"{_n(timing.pump_overrun_s)} s", "pump_overrun_s"),
        ("minimum on", f"{_n(timing.min_on_s)} s", "min_on_s"),
        ("minimum off", f"{_n(timing.min_off_s)} s", "min_off_s"),
        ("most starts per hour", str(timing.max_starts_per_hour), "max_starts_per_hour"),
        ("pump exercise after", f"{_n(timing.pump_exercise_after_s / 3600)} h idle",
         "pump_exercise_after_s"),
        ("pump exercise run", f"{_n(timing.pump_exercise_s)} s", "pump_exercise_s"),
    ]
    write("    timing:\n")
    for label, value, key in rows:
        write(f"      {label:<27} {value:<14} {origins.get(key, '')}\n")
