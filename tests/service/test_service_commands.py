"""Commands: the service parses plain and JSON payloads (units, times), the core checks them.

The checks (limits, words, how far ahead) are the core's (``roomloop.core.commands``);
here they are exercised the way the service meets them: parsed, then applied.
"""

from __future__ import annotations

import json
import re
from zoneinfo import ZoneInfo

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from structlog.testing import capture_logs

from roomloop.config.models import Limits, ModbusInput, Zone
from roomloop.core.commands import CommandRejected, apply_command
from roomloop.core.controller import ZoneController
from roomloop.core.settings import ZoneSettings
from roomloop.core.state import ZoneState
from roomloop.service.commands import (
    Command,
    CommandHandler,
    RateLimit,
    Refused,
    parse_command,
    parse_topic,
)

VIENNA = ZoneInfo("Europe/Vienna")
NOW = 1_800_000_000.0  # 2027-01-15T08:00:00Z
ZONE = Zone(
    name="studio",
    inputs=["t"],
    output="r",
    heating="hydronic",
    limits=Limits(min=5, max=26),
)


SETTINGS = ZoneSettings.from_zone(
    ZONE, {"t": ModbusInput(type="modbus-input", name="t", link="l", address=0)}
)
REFUSED = (Refused, CommandRejected)


def parse(field: str, payload: bytes | str, units: str = "C") -> Command:
    """Parse a payload, then let the core check and apply it (raising either refusal)."""
    raw = payload.encode() if isinstance(payload, str) else payload
    command = parse_command(ZONE, field, raw, units=units, tz=VIENNA, now=NOW)
    state = ZoneController(SETTINGS).initial_state(NOW)
    apply_command(
        SETTINGS, state, command.field, command.value, NOW, units=units, until=command.until
    )
    return command


@pytest.mark.parametrize("payload", ["21.5", " 21.5\n", '"21.5"', "21.5e0", '{"value": 21.5}'])
def test_setpoint_plain_or_json(payload: str) -> None:
    assert parse("setpoint", payload).value == 21.5


def test_setpoint_in_fahrenheit_is_converted_and_checked_in_the_sites_units() -> None:
    # 70.7 F = 21.5 C (F = C x 9/5 + 32)
    assert parse("setpoint", "70.7", units="F").value == pytest.approx(21.5)
    with pytest.raises(CommandRejected, match=re.escape("outside the zone's limits 41 to 78.8 F")):
        parse("setpoint", "80", units="F")


@pytest.mark.parametrize(
    ("field", "payload", "words"),
    [
        ("setpoint", "warm", "must be a number"),
        ("setpoint", "true", "must be a number"),
        ("setpoint", "NaN", "finite"),
        ("setpoint", "[21]", "not a list"),
        ("setpoint", "26.5", "outside the zone's limits 5 to 26 C"),
        ("setpoint", "4.9", "outside"),
        ("setpoint", '{"value": 21, "for": 3}', '{"value": ...}'),
        ("setpoint", '{"until": "none"}', '{"value": ...}'),
        ("setpoint", '{"value": 21, "until": 3}', "until 3 is in the past"),
        ("setpoint", '{"value": 21, "until": "soon"}', "until 'soon' is not a time"),
        ("mode", '{"value": "hold", "until": "none"}', "until goes with setpoint or level"),
        ("level", '{"value": "economy", "until": "next-change"}', "never changes level"),
        ("hold_until", "next-change", "never changes level"),
        ("setpoint", "", "empty payload"),
        ("setpoint", b"\xff\xfe", "UTF-8"),
        ("setpoint", "9" * 2000, "too large"),
        ("mode", "party", "auto, hold, off"),
        ("mode", "1", "auto, hold, off"),
        ("level", "sleepy", "comfort, standby, economy, protection"),
        ("hold_until", "next week", "ISO 8601"),
        ("hold_until", "2020-01-01T00:00", "in the past"),
        ("fan", "on", "unknown field"),
    ],
)
def test_refusals_say_why(field: str, payload: str | bytes, words: str) -> None:
    with pytest.raises(REFUSED) as caught:
        parse(field, payload)
    assert words in str(caught.value)


def test_words_are_case_and_space_insensitive() -> None:
    state = ZoneController(SETTINGS).initial_state(NOW)
    assert apply_command(SETTINGS, state, "mode", parse("mode", " Hold ").value, NOW).mode == "hold"
    level = apply_command(SETTINGS, state, "level", parse("level", '"ECONOMY"').value, NOW)
    assert level.level_override == "economy"


def test_hold_until_local_time_offset_and_clearing() -> None:
    # 2027-01-20 18:00 in Vienna (UTC+1 in winter) = 17:00 UTC.
    assert parse("hold_until", "2027-01-20T18:00").value == 1_800_000_000.0 + 5 * 86400 + 9 * 3600
    assert (
        parse("hold_until", "2027-01-20T17:00:00+00:00").value
        == parse("hold_until", "2027-01-20T18:00").value
    )
    assert parse("hold_until", str(NOW + 60)).value == NOW + 60
    assert parse("hold_until", "null").value is None
    assert parse("hold_until", "none").value is None


def test_topics() -> None:
    p = "roomloop/annex"
    assert parse_topic(p, "roomloop/annex/zone/studio/cmd/setpoint") is not None
    assert parse_topic(p, "roomloop/annex/zone/studio/cmd/result") is None
    assert parse_topic(p, "roomloop/annex/zone/studio/state") is None
    assert parse_topic(p, "roomloop/other/zone/studio/cmd/setpoint") is None
    assert parse_topic(p, "roomloop/annex/zone/studio/cmd/setpoint/x") is None


def test_rate_limit_is_a_sliding_minute_per_zone() -> None:
    limit = RateLimit(3)
    assert [limit.allow("a", t) for t in (0.0, 1.0, 2.0, 3.0)] == [True, True, True, False]
    assert limit.allow("b", 3.0)
    assert not limit.allow("a", 59.9)
    assert limit.allow("a", 60.0)


class Recorder:
    """The zone's side: the core checks and applies each command; the accepted ones are kept."""

    def __init__(self) -> None:
        self.applied: list[Command] = []
        self.state = ZoneController(SETTINGS).initial_state(NOW)

    def __call__(self, command: Command) -> None:
        self.state = apply_command(
            SETTINGS, self.state, command.field, command.value, NOW, until=command.until
        )
        self.applied.append(command)


def handler(recorder: Recorder, rate: int = 30) -> CommandHandler:
    return CommandHandler(
        "roomloop/annex",
        {"studio": ZONE},
        recorder,
        units="C",
        tz=VIENNA,
        rate_per_min=rate,
        refusals=(CommandRejected,),
    )


def test_handler_applies_answers_and_ignores_retained_and_foreign() -> None:
    rec = Recorder()
    h = handler(rec)
    topic = "roomloop/annex/zone/studio/cmd/setpoint"
    answer = h.handle(topic, b"22", retained=False, now=NOW, monotonic=0.0)
    assert answer is not None and answer.topic == "roomloop/annex/zone/studio/cmd/result"
    assert json.loads(answer.payload) == {"field": "setpoint", "ok": True, "value": 22.0}
    retained = h.handle(topic, b"23", retained=True, now=NOW, monotonic=0.0)
    assert retained is not None and json.loads(retained.payload)["ok"] is False
    assert "retained" in json.loads(retained.payload)["reason"]
    assert h.handle(topic, b"", retained=True, now=NOW, monotonic=0.0) is None  # a deletion
    assert h.handle("roomloop/other/zone/studio/cmd/mode", b"off", retained=False, now=NOW,
                    monotonic=0.0) is None
    assert [c.value for c in rec.applied] == [22.0]


def test_a_command_for_an_unknown_zone_is_refused_by_name_and_changes_nothing() -> None:
    rec = Recorder()
    h = handler(rec)
    with capture_logs() as events:
        answer = h.handle(
            "roomloop/annex/zone/attic/cmd/mode", b"off", retained=False, now=NOW, monotonic=0.0
        )
    # the journal shows it too (issue 16): a warning naming the zone and the field
    assert [(e["event"], e["log_level"], e["zone"], e["field"]) for e in events] == [
        ("command.unknown_zone", "warning", "attic", "mode")
    ]
    assert answer is not None and answer.topic == "roomloop/annex/zone/attic/cmd/result"
    body = json.loads(answer.payload)
    assert body["ok"] is False and body["field"] == "mode"
    assert "no zone named 'attic'" in body["reason"] and "studio" in body["reason"]
    assert rec.applied == []
    # A flood of made-up names shares one rate limit: answered at most so often, then silence.
    with capture_logs() as flood:
        answers = [
            h.handle(f"roomloop/annex/zone/x{k}/cmd/mode", b"off", retained=False, now=NOW,
                     monotonic=1.0)
            for k in range(500)
        ]
    answered = sum(a is not None for a in answers)
    assert 0 < answered <= h.limit.per_minute
    assert len(flood) == answered  # and the journal is not flooded either
    assert rec.applied == []


def test_handler_refuses_when_the_zone_refuses_and_when_flooded() -> None:
    class CoreSaysNo(Exception):
        reason = "the zone is off"

    def refuse(command: Command) -> None:
        raise CoreSaysNo()

    h = CommandHandler(
        "p", {"studio": ZONE}, refuse, units="C", tz=VIENNA, rate_per_min=2, refusals=(CoreSaysNo,)
    )
    topic = "p/zone/studio/cmd/mode"
    answers = [
        json.loads(a.payload)
        for a in (h.handle(topic, b"hold", retained=False, now=NOW, monotonic=t) for t in (0, 1, 2))
        if a is not None
    ]
    assert answers[0] == {"field": "mode", "ok": False, "reason": "the zone is off"}
    assert answers[2]["ok"] is False and "too many commands" in answers[2]["reason"]


@settings(max_examples=300, deadline=None)
@given(
    field=st.sampled_from(["setpoint", "mode", "level", "hold_until", "x"]),
    payload=st.binary(max_size=64),
)
def test_any_payload_is_applied_or_refused_never_crashes(field: str, payload: bytes) -> None:
    rec = Recorder()
    answer = handler(rec, rate=1000).handle(
        f"roomloop/annex/zone/studio/cmd/{field}", payload, retained=False, now=NOW, monotonic=0.0
    )
    assert answer is not None
    result = json.loads(answer.payload)
    assert result["ok"] is bool(rec.applied)
    if result["ok"] and field == "setpoint":
        assert 5.0 <= rec.applied[0].value <= 26.0


@pytest.mark.parametrize(
    ("field", "payload", "words"),
    [
        ("hold_until", "1e300", "366 days"),
        ("hold_until", '{"value": 1e300}', "366 days"),
        ("hold_until", str(NOW + 367 * 86400), "366 days"),
        ("hold_until", "9999-12-31T23:59", "366 days"),
        ("setpoint", "1" + "0" * 400, "too large"),
        ("hold_until", "1" + "0" * 400, "too large"),
    ],
)
def test_absurd_numbers_and_far_times_are_refused_with_a_reason(
    field: str, payload: str, words: str
) -> None:
    rec = Recorder()
    answer = handler(rec).handle(
        f"roomloop/annex/zone/studio/cmd/{field}",
        payload.encode(),
        retained=False,
        now=NOW,
        monotonic=0.0,
    )
    assert answer is not None
    result = json.loads(answer.payload)
    assert result["ok"] is False and words in result["reason"], result
    assert rec.applied == []


def test_a_hold_within_a_year_is_accepted() -> None:
    command = parse("hold_until", str(NOW + 365 * 86400))
    assert command.value == NOW + 365 * 86400


def test_an_unexpected_error_while_applying_is_answered_as_refused() -> None:
    def broken(command: Command) -> None:
        raise KeyError("a bug of ours")

    h = CommandHandler("p", {"studio": ZONE}, broken, units="C", tz=VIENNA, rate_per_min=30)
    answer = h.handle("p/zone/studio/cmd/mode", b"hold", retained=False, now=NOW, monotonic=0.0)
    assert answer is not None
    assert json.loads(answer.payload) == {"field": "mode", "ok": False, "reason": "internal error"}


def test_an_answer_says_when_the_command_cannot_be_made_durable() -> None:
    rec = Recorder()
    status = ["ok"]
    h = CommandHandler(
        "roomloop/annex", {"studio": ZONE}, rec, units="C", tz=VIENNA, rate_per_min=30,
        durability=lambda: status[0],
    )
    topic = "roomloop/annex/zone/studio/cmd/setpoint"
    answer = h.handle(topic, b"22", retained=False, now=NOW, monotonic=0.0)
    assert answer is not None and "durable" not in json.loads(answer.payload)
    status[0] = "failed: the state directory is not writable"
    answer = h.handle(topic, b"23", retained=False, now=NOW, monotonic=1.0)
    assert answer is not None
    body = json.loads(answer.payload)
    assert body["ok"] is True and body["durable"] is False
    assert "not writable" in body["warning"] and "restart" in body["warning"]
    assert [c.value for c in rec.applied] == [22.0, 23.0]


NEXT = NOW + 2 * 3600.0
"""The program's next change in the tests below."""


def parse_with_program(
    field: str, payload: str, state: ZoneState | None = None
) -> tuple[Command, ZoneState]:
    """Parse with a program that next changes at :data:`NEXT`; apply to a fresh (auto) state."""
    command = parse_command(
        ZONE, field, payload.encode(), units="C", tz=VIENNA, now=NOW, program_next=lambda: NEXT
    )
    before = ZoneController(SETTINGS).initial_state(NOW) if state is None else state
    after = apply_command(
        SETTINGS, before, command.field, command.value, NOW, until=command.until
    )
    return command, after


def test_a_set_point_until_the_programs_next_change() -> None:
    command, state = parse_with_program("setpoint", '{"value": 22.5, "until": "next-change"}')
    assert (command.value, command.until, command.ends) == (22.5, NEXT, "next-change")
    assert (state.mode, state.hold_setpoint, state.hold_until) == ("hold", 22.5, NEXT)


def test_a_level_with_an_end_is_a_hold_at_that_level_in_any_mode() -> None:
    # 2027-01-15 18:00 in Vienna = 17:00 UTC
    command, state = parse_with_program(
        "level", '{"value": "economy", "until": "2027-01-15T18:00"}'
    )
    assert (command.until, command.ends) == (NOW + 9 * 3600, "time")
    assert (state.mode, state.hold_level, state.hold_setpoint, state.level_override) == (
        "hold", "economy", None, None
    )
    # "until": none asks for a hold without end, even in auto (where a bare level is an
    # override to the next change)
    command, state = parse_with_program("level", '{"value": "standby", "until": "none"}')
    assert (command.until, command.ends) == (None, "never")
    assert (state.mode, state.hold_level, state.hold_until) == ("hold", "standby", None)


def test_hold_until_next_change_and_the_answer_says_how_the_hold_ends() -> None:
    command, state = parse_with_program("hold_until", "next-change")
    assert (command.value, command.ends) == (NEXT, "next-change")
    assert (state.mode, state.hold_until) == ("hold", NEXT)
    rec = Recorder()
    h = CommandHandler(
        "p", {"studio": ZONE}, rec, units="C", tz=VIENNA, rate_per_min=30,
        program_next=lambda zone, now: NEXT,
    )
    answer = h.handle(
        "p/zone/studio/cmd/setpoint", b'{"value": 21, "until": "next-change"}',
        retained=False, now=NOW, monotonic=0.0,
    )
    assert answer is not None
    assert json.loads(answer.payload) == {
        "field": "setpoint", "ok": True, "value": 21.0, "ends": "next-change",
        "until": "2027-01-15T11:00:00+01:00",
    }
    answer = h.handle("p/zone/studio/cmd/setpoint", b"21.5", retained=False, now=NOW,
                      monotonic=1.0)
    assert answer is not None and "ends" not in json.loads(answer.payload)
