"""Read coalescing: fewest reads, the 125-register limit, bridged gaps."""

from __future__ import annotations

from typing import Any

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from roomloop.config.models import ModbusInput
from roomloop.io.planner import MAX_READ_REGISTERS, plan_reads


def point(name: str, address: int, data_type: str = "int16", **fields: Any) -> ModbusInput:
    return ModbusInput(
        type="modbus-input", name=name, link="l", address=address, data_type=data_type, **fields
    )


def test_modbus_read_limit_is_125() -> None:
    # REFERENCES.md: Modbus Application Protocol V1.1b3, 1 to 125 registers per read [published]
    assert MAX_READ_REGISTERS == 125


def test_adjacent_points_make_one_read() -> None:
    plan = plan_reads([point("a", 10), point("b", 11), point("c", 12, "float32")], max_gap=0)
    assert len(plan) == 1
    read = plan[0]
    assert (read.address, read.count) == (10, 4)
    assert [(s.point.name, s.offset) for s in read.slices] == [("a", 0), ("b", 1), ("c", 2)]


def test_gap_bridged_up_to_max_gap_only() -> None:
    points = [point("a", 0), point("b", 9)]  # 8 unused registers between them
    assert len(plan_reads(points, max_gap=8)) == 1
    assert len(plan_reads(points, max_gap=7)) == 2


def test_units_and_tables_never_share_a_read() -> None:
    points = [
        point("a", 0),
        point("b", 1, unit_id=2),
        point("c", 2, table="holding"),
        point("d", 3),
    ]
    plan = plan_reads(points, max_gap=8)
    assert sorted((r.unit_id, r.table, r.point_names) for r in plan) == [
        (1, "holding", ("c",)),
        (1, "input", ("a", "d")),
        (2, "input", ("b",)),
    ]


def test_long_runs_are_split_at_125_registers() -> None:
    points = [point(f"p{i}", i) for i in range(300)]
    plan = plan_reads(points, max_gap=0)
    assert [r.count for r in plan] == [125, 125, 50]
    # a float32 that would straddle the limit starts the next read
    plan = plan_reads([point("a", 0), point("b", 123, "float32"), point("c", 124)], max_gap=8)
    assert all(r.count <= 125 for r in plan)
    assert sum(len(r.slices) for r in plan) == 3


def test_overlapping_points_share_registers() -> None:
    plan = plan_reads([point("lo", 100, "int16"), point("both", 100, "int32")], max_gap=0)
    assert len(plan) == 1 and plan[0].count == 2


def test_bad_limits_refused() -> None:
    with pytest.raises(ValueError):
        plan_reads([], max_gap=0, max_registers=126)
    with pytest.raises(ValueError):
        plan_reads([], max_gap=-1)


def _minimum_reads(spans: list[tuple[int, int]], max_gap: int, limit: int) -> int:
    """Independent reference: dynamic programme over sorted points (every split point tried)."""
    spans = sorted(spans)
    n = len(spans)
    best = [0] + [n + 1] * n
    for end in range(1, n + 1):
        for start in range(end):
            group = spans[start:end]
            lo = group[0][0]
            hi = max(s + c for s, c in group)
            covered = group[0][0] + group[0][1]
            ok = hi - lo <= limit
            for s, c in group[1:]:
                ok = ok and s - covered <= max_gap
                covered = max(covered, s + c)
            if ok:
                best[end] = min(best[end], best[start] + 1)
    return best[n]


@settings(max_examples=200, deadline=None)
@given(
    addresses=st.lists(
        st.tuples(st.integers(0, 400), st.sampled_from(["int16", "float32"])),
        min_size=1,
        max_size=25,
    ),
    max_gap=st.integers(0, 20),
    limit=st.integers(2, 125),
)
def test_plan_is_valid_and_minimal(
    addresses: list[tuple[int, str]], max_gap: int, limit: int
) -> None:
    points = [point(f"p{i}", a, t) for i, (a, t) in enumerate(addresses)]
    plan = plan_reads(points, max_gap=max_gap, max_registers=limit)
    served = [s.point.name for r in plan for s in r.slices]
    assert sorted(served) == sorted(p.name for p in points)  # every point exactly once
    for read in plan:
        assert 1 <= read.count <= limit
        for part in read.slices:
            assert read.address + part.offset == part.point.address
            assert part.offset + part.count <= read.count
    spans = [(p.address, p.registers) for p in points]
    assert len(plan) == _minimum_reads(spans, max_gap, limit)
