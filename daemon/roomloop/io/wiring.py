"""From a site to its field I/O objects: one :class:`ModbusLink` per link, one :class:`MqttPoints`.

The service (and ``demo``) call these instead of sorting points by hand, and
get them back typed as the :class:`InputSource` / :class:`OutputSink` shapes,
which mypy checks the classes against here.
"""

from __future__ import annotations

import time
from collections.abc import Callable

from roomloop.config.models import ModbusInput, ModbusOutput, MqttInput, MqttOutput, Site
from roomloop.io.modbus import ModbusLink
from roomloop.io.mqtt import MqttPoints
from roomloop.io.ports import InputSource, OutputSink


def modbus_links(site: Site, *, clock: Callable[[], float] = time.time) -> list[ModbusLink]:
    """One link object per configured Modbus link with its points (links without points too)."""
    links: list[ModbusLink] = []
    for link in site.links:
        inputs = [p for p in site.points if isinstance(p, ModbusInput) and p.link == link.name]
        outputs = [p for p in site.points if isinstance(p, ModbusOutput) and p.link == link.name]
        links.append(ModbusLink(link, inputs, outputs, clock=clock))
    return links


def mqtt_points(site: Site, *, clock: Callable[[], float] = time.time) -> MqttPoints:
    """The site's MQTT input and output points (empty when it has none)."""
    inputs = [p for p in site.points if isinstance(p, MqttInput)]
    outputs = [p for p in site.points if isinstance(p, MqttOutput)]
    return MqttPoints(inputs, outputs, clock=clock)


def input_sources(links: list[ModbusLink], mqtt: MqttPoints) -> list[InputSource]:
    """Everything that delivers input samples, for the service's zone ticks."""
    return [*links, mqtt]


def output_sinks(links: list[ModbusLink], mqtt: MqttPoints) -> dict[str, OutputSink]:
    """Output point name -> the object that switches it."""
    sinks: dict[str, OutputSink] = {}
    candidates: list[OutputSink] = [*links, mqtt]
    for sink in candidates:
        for name in sink.output_names():
            sinks[name] = sink
    return sinks
