"""Each zone's retained description: what bounds a dashboard's controls, from the site file."""

from __future__ import annotations

import json
from zoneinfo import ZoneInfo

from roomloop.config.models import Limits, ModbusInput, ProgramEntry, Setpoints, Zone
from roomloop.core.settings import ZoneSettings
from roomloop.service.description import description_payload
from roomloop.service.publisher import StatePublisher

ZONE = Zone(
    name="studio",
    inputs=["t"],
    output="r",
    heating="hydronic",
    limits=Limits(min=10, max=24),
    setpoints=Setpoints(comfort=25, standby=19, economy=17, protection=7),
    program=[ProgramEntry(days="mon-fri", at="07:00", level="comfort")],
)
SETTINGS = ZoneSettings.from_zone(
    ZONE, {"t": ModbusInput(type="modbus-input", name="t", link="l", address=0)}
)


def test_the_description_bounds_the_sliders_with_what_the_controller_uses() -> None:
    payload = description_payload(ZONE, SETTINGS, units="C", publish_interval_s=60)
    assert payload["limits"] == {"min": 10.0, "max": 24.0}
    # comfort 25 is clamped to the limit 24 and protection 7 to 10: what the zone really uses
    assert payload["setpoints"] == {
        "comfort": 24.0, "standby": 19.0, "economy": 17.0, "protection": 10.0
    }
    assert payload["heating"] == "hydronic" and payload["output"] == "r"
    assert payload["commands"] == ["setpoint", "mode", "level", "hold_until", "ack"]
    assert payload["program"] == [
        {"days": ["mon", "tue", "wed", "thu", "fri"], "at": "07:00", "level": "comfort"}
    ]
    json.dumps(payload, allow_nan=False)


def test_a_fahrenheit_site_describes_in_fahrenheit() -> None:
    payload = description_payload(ZONE, SETTINGS, units="F", publish_interval_s=60)
    # 10 C = 50 F, 24 C = 75.2 F; the hydronic differential 0.5 K = 0.9 F degrees
    assert payload["limits"] == {"min": 50.0, "max": 75.2}
    assert payload["units"] == "F" and payload["differential"] == 0.9


def test_the_description_is_sent_once_per_connection() -> None:
    pub = StatePublisher("p", units="C", tz=ZoneInfo("UTC"), interval_s=60.0)
    pub.describe("studio", description_payload(ZONE, SETTINGS, units="C", publish_interval_s=60))
    first = pub.due(0.0)
    assert [m.topic for m in first] == ["p/zone/studio/description"] and first[0].retain
    pub.sent(first[0], 0.0)
    assert pub.due(1.0) == []
    pub.forget_sent()
    assert [m.topic for m in pub.due(2.0)] == ["p/zone/studio/description"]
