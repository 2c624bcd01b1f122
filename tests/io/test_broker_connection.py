"""Broker connection settings: password, TLS, last will; a refused connection keeps trying."""

from __future__ import annotations

import asyncio
import contextlib
import socket
import ssl
import time
from pathlib import Path
from typing import Any

import aiomqtt
import pytest
from structlog.testing import capture_logs

from roomloop.config.loader import load_site
from roomloop.config.models import Broker, Tls
from roomloop.errors import BrokerError
from roomloop.io.broker import (
    BrokerConnection,
    BrokerSetupError,
    LastWill,
    check_broker_files,
    client_options,
    read_password,
)


def free_tcp_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


def test_password_from_file_first_line(tmp_path: Path) -> None:
    secret = tmp_path / "pw"
    secret.write_text("s3cret\nignored\n", encoding="utf-8")
    broker = Broker(host="127.0.0.1", username="roomloop", password_file=str(secret))
    assert read_password(broker) == "s3cret"
    assert client_options(broker)["password"] == "s3cret"


def test_password_from_environment() -> None:
    broker = Broker(host="127.0.0.1", username="roomloop", password_env="RL_TEST_PW")
    assert read_password(broker, {"RL_TEST_PW": "x1"}) == "x1"
    with pytest.raises(BrokerError, match=r"broker\.password_env: ") as caught:
        read_password(broker, {})
    assert "RL_TEST_PW" not in str(caught.value)  # the key only, never its value


def test_missing_password_file_is_a_clear_error(tmp_path: Path) -> None:
    broker = Broker(host="127.0.0.1", username="u", password_file=str(tmp_path / "absent"))
    with pytest.raises(BrokerSetupError, match=r"broker.password_file: no such file"):
        read_password(broker)


def test_empty_password_variable_names_the_key() -> None:
    broker = Broker(host="127.0.0.1", username="u", password_env="RL_TEST_PW")
    with pytest.raises(BrokerSetupError) as caught:
        check_broker_files(broker, {"RL_TEST_PW": ""})
    assert "broker.password_env: the environment variable it names is not set" in str(
        caught.value
    )


@pytest.mark.parametrize("key", ["ca_file", "cert_file", "key_file"])
def test_missing_tls_file_names_the_key_and_the_file(tmp_path: Path, key: str) -> None:
    files = {name: tmp_path / f"{name}.pem" for name in ("ca_file", "cert_file", "key_file")}
    for name, path in files.items():
        if name != key:
            path.write_text("not checked for content here\n")
    broker = Broker(
        host="192.0.2.10", port=8883, tls=Tls(**{name: str(p) for name, p in files.items()})
    )
    with pytest.raises(BrokerSetupError) as caught:
        check_broker_files(broker)
    assert str(caught.value) == (
        f"mqtts://192.0.2.10:8883: broker.tls.{key} {files[key]}: no such file"
    )
    with pytest.raises(BrokerSetupError):
        client_options(broker)  # nothing is handed to the TLS library without its files


def test_tls_folder_instead_of_a_file_is_named(tmp_path: Path) -> None:
    broker = Broker(host="127.0.0.1", tls=Tls(ca_file=str(tmp_path)))
    with pytest.raises(BrokerSetupError, match=r"broker.tls.ca_file .*: is a folder, not a file"):
        check_broker_files(broker)


async def test_the_connection_loop_logs_the_missing_file_by_name(tmp_path: Path) -> None:
    # The loop itself goes on retrying (a file being rotated may come back); the reason it logs
    # names the key and the file, not a bare "[Errno 2]".
    missing = tmp_path / "broker-ca.pem"
    broker = Broker(host="127.0.0.1", port=free_tcp_port(), tls=Tls(ca_file=str(missing)))
    conn = BrokerConnection(broker, backoff_min_s=0.05, backoff_max_s=0.1)
    with capture_logs() as events:
        task = asyncio.create_task(conn.run(lambda _message: None))
        await asyncio.sleep(0.3)
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task
    reasons = [e["reason"] for e in events if e["event"] == "broker.disconnected"]
    assert reasons, "the loop logged no failed connection"
    assert reasons[0] == (
        f"mqtts://127.0.0.1:{broker.port}: broker.tls.ca_file {missing}: no such file"
    )


def test_tls_and_last_will_options(tmp_path: Path) -> None:
    broker = Broker(
        host="127.0.0.1",
        port=8883,
        client_id="rl-1",
        keepalive_s=15,
        tls=Tls(ca_file=str(tmp_path / "ca.pem"), insecure=True),
    )
    (tmp_path / "ca.pem").write_text("checked to exist, read by the TLS library\n")
    options = client_options(broker, LastWill("roomloop/x/status", "offline"))
    assert options["tls_params"].ca_certs == str(tmp_path / "ca.pem")
    assert options["tls_params"].cert_reqs == ssl.CERT_REQUIRED
    assert options["tls_insecure"] is True
    assert options["identifier"] == "rl-1" and options["keepalive"] == 15
    will = options["will"]
    assert isinstance(will, aiomqtt.Will)
    assert (will.topic, will.payload, will.qos, will.retain) == (
        "roomloop/x/status",
        "offline",
        1,
        True,
    )
    assert "tls_params" not in client_options(Broker(host="127.0.0.1"))


def test_tls_without_a_port_is_mqtt_over_tls_on_8883(tmp_path: Path) -> None:
    """8883 is MQTT over TLS's registered port (IANA "secure-mqtt", recalled from memory):
    a site that turns TLS on and gives no port must not knock at plain MQTT's 1883."""
    site = tmp_path / "site.yaml"
    site.write_text(
        "site: {name: tls-lodge}\n"
        "broker: {host: 127.0.0.1, tls: {}}\n"
        "links: [{name: io, type: modbus-tcp, host: 127.0.0.1}]\n"
        "points:\n"
        "  - {name: t, type: modbus-input, link: io, address: 0}\n"
        "  - {name: r, type: modbus-output, link: io, address: 0}\n"
        "zones: [{name: z, inputs: [t], output: r, heating: electric}]\n"
    )
    loaded = load_site(site).broker
    assert loaded is not None and loaded.port == 8883
    assert Broker(host="127.0.0.1").port == 1883  # plain MQTT
    assert Broker(host="127.0.0.1", port=1883, tls=Tls()).port == 1883  # as written


async def test_unreachable_broker_keeps_retrying_with_backoff() -> None:
    broker = Broker(host="127.0.0.1", port=free_tcp_port())
    conn = BrokerConnection(broker, backoff_min_s=0.05, backoff_max_s=0.1)
    attempts = 0
    original = conn.make_client

    def counting() -> aiomqtt.Client:
        nonlocal attempts
        attempts += 1
        return original()

    conn.make_client = counting  # type: ignore[method-assign]

    async def on_message(_message: Any) -> None:
        raise AssertionError("no message can arrive")

    task = asyncio.create_task(conn.run(on_message))
    await asyncio.sleep(0.6)
    assert not task.done(), "the loop must not end on a refused connection"
    task.cancel()
    with contextlib.suppress(asyncio.CancelledError):
        await task
    assert attempts >= 3 and conn.connections == 0


WILL_CLIENT = """
import asyncio, sys
from roomloop.config.models import Broker
from roomloop.io.broker import BrokerConnection, LastWill

async def main():
    conn = BrokerConnection(Broker(host="127.0.0.1", port=int(sys.argv[1])),
                            will=LastWill("bench/status", "offline"))
    async def on_connect(client):
        await client.publish("bench/status", "online", qos=1, retain=True)
        print("up", flush=True)
    await conn.run(lambda message: None, on_connect=on_connect)

asyncio.run(main())
"""


@pytest.mark.needs_mosquitto
async def test_last_will_published_when_the_process_dies(mosquitto: Any) -> None:
    import sys

    host, port = mosquitto
    process = await asyncio.create_subprocess_exec(
        sys.executable, "-c", WILL_CLIENT, str(port), stdout=asyncio.subprocess.PIPE
    )
    try:
        assert process.stdout is not None
        lines: list[bytes] = []
        while b"up\n" not in lines:  # structlog's default also writes to stdout
            line = await asyncio.wait_for(process.stdout.readline(), 10)
            assert line, "the client ended before connecting"
            lines.append(line)
        async with aiomqtt.Client(host, port) as watcher:
            await watcher.subscribe("bench/status", qos=1)
            seen: list[bytes] = []

            async def collect() -> None:
                async for message in watcher.messages:
                    seen.append(bytes(message.payload))
                    if seen[-1] == b"offline":
                        return

            collector = asyncio.create_task(collect())
            await asyncio.sleep(0.2)
            process.kill()  # no clean disconnect: the broker publishes the will
            await asyncio.wait_for(collector, 10)
        assert seen == [b"online", b"offline"]
    finally:
        if process.returncode is None:
            process.kill()
        await process.wait()


@pytest.mark.needs_mosquitto
async def test_a_broker_that_returns_is_reconnected_without_waiting_out_the_long_pause(
    mosquitto: Any,
) -> None:
    mosquitto.stop()  # down long enough that the pause has grown to its maximum
    conn = BrokerConnection(
        Broker(host=mosquitto.host, port=mosquitto.port), backoff_min_s=30.0, backoff_max_s=30.0
    )
    task = asyncio.create_task(conn.run(lambda _message: None))
    try:
        await asyncio.sleep(0.5)  # the first attempt failed: a 30 s pause has begun
        assert conn.connections == 0
        mosquitto.start()
        returned = time.monotonic()
        await asyncio.wait_for(conn.connected.wait(), 10.0)  # far less than the 30 s pause
        assert time.monotonic() - returned < 10.0 and conn.connections == 1
    finally:
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task
