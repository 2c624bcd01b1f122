"""Benchmark: the pure parts of a heat source at estate scale, against a zone step.

Run: ``python tests/bench/source_step.py [--zones N] [--hours H]``. One source serves ``N``
remote zones (default 100: half of the issue's 200-zone estate, one of its two sources).
On a simulated clock with a 10 s tick, every zone's demand follows a cycle of its own (3
cycles an hour, phases spread), and, like ``roomloop run`` publishes, each zone sends its
plain demand on every change and its state JSON every 60 s. Measured in this process:

- the cost of hearing one message (``RemoteBook.heard``) and of one source tick
  (``RemoteBook.demands`` + ``SourceLogic.step``), against one zone controller step on the
  same machine (the ratio: how many zone steps one source tick costs);
- the messages per zone-hour a source hears.

The daemon-level figures of the issue's ``estate.py`` (8 daemons, a broker, demand-to-source
latency, RSS, a broker restart) need the service wiring; this bench prices the logic those
daemons would run. (In the logic alone a message heard before a tick counts at that tick.)
"""

from __future__ import annotations

import argparse
import json
import time

from roomloop.core import PointSample, ZoneController, ZoneInputs, ZoneSettings
from roomloop.core.source import SourceInputs, SourceLogic, SourceSettings
from roomloop.core.source_topics import RemoteBook, RemoteTopics

TICK_S = 10.0
T0 = 1_767_225_600.0


def _zone_step_us(steps: int = 20000) -> float:
    controller = ZoneController(ZoneSettings.for_heating_type("hydronic"))
    state = controller.initial_state(T0)
    start = time.perf_counter()
    for k in range(1, steps + 1):
        now = T0 + k * TICK_S
        value = 19.9 + 0.3 * ((k // 60) % 2)
        inputs = ZoneInputs(samples=(PointSample("temperature", value, now),))
        state, _ = controller.step(state, inputs, now)
    return (time.perf_counter() - start) / steps * 1e6


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--zones", type=int, default=100)
    parser.add_argument("--hours", type=float, default=4.0)
    args = parser.parse_args()
    zones = tuple(f"site{i // 25}/zone{i}" for i in range(args.zones))
    settings = SourceSettings(name="boiler", zones=zones)
    logic = SourceLogic(settings)
    topics = RemoteTopics.for_zones(zones)
    prefix = {z: f"roomloop/{z.split('/')[0]}/zone/{z.split('/')[1]}" for z in zones}
    book = RemoteBook()
    for site in {z.split("/")[0] for z in zones}:
        book = book.heard(topics, f"roomloop/{site}/status", "online", T0)
    state = logic.initial_state(T0)
    period = 3600.0 / 3
    calling = dict.fromkeys(zones, False)
    messages = 0
    heard_s = 0.0
    tick_s_spent = 0.0
    ticks = round(args.hours * 3600 / TICK_S)
    for k in range(ticks):
        now = T0 + k * TICK_S
        batch: list[tuple[str, str]] = []
        for i, zone in enumerate(zones):
            phase = (now / period + i / len(zones)) % 1.0
            want = phase < 0.4
            if want != calling[zone]:
                calling[zone] = want
                batch.append((f"{prefix[zone]}/demand", "true" if want else "false"))
            if (k + i) % 6 == 0:
                batch.append((f"{prefix[zone]}/state",
                              json.dumps({"demand": want, "reason": "cut-in"})))
        start = time.perf_counter()
        for topic, payload in batch:
            book = book.heard(topics, topic, payload, now - TICK_S / 2)
        heard_s += time.perf_counter() - start
        messages += len(batch)
        start = time.perf_counter()
        state, _ = logic.step(state, SourceInputs(book.demands(zones)), now)
        tick_s_spent += time.perf_counter() - start
    zone_us = _zone_step_us()
    per_msg_us = heard_s / messages * 1e6
    per_tick_us = tick_s_spent / ticks * 1e6
    print(f"source serving {len(zones)} remote zones, {args.hours:g} h at a {TICK_S:g} s tick")
    print(f"  hearing one message: {per_msg_us:.1f} us")
    print(f"  one source tick (book -> demands -> step): {per_tick_us:.0f} us "
          f"({per_tick_us / len(zones):.2f} us per zone)")
    print(f"  one zone controller step (baseline, same process): {zone_us:.1f} us")
    print(f"  ratio: one source tick = {per_tick_us / zone_us:.1f} zone steps")
    print(f"  messages heard per zone-hour: {messages / len(zones) / args.hours:.1f}")


if __name__ == "__main__":
    main()
