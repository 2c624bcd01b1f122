"""``roomloop probe -c SITE POINT [--set on|off] [--yes]``: commissioning, one point at a time.

Reads one point once and prints what came over the wire (registers or payload),
what roomloop makes of it (value in the site's units) and the verdict. With
``--set`` it switches an output, after asking on a terminal (``--yes`` skips the
question; without a terminal and without ``--yes`` it refuses), then reads it back.

Exit codes (DESIGN.md): 0 read or switched and confirmed; 1 the device or broker
did not answer, or the read-back disagrees; 2 usage or config (an unknown point,
``--set`` on an input, no broker for an MQTT point, a TLS or password file or
variable the broker section names that is missing).
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import sys
import time
from collections.abc import Callable
from typing import TYPE_CHECKING, TextIO

from roomloop.config.checks import temperature_text
from roomloop.config.loader import load_site
from roomloop.config.models import (
    ModbusInput,
    ModbusOutput,
    MqttInput,
    MqttOutput,
    Site,
)
from roomloop.core.reliability import reading_verdict
from roomloop.core.settings import PointSettings
from roomloop.errors import BrokerError
from roomloop.io.codec import order_name
from roomloop.log import configure_logging

if TYPE_CHECKING:
    import aiomqtt

    from roomloop.io.mqtt import MqttPoints

EXIT_OK = 0
EXIT_RUNTIME = 1
EXIT_USAGE = 2
MQTT_INPUT_WAIT_S = 10.0
"""How long to wait for a message on an input topic (retained ones come at once)."""

Point = ModbusInput | MqttInput | ModbusOutput | MqttOutput


def main(args: argparse.Namespace) -> int:
    # probe prints its own findings on stdout; only real errors go to the log, on stderr.
    configure_logging("error", "console", sys.stderr)
    site = load_site(args.config)
    try:
        point = site.point(args.point)
    except KeyError:
        names = ", ".join(p.name for p in site.points) or "none"
        print(f"roomloop probe: no point named {args.point!r} (points: {names})", file=sys.stderr)
        return EXIT_USAGE
    want: bool | None = None if args.set is None else args.set == "on"
    if want is not None:
        if isinstance(point, ModbusInput | MqttInput):
            print(
                f"roomloop probe: {point.name} is an input; --set switches outputs", file=sys.stderr
            )
            return EXIT_USAGE
        if not args.yes and not _confirm(point.name, args.set, sys.stdin, sys.stderr):
            return EXIT_USAGE
    if isinstance(point, MqttInput | MqttOutput) and site.broker is None:
        print(
            f"roomloop probe: {point.name} is an MQTT point but the site has no broker",
            file=sys.stderr,
        )
        return EXIT_USAGE
    if isinstance(point, MqttInput | MqttOutput) and site.broker is not None:
        from roomloop.io.broker import BrokerSetupError, check_broker_files

        try:
            check_broker_files(site.broker)
        except BrokerSetupError as exc:  # a missing TLS or password file: the site's mistake
            print(f"roomloop probe: {exc}", file=sys.stderr)
            return EXIT_USAGE
    return asyncio.run(_probe(site, point, want, sys.stdout))


def _confirm(name: str, state: str, stdin: TextIO, stderr: TextIO) -> bool:
    """Ask on a terminal; refuse without one (a script must say --yes)."""
    if not stdin.isatty():
        print(
            f"roomloop probe: not switching {name} {state}: no terminal to confirm on; "
            "add --yes to switch without asking",
            file=stderr,
        )
        return False
    stderr.write(f"Switch output {name} {state}? This may start or stop heating plant. [y/N] ")
    stderr.flush()
    answer = stdin.readline().strip().lower()
    if answer not in ("y", "yes"):
        print("roomloop probe: not switched", file=stderr)
        return False
    return True


async def _probe(site: Site, point: Point, want: bool | None, out: TextIO) -> int:
    if isinstance(point, ModbusInput | ModbusOutput):
        return await _probe_modbus(site, point, want, out)
    return await _probe_mqtt(site, point, want, out)


# --------------------------------------------------------------------------- Modbus


async def _probe_modbus(
    site: Site, point: ModbusInput | ModbusOutput, want: bool | None, out: TextIO
) -> int:
    from roomloop.io.modbus import ModbusLink

    link = site.link(point.link)
    units = site.site.units
    inputs = [point] if isinstance(point, ModbusInput) else []
    outputs = [point] if isinstance(point, ModbusOutput) else []
    async with ModbusLink(link, inputs, outputs, reconnect_min_s=0.0) as modbus:
        print(
            f"point        {point.name} ({point.type}) on link {link.name}, {modbus.endpoint}",
            file=out,
        )
        if isinstance(point, ModbusInput):
            order = order_name(point.word_order, point.byte_order)
            span = f"{point.address}..{point.address + point.registers - 1}"
            print(
                f"request      unit {point.unit_id}, {point.table} registers {span}"
                f" ({point.data_type}, {order}, scale {point.scale:g}, offset {point.offset:g},"
                f" unit {point.unit})",
                file=out,
            )
            reading = await modbus.read_point(point.name)
            regs = " ".join(f"0x{r:04X}" for r in reading.registers)
            print(f"raw          {regs} (= {reading.decoded.raw!r})", file=out)
            value = reading.decoded.value
            shown = "none" if value is None else temperature_text(value, units)
            print(f"value        {shown}", file=out)
            verdict = reading_verdict(
                PointSettings.from_point(point), value, reading.decoded.transport
            )
            note = f" ({reading.decoded.detail})" if reading.decoded.detail else ""
            print(f"reliability  {verdict}{note}", file=out)
            return EXIT_OK
        table = "coil" if point.table == "coil" else "holding register"
        print(
            f"output       unit {point.unit_id}, {table} {point.address}"
            f" (on = {point.on_value}, off = {point.off_value})",
            file=out,
        )
        if want is None:
            back = await modbus.read_output(point.name)
            print(f"raw          {back.raw}", file=out)
            print(f"state        {_on_off(back.on)}", file=out)
            return EXIT_OK
        state = await modbus.set_output(point.name, want)
        value = point.on_value if want else point.off_value
        detail = state.detail or ""
        if state.verdict == "comm-failure" and detail.startswith("write failed"):
            reason = detail.removeprefix("write failed: ")
            print(f"write        FAILED: {value} ({_on_off(want)}) not written: {reason}", file=out)
            print("result       comm-failure (the output was not switched)", file=out)
            return EXIT_RUNTIME
        print(f"wrote        {value} ({_on_off(want)})", file=out)
        if state.verdict == "comm-failure":
            print(f"read back    FAILED: {detail.removeprefix('read back failed: ')}", file=out)
            print("result       comm-failure (written, but not confirmed)", file=out)
            return EXIT_RUNTIME
        if state.verdict == "unverified":
            print("read back    not configured (read_back: false)", file=out)
            return EXIT_OK
        print(f"read back    {_on_off(state.confirmed)}", file=out)
        print(
            f"result       {state.verdict}{f' ({state.detail})' if state.detail else ''}", file=out
        )
        return EXIT_OK if state.verdict == "ok" else EXIT_RUNTIME


def payload_text(payload: bytes | bytearray | str, limit: int = 200) -> str:
    """A payload as the text it is (UTF-8), not as Python bytes; undecodable bytes as ``\\xNN``."""
    if isinstance(payload, str):
        text = payload
    else:
        text = bytes(payload).decode("utf-8", "backslashreplace")
    if not text:
        return "(empty)"
    shown = "".join(c if c.isprintable() or c == " " else repr(c)[1:-1] for c in text)
    return shown if len(shown) <= limit else shown[: limit - 3] + "..."


def _on_off(value: bool | None) -> str:
    return "on" if value is True else "off" if value is False else "neither on nor off"


# --------------------------------------------------------------------------- MQTT


async def _probe_mqtt(
    site: Site, point: MqttInput | MqttOutput, want: bool | None, out: TextIO
) -> int:
    import aiomqtt

    from roomloop.io.broker import BrokerConnection, endpoint_of
    from roomloop.io.broker_errors import describe_broker_error
    from roomloop.io.client_ids import helper_broker
    from roomloop.io.mqtt import MqttPoints

    assert site.broker is not None
    # Never the service's client id: the broker would throw the running service off.
    broker = helper_broker(site.broker, "probe")
    endpoint = endpoint_of(broker)
    inputs = [point] if isinstance(point, MqttInput) else []
    outputs = [point] if isinstance(point, MqttOutput) else []
    points = MqttPoints(inputs, outputs)
    print(f"point        {point.name} ({point.type}) via broker {endpoint}", file=out)
    try:
        client = BrokerConnection(broker).make_client()
        async with client:
            for topic in points.topics():
                await client.subscribe(topic, qos=1)
            points.attach(client)
            if isinstance(point, MqttInput):
                where = f"topic {point.topic}" + (f", field {point.field}" if point.field else "")
                print(f"listening    {where} (up to {MQTT_INPUT_WAIT_S:g} s)", file=out)
                if not await _wait_message(
                    client, points, MQTT_INPUT_WAIT_S, lambda: point.name in points.last_payload
                ):
                    print("payload      nothing arrived", file=out)
                    return EXIT_RUNTIME
                sample = points.samples(time.time())[point.name]
                print(f"payload      {payload_text(points.last_payload[point.name])}", file=out)
                shown = (
                    "none"
                    if sample.value is None
                    else temperature_text(sample.value, site.site.units)
                )
                print(f"value        {shown}", file=out)
                verdict = reading_verdict(
                    PointSettings.from_point(point), sample.value, sample.transport
                )
                print(f"reliability  {verdict}", file=out)
                return EXIT_OK
            return await _probe_mqtt_output(client, points, point, want, out)
    except aiomqtt.MqttError as exc:
        raise BrokerError(describe_broker_error(exc), endpoint=endpoint) from None


async def _probe_mqtt_output(
    client: aiomqtt.Client, points: MqttPoints, point: MqttOutput, want: bool | None, out: TextIO
) -> int:
    print(
        f"output       command topic {point.command_topic} (on = {payload_text(point.on_payload)},"
        f" off = {payload_text(point.off_payload)}), state topic {point.state_topic or 'none'}",
        file=out,
    )
    if want is None:
        if point.state_topic is None:
            print("state        unknown: no state topic configured", file=out)
            return EXIT_OK
        if not await _wait_message(
            client, points, point.state_timeout_s, lambda: point.name in points.last_payload
        ):
            print(
                f"state        nothing on {point.state_topic} within {point.state_timeout_s:g} s",
                file=out,
            )
            return EXIT_RUNTIME
        print(f"payload      {payload_text(points.last_payload[point.name])}", file=out)
        print(f"state        {_on_off(points.output_state(point.name).confirmed)}", file=out)
        return EXIT_OK
    state = await points.set_output(point.name, want)
    payload = point.on_payload if want else point.off_payload
    if state.verdict == "comm-failure":
        print(
            f"publish      FAILED: {payload_text(payload)} not published: {state.detail}",
            file=out,
        )
        print("result       comm-failure (the output was not switched)", file=out)
        return EXIT_RUNTIME
    print(f"published    {payload_text(payload)} (QoS 1)", file=out)
    if point.state_topic is None:
        print("read back    not configured (no state topic)", file=out)
        return EXIT_OK
    await _wait_message(
        client,
        points,
        point.state_timeout_s,
        lambda: points.output_state(point.name).verdict == "ok",
    )
    points.check_read_back(time.time() + point.state_timeout_s)
    state = points.output_state(point.name)
    print(f"read back    {_on_off(state.confirmed)}", file=out)
    print(f"result       {state.verdict}{f' ({state.detail})' if state.detail else ''}", file=out)
    return EXIT_OK if state.verdict == "ok" else EXIT_RUNTIME


async def _wait_message(
    client: aiomqtt.Client, points: MqttPoints, timeout_s: float, done: Callable[[], bool]
) -> bool:
    """Feed messages to the points until ``done()`` or ``timeout_s``; returns ``done()``."""
    if done():
        return True

    async def feed() -> None:
        async for message in client.messages:
            points.handle(message.topic.value, message.payload, time.time())
            if done():
                return

    with contextlib.suppress(TimeoutError):
        await asyncio.wait_for(feed(), timeout_s)
    return bool(done())
