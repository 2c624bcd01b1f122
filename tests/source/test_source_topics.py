"""The heat source's topics: parsing what zones publish today, the book of remote zones,
and the retained source state payload."""

from __future__ import annotations

import json
from zoneinfo import ZoneInfo

from hypothesis import given, settings
from hypothesis import strategies as st
from source_helpers import T0, local

from roomloop.core.source import SourceInputs, SourceLogic, SourceSettings
from roomloop.core.source_topics import (
    RemoteBook,
    RemoteTopics,
    parse_demand,
    parse_status,
    parse_zone_state,
    significant_source_state,
    source_state_payload,
    source_state_topic,
)
from roomloop.core.types import Reason, ZoneOutputs
from roomloop.service.publisher import (
    OFFLINE,
    ONLINE,
    ZoneView,
    plain_fields,
    state_payload,
    status_topic,
)

UTC = ZoneInfo("UTC")


def _view(demand: bool, reason: Reason) -> ZoneView:
    outputs = ZoneOutputs(demand=demand, reason=reason, temperature=19.5, setpoint=20.0,
                          level="comfort", mode="auto", anticipator_k=0.1, droop_k=0.0)
    return ZoneView(zone="office", outputs=outputs, at=T0, output_point="office-valve")


def test_parses_what_the_publisher_sends_today() -> None:
    """The payloads come from service/publisher.py itself, so a change there shows here."""
    calls: tuple[tuple[bool, Reason], ...] = (
        (True, "cut-in"), (False, "cut-out"), (True, "protection")
    )
    for demand, reason in calls:
        view = _view(demand, reason)
        assert parse_demand(plain_fields(view, units="C")["demand"]) is demand
        text = json.dumps(state_payload(view, units="C", tz=UTC))
        assert parse_zone_state(text) == (demand, reason == "protection")
        assert parse_zone_state(text.encode()) == (demand, reason == "protection")
    assert parse_status(ONLINE) is True and parse_status(OFFLINE) is False


def test_unreadable_payloads_are_none() -> None:
    for bad in ("", b"", "maybe", b"\xff\xfe", "  "):
        assert parse_demand(bad) is None
    assert parse_demand(" TRUE\n") is True and parse_demand(b"0") is False
    assert parse_status("Online") is None and parse_status(b"") is None
    for bad in ("", "{", "[]", '{"demand": "yes"}', '{"reason": "cut-in"}'):
        assert parse_zone_state(bad) is None


def test_topics_of_remote_zones_follow_each_site_prefix() -> None:
    topics = RemoteTopics.for_zones(
        ["office", "north-wing/hall", "annex/loft"], {"annex": "estate/annex"}
    )
    assert topics.subscriptions == (
        "estate/annex/status",
        "estate/annex/zone/loft/demand",
        "estate/annex/zone/loft/state",
        "roomloop/north-wing/status",
        "roomloop/north-wing/zone/hall/demand",
        "roomloop/north-wing/zone/hall/state",
    )
    # the remote daemon's own topic helpers give the same names
    assert status_topic("roomloop/north-wing") in topics.by_topic
    assert source_state_topic("roomloop/here", "boiler") == "roomloop/here/source/boiler/state"


ZONE = "north/office"
TOPICS = RemoteTopics.for_zones([ZONE])
DEMAND = "roomloop/north/zone/office/demand"
STATE = "roomloop/north/zone/office/state"
STATUS = "roomloop/north/status"
SETTINGS = SourceSettings(name="b", zones=(ZONE,), valve_opening_s=60, min_on_s=0,
                          min_off_s=0, stale_timeout_s=300, stale_policy="ignore")


def _state(demand: bool) -> str:
    return json.dumps(state_payload(_view(demand, "cut-in"), units="C", tz=UTC))


def test_book_marks_a_site_offline_by_its_last_will_and_back() -> None:
    book = RemoteBook()
    (demand,) = book.demands([ZONE])
    assert not demand.online and demand.calling is None  # never heard: stale
    book = book.heard(TOPICS, STATUS, "online", T0)
    book = book.heard(TOPICS, DEMAND, "true", T0)
    (demand,) = book.demands([ZONE, "local-zone"])
    assert demand.online and demand.calling is True and demand.heard_at == T0
    book = book.heard(TOPICS, STATUS, "offline", T0 + 5)
    assert not book.demands([ZONE])[0].online
    book = book.heard(TOPICS, STATUS, "online", T0 + 9)
    assert book.demands([ZONE])[0].online
    # garbage and unknown topics change nothing, not even the heartbeat
    assert book.heard(TOPICS, DEMAND, "garbage", T0 + 20) == book
    assert book.heard(TOPICS, "roomloop/north/zone/other/demand", "true", T0 + 20) == book


def test_state_heartbeat_keeps_a_quiet_zone_fresh() -> None:
    """The plain demand is sent on change only; the state JSON, re-sent every publish
    interval, keeps a zone whose demand stays the same from going stale."""
    logic = SourceLogic(SETTINGS)
    state = logic.initial_state(T0 - 3600)
    book = RemoteBook().heard(TOPICS, STATUS, "online", T0).heard(TOPICS, DEMAND, "true", T0)
    for k in range(0, 100):
        now = T0 + 10 * k
        if k % 6 == 0:
            book = book.heard(TOPICS, STATE, _state(True), now)
        state, out = logic.step(state, SourceInputs(book.demands([ZONE])), now)
        assert out.stale == ()
    assert out.enable
    # the heartbeat stops (the remote daemon hangs, its will not sent): stale after 300 s
    last = now - now % 60
    for k in range(1, 40):
        now = last + 10 * k
        state, out = logic.step(state, SourceInputs(book.demands([ZONE])), now)
        assert (out.stale == (ZONE,)) is (now - last > 300)
    assert not out.enable  # policy ignore


messages = st.lists(
    st.tuples(st.sampled_from(["demand", "state"]), st.booleans()), min_size=1, max_size=8
)


@settings(max_examples=100, deadline=None)
@given(bursts=st.lists(messages, min_size=1, max_size=30), before=st.booleans())
def test_only_the_last_message_of_a_tick_counts(
    bursts: list[list[tuple[str, bool]]], before: bool
) -> None:
    """Messages between two ticks (a demand flickering within one tick, or the retained
    messages replayed after a broker restart) reach the step as their last value only: a
    burst that ends with no call starts nothing."""
    logic = SourceLogic(SETTINGS)
    state = logic.initial_state(T0 - 3600)
    book = RemoteBook().heard(TOPICS, STATUS, "online", T0)
    book = book.heard(TOPICS, DEMAND, "true" if before else "false", T0)
    last = before
    for k, burst in enumerate(bursts):
        now = T0 + 10 * (k + 1)
        for j, (kind, calling) in enumerate(burst):
            at = now - 10 + 10 * (j + 1) / (len(burst) + 1)
            payload = ("true" if calling else "false") if kind == "demand" else _state(calling)
            book = book.heard(TOPICS, DEMAND if kind == "demand" else STATE, payload, at)
            last = calling
        was_running = state.running
        state, out = logic.step(state, SourceInputs(book.demands([ZONE])), now)
        assert out.calling == ((ZONE,) if last else ())
        if not last:
            assert not (out.enable and not was_running)


def test_broker_restart_replaying_retained_messages_starts_nothing() -> None:
    logic = SourceLogic(SETTINGS)
    state = logic.initial_state(T0 - 3600)
    book = RemoteBook().heard(TOPICS, STATUS, "online", T0).heard(TOPICS, DEMAND, "true", T0)
    starts: list[float] = []
    for k in range(60):
        now = T0 + 10 * k
        if 30 <= k < 36:
            pass  # the broker is down: nothing arrives for a minute
        elif k == 36:  # reconnected: the retained messages arrive again, and a fresh state
            for topic, payload in ((STATUS, "online"), (DEMAND, "true"), (STATE, _state(True))):
                book = book.heard(TOPICS, topic, payload, now)
        elif k % 6 == 0:
            book = book.heard(TOPICS, STATE, _state(True), now)
        running = state.running
        state, out = logic.step(state, SourceInputs(book.demands([ZONE])), now)
        if out.enable and not running:
            starts.append(now)
    assert starts == [T0 + 60]  # the one start of the call (after the valve time), no other


def test_source_state_payload() -> None:
    logic = SourceLogic(SourceSettings(name="boiler", zones=("office", ZONE)))
    state = logic.initial_state(T0 - 3600)
    book = RemoteBook()  # north never heard of: stale, fixed-duty by default
    state, out = logic.step(
        state, SourceInputs((local("office", True, T0), *book.demands([ZONE]))), T0
    )
    payload = source_state_payload("boiler", "boiler", out, T0, UTC)
    assert payload == {
        "source": "boiler",
        "kind": "boiler",
        "timestamp": "2026-01-01T00:00:00+00:00",
        "running": False,
        "running_since": None,
        "pump": False,
        "reason": "valve-opening",
        "pump_reason": "off",
        "calling": ["office", ZONE],
        "protection": False,
        "waiting_for_valve": {"zone": "office", "until": "2026-01-01T00:03:00+00:00"},
        "lockout": None,
        "starts_1h": 0,
        "stale": [ZONE],
        "stale_policy": "fixed-duty",
    }
    json.dumps(payload)
    later = source_state_payload("boiler", "boiler", out, T0 + 10, UTC)
    assert significant_source_state(later) == significant_source_state(payload)
    assert later != payload
