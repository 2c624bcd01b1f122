"""A site's points sorted onto its links and the MQTT points."""

from __future__ import annotations

from pathlib import Path

from roomloop.config.loader import load_site
from roomloop.io.modbus import ModbusLink
from roomloop.io.mqtt import MqttPoints
from roomloop.io.ports import InputSource, OutputSink
from roomloop.io.wiring import input_sources, modbus_links, mqtt_points, output_sinks

SITE = """\
site: {name: wiring-bench}
links:
  - {name: bus, type: modbus-rtu, device: /dev/ttyS9}
  - {name: net, type: modbus-tcp, host: 127.0.0.1}
broker: {host: 127.0.0.1}
points:
  - {name: a, type: modbus-input, link: bus, address: 0}
  - {name: b, type: modbus-input, link: net, address: 0}
  - {name: c, type: mqtt-input, topic: x/c}
  - {name: ra, type: modbus-output, link: bus, address: 0}
  - {name: rc, type: mqtt-output, command_topic: x/rc/set}
zones:
  - {name: one, inputs: [a, c], output: ra, heating: hydronic}
  - {name: two, inputs: [b], output: rc, heating: electric}
"""


def test_points_land_on_their_links(tmp_path: Path) -> None:
    path = tmp_path / "site.yaml"
    path.write_text(SITE, encoding="utf-8")
    site = load_site(path)
    links = modbus_links(site)
    assert [(link.name, link.input_names(), link.output_names()) for link in links] == [
        ("bus", ("a",), ("ra",)),
        ("net", ("b",), ()),
    ]
    mqtt = mqtt_points(site)
    assert (mqtt.input_names(), mqtt.output_names(), mqtt.topics()) == (("c",), ("rc",), ("x/c",))
    sources = input_sources(links, mqtt)
    assert all(isinstance(s, InputSource) for s in sources)
    sinks = output_sinks(links, mqtt)
    assert isinstance(sinks["ra"], ModbusLink) and isinstance(sinks["rc"], MqttPoints)
    assert all(isinstance(s, OutputSink) for s in sinks.values())
