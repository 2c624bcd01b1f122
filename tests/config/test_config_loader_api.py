"""The loader's reusable pieces: ``load_yaml_document`` and ``problems_from_validation_error``.

The plant-file loader calls both; these tests pin their behaviour.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest
from pydantic import TypeAdapter, ValidationError

from roomloop.config.loader import (
    LineMap,
    format_path,
    load_site,
    load_yaml_document,
    problems_from_validation_error,
    site_from_data,
)
from roomloop.config.models import ModbusInput, Point
from roomloop.errors import ConfigError

DOC = """\
name: test-room
room:
  capacity_j_per_k: 2.0e6
  loss_w_per_k: 120
points:
  - {type: modbus-input, name: t, link: io, address: 70000}
  - type: mqtt-output
    name: r
    command_topic: relays/r
    on_payload: on
    off_payload: off
schedule:
  - {at: 06:30, read_back: off}
"""


def _write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "doc.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def test_document_and_lines(tmp_path: Path) -> None:
    data, lines = load_yaml_document(_write(tmp_path, DOC))
    # 2.0e6 is a string to YAML 1.1 (no sign in the exponent); here it is a number.
    assert data["room"] == {"capacity_j_per_k": 2.0e6, "loss_w_per_k": 120}
    assert lines.line(("room", "loss_w_per_k")) == 4
    assert lines.line(("points", 1, "command_topic")) == 9
    assert lines.line(("points", 1, "no_such_key")) == 7  # falls back to the parent item
    assert lines.value_line(("room",)) == 3  # the mapping's value starts below its key
    # YAML 1.1 traps defused: a time stays text, on/off stay text (pydantic still reads bools).
    assert data["schedule"][0]["at"] == "06:30"
    assert data["points"][1]["on_payload"] == "on"
    assert data["schedule"][0]["read_back"] == "off"


def test_duplicate_keys_are_refused_with_both_lines(tmp_path: Path) -> None:
    path = _write(tmp_path, "a: 1\nb:\n  c: 2\n  c: 3\na: 4\n")
    with pytest.raises(ConfigError) as caught:
        load_yaml_document(path)
    shown = [str(p) for p in caught.value.problems]
    assert shown == [
        f"{path}:4: b.c: duplicate key 'c' (first given at line 3); give each key once",
        f"{path}:5: a: duplicate key 'a' (first given at line 1); give each key once",
    ]


def test_validation_errors_lose_union_tags(tmp_path: Path) -> None:
    path = _write(tmp_path, DOC)
    data, lines = load_yaml_document(path)
    adapter: TypeAdapter[object] = TypeAdapter(Point)
    with pytest.raises(ValidationError) as caught:
        adapter.validate_python(data["points"][0])
    problems = problems_from_validation_error(
        caught.value, str(path), lines, ("points", 0), data=data["points"][0], schema=Point
    )
    assert [str(p) for p in problems] == [
        f"{path}:6: points[0].address: input should be less than or equal to 65535 (got 70000)"
    ]
    # Without the data the tags are recognised by their shape.
    problems = problems_from_validation_error(caught.value, str(path), lines, ("points", 0))
    assert problems[0].path == "points[0].address"


def test_format_path() -> None:
    assert format_path(("zones", 1, "tuning", "min_on_s")) == "zones[1].tuning.min_on_s"
    assert format_path(()) == ""
    assert LineMap().line(("x",)) is None


def test_site_from_data_without_lines() -> None:
    data: dict[str, Any] = {
        "site": {"name": "code-built"},
        "links": [{"name": "io", "type": "modbus-tcp", "host": "127.0.0.1"}],
        "points": [
            {"name": "t", "type": "modbus-input", "link": "io", "address": 0},
            {"name": "r", "type": "modbus-output", "link": "io", "address": 0},
        ],
        "zones": [{"name": "z", "inputs": ["t"], "output": "r", "heating": "electric"}],
    }
    site = site_from_data(data, "<demo>")
    assert site.zone("z").effective.cycle_rate_cph == 9
    data["zones"][0]["output"] = "t"
    with pytest.raises(ConfigError) as caught:
        site_from_data(data, "<demo>")
    assert [str(p) for p in caught.value.problems] == [
        "<demo>: zones[z].output: 't' is an input (modbus-input); "
        "a zone's output must be a relay output"
    ]


def test_fahrenheit_site_holds_celsius(tmp_path: Path) -> None:
    path = _write(
        tmp_path,
        "site: {name: f-site, units: F}\n"
        "links: [{name: io, type: modbus-tcp, host: 127.0.0.1}]\n"
        "points:\n"
        "  - {name: t, type: modbus-input, link: io, address: 0, valid_range: [14, 122]}\n"
        "  - {name: r, type: modbus-output, link: io, address: 0}\n"
        "zones:\n"
        "  - name: z\n"
        "    inputs: [t]\n"
        "    output: r\n"
        "    heating: hydronic\n"
        "    setpoints: {comfort: 68, standby: 64.4, economy: 60.8, protection: 44.6}\n"
        "    limits: {min: 41, max: 82.4}\n",
    )
    site = load_site(path)
    zone = site.zone("z")
    assert zone.setpoints.comfort == pytest.approx(20.0)
    assert zone.limits.max == pytest.approx(28.0)
    point = site.point("t")
    assert isinstance(point, ModbusInput)
    assert point.valid_range == pytest.approx((-10.0, 50.0))


def test_a_number_that_loses_its_text_keeps_it_and_the_site_gets_plain_numbers(
    tmp_path: Path,
) -> None:
    # 0x10 is 16 and 21.50 is 21.5: the document keeps each text (for hints),
    # the values stay numbers, and the built site holds plain int and float.
    path = _write(
        tmp_path,
        "site: {name: texts}\n"
        "links: [{name: io, type: modbus-tcp, host: 127.0.0.1}]\n"
        "points:\n"
        "  - {name: t, type: modbus-input, link: io, address: 0x10}\n"
        "  - {name: r, type: modbus-output, link: io, address: 1}\n"
        "zones:\n"
        "  - {name: z, inputs: [t], output: r, heating: electric, setpoints: {comfort: 21.50}}\n",
    )
    data, _lines = load_yaml_document(path)
    address = data["points"][0]["address"]
    comfort = data["zones"][0]["setpoints"]["comfort"]
    assert (address, comfort) == (16, 21.5)
    assert (address.yaml_text, comfort.yaml_text) == ("0x10", "21.50")
    assert not hasattr(data["points"][1]["address"], "yaml_text")  # 1 lost nothing
    site = load_site(path)
    point = site.point("t")
    assert isinstance(point, ModbusInput)
    assert type(point.address) is int and point.address == 16
    assert type(site.zone("z").setpoints.comfort) is float
