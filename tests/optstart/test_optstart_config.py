"""The site's outdoor point and a zone's ``optimum_start`` section in the site file, and the
service-side wrapper that turns them into the level a zone uses."""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest

from roomloop.config.loader import load_site
from roomloop.config.models import Site
from roomloop.core.optimum_start import HEATING_DEFAULTS, WarmUpModel
from roomloop.core.settings import ZoneSettings
from roomloop.core.types import PointSample
from roomloop.errors import ConfigError
from roomloop.service.optimum_start import OptimumStartProgram, outdoor_value, published

SITE = """\
site:
  name: test-site
  timezone: Europe/Vienna
{outdoor}
links:
  - {{name: io, type: modbus-tcp, host: 127.0.0.1}}
points:
  - {{name: room-temp, type: modbus-input, link: io, address: 0}}
  - {{name: yard, type: modbus-input, link: io, address: 1}}
  - {{name: room-relay, type: modbus-output, link: io, address: 0}}
zones:
  - name: room
    inputs: [room-temp]
    output: room-relay
    heating: hydronic
    setpoints: {{comfort: 21, standby: 19, economy: 17, protection: 7}}
    program:
      - {{days: all, at: "07:00", level: comfort}}
      - {{days: all, at: "22:00", level: economy}}
{optimum}
"""


def _site(tmp_path: Path, outdoor: str = "", optimum: str = "") -> Site:
    path = tmp_path / "site.yaml"
    path.write_text(SITE.format(outdoor=outdoor, optimum=optimum), encoding="utf-8")
    return load_site(path)


def test_defaults_leave_everything_as_it_was(tmp_path: Path) -> None:
    site = _site(tmp_path)
    assert site.site.outdoor_point is None
    assert site.zones[0].optimum_start.enabled is False
    assert site.zones[0].optimum_start.earliest_s is None  # the heating type's


def test_earliest_start_defaults_by_heating_type() -> None:
    from roomloop.core.optimum_start import OptimumStartSettings

    assert OptimumStartSettings.for_heating("hydronic").earliest_s == 3 * 3600.0
    assert OptimumStartSettings.for_heating("forced-air").earliest_s == 3 * 3600.0
    assert OptimumStartSettings.for_heating("underfloor").earliest_s == 9 * 3600.0
    assert OptimumStartSettings.for_heating("underfloor", earliest_s=3600.0).earliest_s == 3600.0


def test_outdoor_point_and_optimum_start_load(tmp_path: Path) -> None:
    site = _site(
        tmp_path, "  outdoor_point: yard",
        "    optimum_start: {enabled: true, earliest_s: 7200, initial_rate_k_per_h: 2.5}",
    )
    assert site.site.outdoor_point == "yard"
    given = site.zones[0].optimum_start
    assert (given.enabled, given.earliest_s, given.initial_rate_k_per_h) == (True, 7200.0, 2.5)
    assert given.dead_time_s is None


@pytest.mark.parametrize(
    ("outdoor", "optimum", "fragment"),
    [
        ("  outdoor_point: nowhere", "", "site.outdoor_point: unknown point 'nowhere'"),
        ("  outdoor_point: room-relay", "", "site.outdoor_point: point 'room-relay' is an output"),
        ("", "    optimum_start: {enabled: true, earliest_s: -5}", "optimum_start.earliest_s"),
        ("", "    optimum_start: {initial_rate_k_per_h: 0}", "optimum_start.initial_rate_k_per_h"),
        ("", "    optimum_start: {enable: true}", "optimum_start.enable"),
    ],
)
def test_mistakes_are_located(tmp_path: Path, outdoor: str, optimum: str, fragment: str) -> None:
    with pytest.raises(ConfigError) as caught:
        _site(tmp_path, outdoor, optimum)
    text = str(caught.value)
    assert fragment in text, text
    assert "site.yaml:" in text


def test_wrapper_returns_the_program_unchanged_when_disabled(tmp_path: Path) -> None:
    site = _site(tmp_path)
    zone = site.zones[0]
    program = OptimumStartProgram.for_zone(
        zone, ZoneSettings.from_site(site, "room"), ZoneInfo("Europe/Vienna")
    )
    six = dt.datetime(2026, 1, 5, 6, 0, tzinfo=ZoneInfo("Europe/Vienna")).timestamp()
    level, change = program.at(six, mode="auto", temperature=15.0, outdoor=-5.0)
    assert level == "economy" and change is not None and change.level == "comfort"
    assert program.decision is None


def test_wrapper_starts_early_with_the_zone_set_points(tmp_path: Path) -> None:
    """Hydronic defaults (rate 1.5 K/h, dead time 900 s): from 17.0 to 21 - 0.1 the lead is
    900 s + 3.9 K / 1.5 K/h = 900 + 9360 s = 170 min, inside the 3 h earliest start."""
    site = _site(tmp_path, optimum="    optimum_start: {enabled: true}")
    zone = site.zones[0]
    program = OptimumStartProgram.for_zone(
        zone, ZoneSettings.from_site(site, "room"), ZoneInfo("Europe/Vienna")
    )
    seven = dt.datetime(2026, 1, 5, 7, 0, tzinfo=ZoneInfo("Europe/Vienna")).timestamp()
    defaults = HEATING_DEFAULTS["hydronic"]
    lead = defaults.dead_time_s + 3600.0 * (21.0 - 0.1 - 17.0) / defaults.initial_rate_k_per_h
    level, _ = program.at(seven - lead - 30.0, mode="auto", temperature=17.0)
    assert level == "economy"
    level, change = program.at(seven - lead + 10.0, mode="auto", temperature=17.0)
    assert level == "comfort" and change is not None and change.at == seven
    assert program.decision is not None and program.decision.early
    assert program.decision.to_dict()["since"] == seven - lead + 10.0
    level, _ = program.at(seven - lead + 20.0, mode="hold", temperature=17.0)
    assert level == "economy"  # a hold ends it: the controller's own set point rules
    # the learned record survives a restart
    restored = OptimumStartProgram(
        program.cursor, program.settings, WarmUpModel.from_json(program.model.to_json())
    )
    assert restored.model == program.model


def test_outdoor_value_is_taken_only_when_good_and_fresh() -> None:
    now = 1000.0
    assert outdoor_value(PointSample("yard", 3.5, 990.0), now, 120.0) == 3.5
    assert outdoor_value(PointSample("yard", 3.5, 800.0), now, 120.0) is None
    assert outdoor_value(PointSample("yard", None, None, "comm-failure"), now, 120.0) is None
    assert outdoor_value(PointSample("yard", 80.0, 990.0, "over-range"), now, 120.0) is None
    assert outdoor_value(None, now, 120.0) is None


def test_published_fields(tmp_path: Path) -> None:
    """What the zone's state JSON carries as ``early_start``: local ISO times, the site's units."""
    site = _site(tmp_path, optimum="    optimum_start: {enabled: true}")
    vienna = ZoneInfo("Europe/Vienna")
    settings = ZoneSettings.from_site(site, "room")
    program = OptimumStartProgram.for_zone(site.zones[0], settings, vienna)
    assert published(None, vienna) is None
    seven = dt.datetime(2026, 1, 5, 7, 0, tzinfo=vienna).timestamp()
    program.at(seven - 3600.0, mode="auto", temperature=17.0)
    fields = published(program.decision, vienna, "F")
    assert fields is not None
    assert fields["active"] is True and fields["level"] == "comfort"
    assert fields["since"] == "2026-01-05T06:00:00+01:00"
    assert fields["switch_at"] == "2026-01-05T07:00:00+01:00"
    assert fields["rate_per_h"] == pytest.approx(1.5 * 9.0 / 5.0)  # hydronic's initial 1.5 K/h
    assert "capped" not in fields["reason"] and "K/h" in fields["reason"]
