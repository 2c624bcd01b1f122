"""Property: generated valid sites load, and dump -> YAML -> reload gives the same site.

The dump uses the site's units (``model_dump(context={"units": ...})``), so a Fahrenheit
site is written back in Fahrenheit; reloading converts again. Celsius round trips are
exact; Fahrenheit ones agree to floating-point rounding of the two conversions.
"""

from __future__ import annotations

import math
import tempfile
from pathlib import Path
from typing import Any

import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from roomloop.config.loader import load_site
from roomloop.config.models import Site

NAME = st.from_regex(r"[a-z][a-z0-9-]{0,12}", fullmatch=True)
HEATING = st.sampled_from(["forced-air", "hydronic", "underfloor", "electric", "steam"])


def _temperature(celsius: float, units: str) -> float:
    return round(celsius * 9 / 5 + 32, 6) if units == "F" else celsius


def _delta(kelvin: float, units: str) -> float:
    return round(kelvin * 9 / 5, 6) if units == "F" else kelvin


@st.composite
def sites(draw: st.DrawFn) -> dict[str, Any]:
    units = draw(st.sampled_from(["C", "F"]))
    links: list[dict[str, Any]] = [{"name": "tcp-io", "type": "modbus-tcp", "host": "127.0.0.1"}]
    if draw(st.booleans()):
        links.append(
            {
                "name": "bus",
                "type": "modbus-rtu",
                "device": "/dev/ttyUSB0",
                "baud": draw(st.sampled_from([9600, 19200, 38400])),
                "parity": draw(st.sampled_from(["N", "E", "O"])),
                "stop_bits": draw(st.sampled_from([1, 2])),
            }
        )
    use_mqtt = draw(st.booleans())
    points: list[dict[str, Any]] = []
    zones: list[dict[str, Any]] = []
    address = 0
    for z in range(draw(st.integers(1, 3))):
        inputs = []
        for i in range(draw(st.integers(1, 2))):
            name = f"z{z}-t{i}"
            inputs.append(name)
            if use_mqtt and draw(st.booleans()):
                point: dict[str, Any] = {"name": name, "type": "mqtt-input", "topic": f"s/{name}"}
                if draw(st.booleans()):
                    point["field"] = "air.temp"
            else:
                point = {
                    "name": name,
                    "type": "modbus-input",
                    "link": draw(st.sampled_from([link["name"] for link in links])),
                    "unit_id": draw(st.integers(1, 247)),
                    "table": draw(st.sampled_from(["input", "holding"])),
                    "address": draw(st.integers(0, 65000)),
                    "data_type": draw(st.sampled_from(["int16", "uint16", "int32", "float32"])),
                    "scale": draw(st.sampled_from([1.0, 0.1, 0.01])),
                    "word_order": draw(
                        st.sampled_from(["big", "little", "ABCD", "CDAB", "BADC", "DCBA"])
                    ),
                    "sentinels": draw(st.lists(st.integers(0, 65535), max_size=2)),
                }
            low = draw(st.integers(-40, 0))
            point["valid_range"] = [_temperature(low, units), _temperature(low + 80, units)]
            points.append(point)
        out = f"z{z}-relay"
        if use_mqtt and draw(st.booleans()):
            points.append(
                {
                    "name": out,
                    "type": "mqtt-output",
                    "command_topic": f"r/{out}/set",
                    "on_payload": draw(st.sampled_from(["on", "ON", "1", "true"])),
                    "off_payload": "off",
                }
            )
        else:
            points.append(
                {
                    "name": out,
                    "type": "modbus-output",
                    "link": "tcp-io",
                    "unit_id": 1,
                    "table": "coil",
                    "address": address,
                }
            )
            address += 1
        protection = draw(st.sampled_from([5.0, 6.5, 8.0]))
        economy = protection + draw(st.sampled_from([4.0, 7.5, 9.0]))
        standby = economy + draw(st.sampled_from([0.0, 1.5, 3.0]))
        comfort = standby + draw(st.sampled_from([0.0, 0.5, 2.0]))
        zone: dict[str, Any] = {
            "name": f"zone-{z}",
            "inputs": inputs,
            "output": out,
            "heating": draw(HEATING),
            "combine": draw(st.sampled_from(["mean", "median", "min", "first-ok"])),
            "setpoints": {
                "comfort": _temperature(comfort, units),
                "standby": _temperature(standby, units),
                "economy": _temperature(economy, units),
                "protection": _temperature(protection, units),
            },
            "limits": {"min": _temperature(5.0, units), "max": _temperature(28.0, units)},
        }
        if draw(st.booleans()):
            diff = draw(st.sampled_from([0.2, 0.5, 1.0]))
            cph = draw(st.sampled_from([1.0, 2.0, 3.0]))
            zone["tuning"] = {
                "differential_k": _delta(diff, units),
                "anticipator_gain_k": _delta(diff + draw(st.sampled_from([0.3, 1.0, 3.0])), units),
                "cycle_rate_cph": cph,
                "min_on_s": draw(st.sampled_from([0, 60, 300, 500])),
                "min_off_s": draw(st.sampled_from([0, 60, 300, 500])),
                "max_cycles_per_hour": draw(st.integers(3, 12)),
                "droop_compensation": draw(st.booleans()),
            }
        if draw(st.booleans()):
            # a cooling call: ASHRAE Standard 90.1's dead band (at least 3 K / 5 F) kept in auto
            cool = f"z{z}-cool"
            points.append({"name": cool, "type": "modbus-output", "link": "tcp-io",
                           "address": address})
            address += 1
            c_comfort = comfort + draw(st.sampled_from([3.0, 4.0]))
            c_standby = max(c_comfort, standby + 3.0)
            c_economy = max(c_standby, economy + 3.0)
            cooling_type = draw(st.sampled_from(["direct-expansion", "chilled-water"]))
            zone["cooling"] = {
                "output": cool,
                "type": cooling_type,
                "setpoints": {
                    "comfort": _temperature(c_comfort, units),
                    "standby": _temperature(c_standby, units),
                    "economy": _temperature(c_economy, units),
                },
            }
            zone["changeover"] = {
                "mode": draw(st.sampled_from(["heat", "cool", "auto"])),
                # a compressor that heats and cools rests at least 180 s before it reverses
                # (check's compressor protection; common practice, no source)
                "min_changeover_s": draw(
                    st.sampled_from([300, 900] if cooling_type == "direct-expansion"
                                    else [0, 300, 900])
                ),
            }
            if draw(st.booleans()):
                valve = f"z{z}-valve"
                points.append({"name": valve, "type": "modbus-output", "link": "tcp-io",
                               "address": address})
                address += 1
                zone["changeover"]["output"] = valve
                zone["changeover"]["energised_in"] = draw(st.sampled_from(["cooling", "heating"]))
        if draw(st.booleans()):
            zone["program"] = [
                {"days": "mon-fri", "at": "06:30", "level": "comfort"},
                {"days": ["sat", "sun"], "at": "9:00", "level": "standby"},
                {"days": "all", "at": "22:00", "level": "economy"},
            ]
        zones.append(zone)
    doc: dict[str, Any] = {
        "site": {
            "name": draw(NAME),
            "units": units,
            "timezone": draw(st.sampled_from(["UTC", "Europe/Vienna"])),
        },
        "links": links,
        "points": points,
        "zones": zones,
    }
    if use_mqtt or draw(st.booleans()):
        doc["broker"] = {"host": "127.0.0.1", "username": "u", "password_env": "ROOMLOOP_TEST_PW"}
    return doc


def _close(a: Any, b: Any) -> bool:
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(_close(a[k], b[k]) for k in a)
    if isinstance(a, list | tuple) and isinstance(b, list | tuple):
        return len(a) == len(b) and all(_close(x, y) for x, y in zip(a, b, strict=True))
    if isinstance(a, float) or isinstance(b, float):
        return math.isclose(a, b, rel_tol=1e-12, abs_tol=1e-9)
    return bool(a == b)


def _write(directory: str, name: str, data: dict[str, Any]) -> Path:
    path = Path(directory) / name
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


def _dump(site: Site) -> dict[str, Any]:
    dumped: dict[str, Any] = site.model_dump(mode="json", context={"units": site.site.units})
    return dumped


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(sites())
def test_generated_sites_load_and_round_trip(doc: dict[str, Any]) -> None:
    with tempfile.TemporaryDirectory() as directory:
        first = load_site(_write(directory, "site.yaml", doc))
        assert len(first.zones) == len(doc["zones"])
        # What the user typed comes back in the user's units.
        typed = doc["zones"][0]["setpoints"]["comfort"]
        assert math.isclose(_dump(first)["zones"][0]["setpoints"]["comfort"], typed, abs_tol=1e-9)
        second = load_site(_write(directory, "again.yaml", _dump(first)))
    if first.site.units == "C":
        assert second == first
    else:
        assert _close(second.model_dump(), first.model_dump())
        assert all(
            _close(a.effective.model_dump(), b.effective.model_dump())
            for a, b in zip(first.zones, second.zones, strict=True)
        )
        assert all(
            (a.cooling_effective is None) == (b.cooling_effective is None)
            and (
                a.cooling_effective is None
                or _close(a.cooling_effective.model_dump(), b.cooling_effective.model_dump())  # type: ignore[union-attr]
            )
            for a, b in zip(first.zones, second.zones, strict=True)
        )
