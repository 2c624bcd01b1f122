"""Published state: the JSON's content and units, and when messages are due."""

from __future__ import annotations

import dataclasses
import json
from typing import Any
from zoneinfo import ZoneInfo

import pytest

from roomloop.core.state import ZoneState
from roomloop.core.types import ZoneOutputs
from roomloop.service.program import Switch
from roomloop.service.publisher import (
    Override,
    StatePublisher,
    ZoneView,
    override_of,
    plain_fields,
    state_payload,
    zone_outputs_agree,
)

VIENNA = ZoneInfo("Europe/Vienna")
AT = 1_800_000_000.0  # 2027-01-15T08:00:00Z = 09:00 in Vienna

OUT = ZoneOutputs(
    demand=True,
    reason="cut-in",
    temperature=19.5,
    setpoint=20.0,
    level="comfort",
    mode="auto",
    anticipator_k=0.5,
    droop_k=0.1,
    reliability={"t": "ok", "t2": "stale"},
    fail_safe=False,
    on_fraction_1h=0.4321,
    cycles_1h=3,
)
VIEW = ZoneView(
    "studio", OUT, AT, "relay", "ok", True, None, Switch(AT + 3600, "economy"), "learned-duty"
)


def test_state_json_carries_everything_a_dashboard_needs() -> None:
    payload = state_payload(VIEW, units="C", tz=VIENNA)
    assert payload["timestamp"] == "2027-01-15T09:00:00+01:00"
    assert payload["temperature"] == 19.5 and payload["setpoint"] == 20.0
    assert (payload["level"], payload["mode"], payload["demand"]) == ("comfort", "auto", True)
    assert (payload["anticipator"], payload["droop"]) == (0.5, 0.1)
    assert payload["reliability"] == {"t": "ok", "t2": "stale"}
    # The configured policy is published while the zone is not in fail-safe (the core's
    # outputs name it only while it runs).
    assert payload["fail_safe"] is False and payload["fail_safe_policy"] == "learned-duty"
    assert payload["fail_safe_reason"] is None
    assert (payload["on_fraction_1h"], payload["cycles_1h"]) == (0.432, 3)
    assert payload["reason"] == "cut-in"
    assert payload["next_change"] == {
        "at": "2027-01-15T10:00:00+01:00", "level": "economy", "by": "program"
    }
    assert payload["output"] == {
        "point": "relay", "commanded": None, "read_back": True, "agrees": True, "verdict": "ok"
    }
    json.dumps(payload, allow_nan=False)


def test_fail_safe_running_names_its_policy_and_reason() -> None:
    running = dataclasses.replace(
        OUT,
        fail_safe=True,
        fail_safe_policy="learned-duty",
        fail_safe_reason="no reliable temperature for 303 s",
    )
    payload = state_payload(dataclasses.replace(VIEW, outputs=running), units="C", tz=VIENNA)
    assert payload["fail_safe"] is True and payload["fail_safe_policy"] == "learned-duty"
    assert payload["fail_safe_reason"] == "no reliable temperature for 303 s"


def test_fahrenheit_sites_see_fahrenheit_absolute_and_difference_values() -> None:
    payload = state_payload(VIEW, units="F", tz=VIENNA)
    # 19.5 C = 67.1 F; 20 C = 68 F; a 0.5 K difference = 0.9 F degrees.
    assert (payload["temperature"], payload["setpoint"]) == (67.1, 68.0)
    assert (payload["anticipator"], payload["droop"]) == (0.9, 0.18)
    assert plain_fields(VIEW, units="F")["setpoint"] == "68.00"


def test_plain_fields() -> None:
    assert plain_fields(VIEW, units="C") == {
        "temperature": "19.50",
        "setpoint": "20.00",
        "demand": "true",
        "mode": "auto",
        "level": "comfort",
    }
    # No value is an empty payload (docs/topics.md), never a word a gauge would try to read.
    unknown = dataclasses.replace(VIEW, outputs=dataclasses.replace(OUT, temperature=None))
    assert plain_fields(unknown, units="C")["temperature"] == ""


def _send_all(pub: StatePublisher, now: float) -> list[str]:
    topics = []
    for message in pub.due(now):
        pub.sent(message, now)
        topics.append(message.topic)
    return topics


def test_due_on_change_on_interval_and_after_reconnect() -> None:
    pub = StatePublisher("p", units="C", tz=VIENNA, interval_s=60.0)
    pub.update(VIEW)
    assert len(_send_all(pub, AT)) == 6  # state and five plain fields
    assert pub.due(AT + 1) == []
    # A drifting anticipator alone is no change; a new demand is.
    pub.update(dataclasses.replace(VIEW, outputs=dataclasses.replace(OUT, anticipator_k=0.6)))
    assert pub.due(AT + 2) == []
    pub.update(dataclasses.replace(VIEW, outputs=dataclasses.replace(OUT, demand=False)))
    assert sorted(_send_all(pub, AT + 3)) == ["p/zone/studio/demand", "p/zone/studio/state"]
    # At least every interval.
    assert [m.topic for m in pub.due(AT + 3 + 60)] == ["p/zone/studio/state"]
    # After a reconnect everything again.
    pub.forget_sent()
    assert len(pub.due(AT + 64)) == 6


def test_a_view_that_cannot_render_is_skipped_and_the_others_still_go_out() -> None:
    pub = StatePublisher("p", units="C", tz=VIENNA, interval_s=60.0)
    pub.update(dataclasses.replace(VIEW, zone="broken", hold_until=1e300))
    pub.update(VIEW)
    topics = [m.topic for m in pub.due(AT)]
    assert "p/zone/studio/state" in topics and len(topics) == 6
    assert not any("/broken/" in t for t in topics)


def test_a_read_back_is_not_shown_while_the_device_cannot_be_reached() -> None:
    # the last read-back said on, then the write failed: what the relay is now is unknown
    down = dataclasses.replace(
        VIEW, output_verdict="comm-failure", output_read_back=True, output_commanded=False
    )
    assert state_payload(down, units="C", tz=VIENNA)["output"] == {
        "point": "relay", "commanded": False, "read_back": None, "agrees": None,
        "verdict": "comm-failure",
    }
    assert state_payload(VIEW, units="C", tz=VIENNA)["output"]["read_back"] is True


def test_a_relay_reading_back_off_as_commanded_agrees() -> None:
    # "confirmed": false used to say this: the relay's value (off), read as an error.
    off = dataclasses.replace(VIEW, output_read_back=False, output_commanded=False)
    output = state_payload(off, units="C", tz=VIENNA)["output"]
    assert (output["commanded"], output["read_back"], output["agrees"]) == (False, False, True)
    wrong = dataclasses.replace(off, output_verdict="mismatch", output_commanded=True)
    output = state_payload(wrong, units="C", tz=VIENNA)["output"]
    assert (output["commanded"], output["read_back"], output["agrees"]) == (True, False, False)
    # No read-back configured: nothing to agree with.
    blind = dataclasses.replace(off, output_verdict="unverified", output_read_back=None)
    assert state_payload(blind, units="C", tz=VIENNA)["output"]["agrees"] is None


def test_the_hours_figures_say_how_much_of_the_hour_they_cover() -> None:
    # one minute after the start the on-fraction is over 60 s, not over an hour
    early = dataclasses.replace(VIEW, window_1h_s=60.4)
    assert state_payload(early, units="C", tz=VIENNA)["window_1h_s"] == 60
    assert state_payload(VIEW, units="C", tz=VIENNA)["window_1h_s"] == 3600


def _state(**changes: Any) -> ZoneState:
    from roomloop.config.models import Limits, ModbusInput, Zone
    from roomloop.core.controller import ZoneController
    from roomloop.core.settings import ZoneSettings

    zone = Zone(name="studio", inputs=["t"], output="r", heating="hydronic",
                limits=Limits(min=5, max=26))
    settings = ZoneSettings.from_zone(
        zone, {"t": ModbusInput(type="modbus-input", name="t", link="l", address=0)}
    )
    return dataclasses.replace(ZoneController(settings).initial_state(AT), **changes)


SWITCH = Switch(AT + 3600, "economy")


def test_the_override_says_what_sets_the_zone_aside_and_until_when() -> None:
    assert override_of(_state(), SWITCH) is None
    assert override_of(_state(mode="off"), SWITCH) is None
    # a level chosen in auto lasts until the program's level changes
    assert override_of(_state(level_override="economy"), SWITCH) == Override(
        "level", "next-change", AT + 3600
    )
    assert override_of(_state(level_override="economy"), None) == Override("level", "never", None)
    held = _state(mode="hold", hold_setpoint=21.0, hold_level="comfort")
    assert override_of(held, SWITCH) == Override("setpoint", "never", None)
    assert override_of(dataclasses.replace(held, hold_until=AT + 3600), SWITCH) == Override(
        "setpoint", "next-change", AT + 3600
    )
    assert override_of(dataclasses.replace(held, hold_until=AT + 60), SWITCH) == Override(
        "setpoint", "time", AT + 60
    )
    at_level = _state(mode="hold", hold_level="standby")
    assert override_of(at_level, SWITCH) == Override("level", "never", None)


def test_a_hold_at_a_number_reads_no_level() -> None:
    # Held at 21 C from comfort: the set point is the hold's, not comfort's.
    held = dataclasses.replace(
        VIEW,
        outputs=dataclasses.replace(OUT, setpoint=21.0, mode="hold"),
        override=Override("setpoint", "never", None),
        program_level="comfort",
    )
    payload = state_payload(held, units="C", tz=VIENNA)
    assert (payload["level"], payload["program_level"], payload["setpoint"]) == (
        None, "comfort", 21.0
    )
    assert payload["override"] == {"kind": "setpoint", "ends": "never", "until": None}
    assert plain_fields(held, units="C")["level"] == ""
    # Held at a level: that level's set point is in force, and the level says so.
    at_level = dataclasses.replace(
        held, outputs=dataclasses.replace(OUT, level="economy", mode="hold"),
        override=Override("level", "time", AT + 600),
    )
    payload = state_payload(at_level, units="C", tz=VIENNA)
    assert payload["level"] == "economy"
    assert payload["override"]["until"] == "2027-01-15T09:10:00+01:00"


@pytest.mark.parametrize(
    ("verdicts", "agrees"),
    [
        (["ok"], True),
        (["ok", "mismatch", "ok"], False),  # a cooling or changeover output disagreeing
        (["mismatch", None], False),
        (["ok", "pending", "unverified"], True),
        ([None, "comm-failure", "pending"], None),  # nothing known yet
    ],
)
def test_a_zone_with_several_outputs_agrees_only_when_none_disagrees(
    verdicts: list[str | None], agrees: bool | None
) -> None:
    assert zone_outputs_agree(verdicts) is agrees
