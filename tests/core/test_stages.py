"""The stages' seams: the relay's precedence table, samples matched by name, one judgement."""

from __future__ import annotations

import inspect
from typing import get_args

from roomloop.core import PointSample, PointSettings, ZoneController, ZoneInputs
from roomloop.core.stages import relay
from roomloop.core.types import Reason

from .helpers import settings


def test_first_applying_takes_one_condition_per_row_in_table_order() -> None:
    names = list(inspect.signature(relay.first_applying).parameters)
    rows = [rule.name.replace(" ", "_").replace("-", "_") for rule in relay.RELAY_PRECEDENCE]
    assert names == rows[:-1] and rows[-1] == "band"
    # each row wins over every row below it
    for i, rule in enumerate(relay.RELAY_PRECEDENCE[:-1]):
        conditions = [False] * len(names)
        for j in range(i, len(names)):
            conditions[j] = True
        assert relay.first_applying(*conditions) is rule
    assert relay.first_applying(False, False, False, False, False) is relay.BAND


def test_short_cycle_protection_by_rule() -> None:
    assert relay.short_cycle_may_hold(relay.PROTECTION, deep=False)
    assert not relay.short_cycle_may_hold(relay.PROTECTION, deep=True)
    assert not relay.short_cycle_may_hold(relay.MODE_OFF, deep=False)
    assert relay.short_cycle_may_hold(relay.FAIL_SAFE, deep=True)
    assert relay.short_cycle_may_hold(relay.BAND, deep=False)


def test_fixed_wishes_are_reasons() -> None:
    reasons = set(get_args(Reason))
    for rule in relay.RELAY_PRECEDENCE:
        assert rule.wish is None or rule.wish[1] in reasons


def test_samples_are_matched_by_name_not_order() -> None:
    s = settings(inputs=(PointSettings("a"), PointSettings("b")), combine="first-ok")
    c = ZoneController(s)
    state = c.initial_state(0.0)
    given = (PointSample("b", 21.0, 10.0), PointSample("extra", 5.0, 10.0),
             PointSample("a", 19.0, 10.0))
    _, out = c.step(state, ZoneInputs(given), 10.0)
    assert out.temperature == 19.0  # "a" comes first in the configuration
    assert out.reliability == {"a": "ok", "b": "ok"}
    # a configured point without a sample has no reading
    _, only_b = c.step(state, ZoneInputs((PointSample("b", 21.0, 10.0),)), 10.0)
    assert only_b.temperature == 21.0 and only_b.reliability["a"] == "stale"


def test_range_and_age_are_judged_by_the_core_for_any_source() -> None:
    # the I/O layer delivers any finite value as ok with its arrival time; the core decides
    c = ZoneController(settings(inputs=(PointSettings("temperature", valid_high_c=40.0,
                                                      stale_after_s=60.0),)))
    state = c.initial_state(0.0)
    _, hot = c.step(state, ZoneInputs((PointSample("temperature", 45.0, 10.0, raw=450),)), 10.0)
    assert hot.reliability == {"temperature": "over-range"} and hot.temperature is None
    state, fresh = c.step(state, ZoneInputs((PointSample("temperature", 20.0, 10.0),)), 10.0)
    assert fresh.temperature == 20.0
    _, old = c.step(state, ZoneInputs((PointSample("temperature", 20.0, 10.0),)), 71.0)
    assert old.reliability == {"temperature": "stale"}
