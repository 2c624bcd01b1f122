"""``roomloop probe`` end to end: the real command in a subprocess against real peers."""

from __future__ import annotations

import asyncio
import sys
from pathlib import Path
from typing import Any

import aiomqtt
import pytest

SITE = """\
site:
  name: probe-bench
  units: {units}
links:
  - name: bench
    type: modbus-tcp
    host: 127.0.0.1
    port: {port}
    timeout_s: 0.3
    retries: 0
broker:
  host: 127.0.0.1
  port: {broker_port}
points:
  - {{name: room, type: modbus-input, link: bench, address: 10, scale: 0.1}}
  - {{name: attic, type: modbus-input, link: bench, address: 20,
      data_type: float32, word_order: little}}
  - {{name: relay, type: modbus-output, link: bench, address: 3}}
  - {{name: hall, type: mqtt-input, topic: bench/hall, field: air.temp}}
  - {{name: fan, type: mqtt-output, command_topic: bench/fan/set,
      state_topic: bench/fan, state_timeout_s: 1.5}}
zones:
  - name: lab
    inputs: [room]
    output: relay
    heating: electric
"""


def site_file(tmp_path: Path, port: int, broker_port: int = 1, units: str = "C") -> Path:
    path = tmp_path / "site.yaml"
    path.write_text(SITE.format(port=port, broker_port=broker_port, units=units), encoding="utf-8")
    return path


async def probe(*args: str) -> tuple[int, str, str]:
    process = await asyncio.create_subprocess_exec(
        sys.executable,
        "-m",
        "roomloop",
        "probe",
        *args,
        stdin=asyncio.subprocess.DEVNULL,
        stdout=asyncio.subprocess.PIPE,
        stderr=asyncio.subprocess.PIPE,
    )
    out, err = await asyncio.wait_for(process.communicate(), 30)
    assert process.returncode is not None
    return process.returncode, out.decode(), err.decode()


async def test_probe_reads_an_input(modbus_tcp_server: Any, tmp_path: Path) -> None:
    server = await modbus_tcp_server()
    # REFERENCES.md: int16 x 10 transmitter, 21.5 C -> 0x00D7 [trade]
    await server.set_registers("input", 10, [0x00D7])
    # REFERENCES.md: float32 21.5 in CDAB order = 0000 41AC [published; computed]
    await server.set_registers("input", 20, [0x0000, 0x41AC])
    site = site_file(tmp_path, server.port)
    code, out, err = await probe("-c", str(site), "room")
    assert code == 0, err
    assert "0x00D7" in out and "21.5 °C" in out and "reliability  ok" in out
    code, out, _ = await probe("-c", str(site), "attic")
    assert code == 0 and "0x0000 0x41AC" in out and "CDAB" in out and "21.5 °C" in out
    code, out, _ = await probe("-c", str(site_file(tmp_path, server.port, units="F")), "room")
    assert code == 0 and "70.7 °F" in out


async def test_probe_flags_a_sentinel_and_out_of_range(
    modbus_tcp_server: Any, tmp_path: Path
) -> None:
    server = await modbus_tcp_server()
    await server.set_registers("input", 10, [0x7FFF])
    code, out, _ = await probe("-c", str(site_file(tmp_path, server.port)), "room")
    assert code == 0
    assert "0x7FFF" in out and "over-range" in out


async def test_probe_switches_an_output_and_reads_it_back(
    modbus_tcp_server: Any, tmp_path: Path
) -> None:
    server = await modbus_tcp_server()
    site = str(site_file(tmp_path, server.port))
    code, out, _ = await probe("-c", site, "relay")
    assert code == 0 and "state        off" in out
    code, out, err = await probe("-c", site, "relay", "--set", "on", "--yes")
    assert code == 0, err
    assert "result       ok" in out and await server.get_coils(3, 1) == [True]


async def test_probe_says_a_refused_write_failed(modbus_tcp_server: Any, tmp_path: Path) -> None:
    server = await modbus_tcp_server()
    # REFERENCES.md: Modbus Application Protocol V1.1b3, section 7: 4 = server device failure
    # [published]
    server.exception_code = 4
    code, out, err = await probe(
        "-c", str(site_file(tmp_path, server.port)), "relay", "--set", "on", "--yes"
    )
    assert code == 1, out + err
    assert "wrote" not in out
    assert "write        FAILED: 1 (on) not written: " in out
    assert "exception reply 4 (server device failure)" in out
    assert "Traceback" not in err
    server.exception_code = None
    assert await server.get_coils(3, 1) == [False]


async def test_probe_says_a_write_to_an_unreachable_device_failed(
    modbus_tcp_server: Any, tmp_path: Path
) -> None:
    server = await modbus_tcp_server()
    await server.stop()
    code, out, err = await probe(
        "-c", str(site_file(tmp_path, server.port)), "relay", "--set", "on", "--yes"
    )
    assert code == 1, out + err
    assert "wrote" not in out
    assert "write        FAILED: 1 (on) not written: not connected" in out
    assert "Traceback" not in err


async def test_probe_refuses_to_switch_without_a_terminal(
    modbus_tcp_server: Any, tmp_path: Path
) -> None:
    server = await modbus_tcp_server()
    code, _, err = await probe("-c", str(site_file(tmp_path, server.port)), "relay", "--set", "on")
    assert code == 2 and "--yes" in err
    assert await server.get_coils(3, 1) == [False]
    assert [r for r in server.requests if r.function_code == 5] == []


async def test_probe_usage_errors(modbus_tcp_server: Any, tmp_path: Path) -> None:
    server = await modbus_tcp_server()
    site = str(site_file(tmp_path, server.port))
    code, _, err = await probe("-c", site, "cellar")
    assert code == 2 and "no point named 'cellar'" in err and "room" in err
    code, _, err = await probe("-c", site, "room", "--set", "on", "--yes")
    assert code == 2 and "is an input" in err
    code, _, err = await probe("-c", str(tmp_path / "absent.yaml"), "room")
    assert code == 2 and "absent.yaml" in err and "Traceback" not in err


async def test_probe_unreachable_device(modbus_tcp_server: Any, tmp_path: Path) -> None:
    server = await modbus_tcp_server()
    await server.stop()
    code, _, err = await probe("-c", str(site_file(tmp_path, server.port)), "room")
    assert code == 1
    assert f"modbus-tcp://127.0.0.1:{server.port}" in err and "Traceback" not in err


@pytest.mark.needs_mosquitto
async def test_probe_mqtt_input_and_output(mosquitto: Any, tmp_path: Path) -> None:
    host, port = mosquitto
    site = str(site_file(tmp_path, 1, broker_port=port))

    async def fan_module() -> None:
        async with aiomqtt.Client(host, port) as client:
            await client.subscribe("bench/fan/set", qos=1)
            async for message in client.messages:
                await client.publish("bench/fan", message.payload, qos=1, retain=True)

    async with aiomqtt.Client(host, port) as sensor:
        await sensor.publish("bench/hall", '{"air": {"temp": "19.5"}}', qos=1, retain=True)
    code, out, err = await probe("-c", site, "hall")
    assert code == 0, err
    assert "19.5 °C" in out and "reliability  ok" in out and "air" in out

    module = asyncio.create_task(fan_module())
    try:
        await asyncio.sleep(0.3)
        code, out, err = await probe("-c", site, "fan", "--set", "on", "--yes")
        assert code == 0, out + err
        assert "result       ok" in out
    finally:
        module.cancel()
        await asyncio.gather(module, return_exceptions=True)


@pytest.mark.needs_mosquitto
async def test_probe_mqtt_state_topic_silent(mosquitto: Any, tmp_path: Path) -> None:
    _host, port = mosquitto
    site = str(site_file(tmp_path, 1, broker_port=port))
    code, out, _ = await probe("-c", site, "fan", "--set", "off", "--yes")
    assert code == 1 and "mismatch" in out and "no state within" in out


async def test_probe_broker_unreachable(tmp_path: Path) -> None:
    import socket

    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        free = sock.getsockname()[1]
    code, _, err = await probe("-c", str(site_file(tmp_path, 1, broker_port=free)), "hall")
    assert code == 1 and f"mqtt://127.0.0.1:{free}" in err and "Traceback" not in err


@pytest.mark.parametrize(
    ("broker_extra", "words"),
    [
        (
            "tls: {ca_file: %(dir)s/broker-ca.pem}",
            "mqtts://127.0.0.1:8883: broker.tls.ca_file %(dir)s/broker-ca.pem: no such file",
        ),
        (
            "username: roomloop\n  password_file: %(dir)s/absent-secret",
            "broker.password_file: no such file",
        ),
    ],
)
async def test_probe_of_an_mqtt_point_with_a_missing_broker_file_exits_2(
    tmp_path: Path, broker_extra: str, words: str
) -> None:
    site = site_file(tmp_path, 1, broker_port=8883)
    text = site.read_text(encoding="utf-8").replace(
        "  port: 8883\n", "  port: 8883\n  " + broker_extra % {"dir": tmp_path} + "\n"
    )
    site.write_text(text, encoding="utf-8")
    code, out, err = await probe("-c", str(site), "hall")
    assert code == 2, out + err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("roomloop probe: "), err
    assert words % {"dir": tmp_path} in lines[0]
    assert out == ""  # refused before connecting
