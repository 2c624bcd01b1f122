"""The heat_sources section: defaults by kind, the example site, check's output, the docs."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from roomloop.cli import main
from roomloop.config.loader import load_site
from roomloop.config.models import SOURCE_DEFAULTS, SOURCE_TIMING_KEYS
from roomloop.core.source import SourceSettings

REPO = Path(__file__).resolve().parents[2]
EXAMPLE = REPO / "config" / "example.yaml"
DOCS = REPO / "docs" / "configuration.md"

SITE = """\
site: {name: west-block}
links: [{name: io, type: modbus-tcp, host: 127.0.0.1}]
broker: {host: 127.0.0.1, topic_prefix: estate/west}
points:
  - {name: t1, type: modbus-input, link: io, address: 0}
  - {name: v1, type: modbus-output, link: io, address: 0}
  - {name: hp, type: modbus-output, link: io, address: 1}
zones:
  - {name: hall, inputs: [t1], output: v1, heating: underfloor}
heat_sources:
  - name: heat-pump
    kind: heat-pump
    output: hp
    zones: [hall, north-wing/office, annex/loft]
    timing: {min_off_s: 600}
    remote_stale: {policy: assume-calling, timeout_s: 120}
    remote_prefixes: {annex: estate/annex}
"""


def test_kind_defaults_fill_what_the_file_leaves_out(tmp_path: Path) -> None:
    path = tmp_path / "site.yaml"
    path.write_text(SITE)
    site = load_site(path)
    (source,) = site.heat_sources
    assert source.origins["min_off_s"] == "file"
    assert source.origins["min_on_s"] == "kind heat-pump"
    settings = SourceSettings.from_config(source)
    assert settings.min_off_s == 600
    for key in SOURCE_TIMING_KEYS:
        if key != "min_off_s":
            assert getattr(settings, key) == SOURCE_DEFAULTS["heat-pump"][key]
    assert settings.zones == ("hall", "north-wing/office", "annex/loft")
    assert settings.remote_zones == ("north-wing/office", "annex/loft")
    assert not settings.has_pump
    assert (settings.stale_policy, settings.stale_timeout_s) == ("assume-calling", 120)
    assert source.remote_prefix("annex") == "estate/annex"
    assert source.remote_prefix("north-wing") == "roomloop/north-wing"


def test_check_prints_the_sources(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "site.yaml"
    path.write_text(SITE)
    assert main(["check", "-c", str(path)]) == 0
    out = capsys.readouterr().out
    assert "heat-pump: heat-pump, enable hp, no pump output" in out
    assert "serves: hall, north-wing/office, annex/loft" in out
    assert "north-wing/office: heard on roomloop/north-wing/zone/office/demand" in out
    assert "annex/loft: heard on estate/annex/zone/loft/demand" in out
    assert "stale remote zone (site offline, or silent 120 s): assume-calling" in out
    assert "state on estate/west/source/heat-pump/state" in out
    assert re.search(r"minimum off\s+600 s\s+file", out)
    assert re.search(r"minimum on\s+360 s\s+kind heat-pump", out)


def test_example_site_has_a_boiler_serving_its_hydronic_zones(
    capsys: pytest.CaptureFixture[str],
) -> None:
    site = load_site(EXAMPLE)
    (boiler,) = site.heat_sources
    assert boiler.kind == "boiler" and boiler.zones == ["office", "showroom"]
    assert {site.zone(z).heating for z in boiler.zones} == {"hydronic", "underfloor"}
    assert main(["check", "-c", str(EXAMPLE)]) == 0
    assert "boiler: boiler, enable boiler-enable, pump boiler-pump" in capsys.readouterr().out


def test_the_docs_table_shows_the_defaults_of_the_code() -> None:
    text = DOCS.read_text(encoding="utf-8")
    text = text[text.index("## heat_sources") : text.index("## logging")]
    for key in SOURCE_TIMING_KEYS:
        row = re.search(rf"^\| `{key}` \| ([^|]+) \|", text, re.MULTILINE)
        assert row, key
        cell = row.group(1).strip()
        values = [float(v) for v in re.findall(r"\d+", cell)]
        wanted = [float(SOURCE_DEFAULTS[k][key]) for k in ("boiler", "heat-pump", "electric")]
        if len(values) == 1:
            values *= 3
        assert values == wanted, (key, cell)


def test_no_heat_sources_is_fine() -> None:
    site = load_site(REPO / "config" / "minimal.yaml")
    assert site.heat_sources == []


PLANT_ROOM = """\
site: {name: plant-room}
links: [{name: io, type: modbus-tcp, host: 127.0.0.1}]
broker: {host: 127.0.0.1}
points:
  - {name: burner, type: modbus-output, link: io, address: 0}
heat_sources:
  - {name: boiler, kind: boiler, output: burner, zones: [east/office]}
"""


@pytest.mark.parametrize("zones", ["", "zones: []\n"])
def test_a_site_with_a_source_needs_no_zones_of_its_own(tmp_path: Path, zones: str) -> None:
    path = tmp_path / "plant-room.yaml"
    path.write_text(PLANT_ROOM + zones)
    site = load_site(path)
    assert site.zones == [] and [s.name for s in site.heat_sources] == ["boiler"]


@pytest.mark.parametrize("zones", ["zones: []\n", "zones:\n"])
def test_a_site_without_zones_or_sources_is_refused(
    tmp_path: Path, zones: str, capsys: pytest.CaptureFixture[str]
) -> None:
    path = tmp_path / "empty.yaml"
    path.write_text(PLANT_ROOM.split("heat_sources:", maxsplit=1)[0] + zones)
    assert main(["check", "-c", str(path)]) == 2
    err = capsys.readouterr().err
    assert re.search(rf"{re.escape(str(path))}:\d+: zones: list at least one zone", err), err
    assert "heat source" in err
