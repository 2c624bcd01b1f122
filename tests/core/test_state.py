"""The zone state: JSON round trip from any point of a run, bounded size, fast constructors."""

from __future__ import annotations

import dataclasses

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from roomloop.core import ZoneController, ZoneOutputs, ZoneState, records
from roomloop.core.state import PointState

from .helpers import run
from .helpers import settings as zone_settings


@given(
    readings=st.lists(st.one_of(st.none(), st.floats(5.0, 30.0)), min_size=1, max_size=300),
    tick=st.sampled_from([1.0, 10.0, 60.0]),
)
@settings(max_examples=60, deadline=None)
def test_any_state_round_trips(readings: list[float | None], tick: float) -> None:
    controller = ZoneController(zone_settings(sensor_timeout_s=120.0))
    trace = run(controller, lambda now, on: readings[int(now / tick) - 1], end=tick * len(readings),
                tick=tick)
    for _, _, state in [*trace[:: max(1, len(trace) // 10)], trace[-1]]:
        text = state.to_json()
        back = ZoneState.from_json(text)
        assert back == state
        assert back.to_json() == text


def test_state_stays_bounded_over_days() -> None:
    controller = ZoneController(zone_settings(min_on_s=0.0, min_off_s=0.0, max_cycles_per_hour=60))
    trace = run(controller, lambda now, on: 19.0 + (0.4 if (now // 300) % 2 else 0.0),
                end=3 * 86400.0, tick=30.0)
    state = trace[-1][2]
    assert len(state.switches) <= 2 * 60
    assert len(state.duty_buckets) <= 4 * 4 + 2
    assert len(state.to_json()) < 4000


def test_fast_constructors_equal_the_dataclass_init() -> None:
    point = PointState("t", "ok", "ok", 20.0, 1.0, 1.0, 20.0, 3.0, 0.0, False)
    name, *rest = _sections(point, (1, 2, 3, 2, 2))
    assert records.point_state(name[0], *rest) == point  # type: ignore[arg-type]
    out = ZoneOutputs(True, "cut-in", 19.0, 20.0, "comfort", "auto", 0.1, 0.2, {"t": "ok"})
    decision, shown, reliability, fail_safe, figures = _sections(out, (2, 6, 1, 3, 2))
    built_out = records.zone_outputs(
        decision, shown, reliability[0], fail_safe, figures  # type: ignore[arg-type]
    )
    assert built_out == out
    trace = run(ZoneController(zone_settings()), lambda now, on: 19.0 + now / 3600.0,
                end=7200.0, tick=60.0)
    state = trace[-1][2]
    built = records.zone_state(*_sections(state, (6, 4, 4, 4, 4, 4, 2, 3)))  # type: ignore[arg-type]
    assert built == state and built is not state
    assert dataclasses.replace(built, mode="off").mode == "off"
    with pytest.raises(dataclasses.FrozenInstanceError):
        built.mode = "off"  # type: ignore[misc]
    with pytest.raises(TypeError):
        records.slot_setters(dict)


@pytest.mark.parametrize(
    ("record", "build", "sizes"),
    [
        (PointState, records.point_state, (1, 2, 3, 2, 2)),
        (ZoneOutputs, records.zone_outputs, (2, 6, 1, 3, 2)),
        (ZoneState, records.zone_state, (6, 4, 4, 4, 4, 4, 2, 3)),
    ],
)
def test_fast_constructors_put_each_value_in_its_own_field(
    record: type, build: object, sizes: tuple[int, ...]
) -> None:
    # A distinct marker per field: a value stored in the wrong field cannot go unseen (two
    # fields of equal value could hide it in the test above).
    names = [f.name for f in dataclasses.fields(record) if f.name != "cooling"]
    groups: list[object] = []
    start = 0
    for size in sizes:
        groups.append(tuple(f"marker-{name}" for name in names[start : start + size]))
        start += size
    # a one-field group that is the value itself, not a tuple: the point's name, the
    # outputs' reliability
    alone = {PointState: 0, ZoneOutputs: 2}.get(record)
    if alone is not None:
        groups[alone] = groups[alone][0]  # type: ignore[index]
    built = build(*groups)  # type: ignore[operator]
    assert type(built) is record
    assert {name: getattr(built, name) for name in names} == {n: f"marker-{n}" for n in names}
    with pytest.raises(dataclasses.FrozenInstanceError):
        setattr(built, names[-1], None)


def _sections(obj: object, sizes: tuple[int, ...]) -> list[tuple[object, ...]]:
    """The record's field values in order, cut into sections of ``sizes`` (the cooling part,
    which the dual controller adds to a built record, left out: None in a heating zone)."""
    values = [
        getattr(obj, f.name)
        for f in dataclasses.fields(obj)  # type: ignore[arg-type]
        if f.name != "cooling"
    ]
    assert sum(sizes) == len(values)
    out, start = [], 0
    for size in sizes:
        out.append(tuple(values[start : start + size]))
        start += size
    return out
