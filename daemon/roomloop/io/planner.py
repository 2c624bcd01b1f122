"""Read coalescing: cover a link's input points with the fewest Modbus reads.

Planned once at start. Points of one unit id and one table are sorted by
address and taken greedily: a read grows while the next point still fits in
``max_registers`` (125, the Modbus Application Protocol V1.1b3 limit for one
read) and the unused registers between the two are at most ``max_gap``.
Greedy left to right is optimal for this covering problem: any read that ends
earlier can only force more reads later.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Literal

from roomloop.config.models import ModbusInput

MAX_READ_REGISTERS = 125
"""Modbus Application Protocol V1.1b3: 1 to 125 registers per read (function codes 3 and 4)."""

Table = Literal["input", "holding"]


@dataclass(frozen=True, slots=True)
class Slice:
    """Where one point sits inside a read: ``registers[offset : offset + count]``."""

    point: ModbusInput
    offset: int

    @property
    def count(self) -> int:
        return self.point.registers


@dataclass(frozen=True, slots=True)
class Read:
    """One read request: unit, table, first address, register count, and the points it serves."""

    unit_id: int
    table: Table
    address: int
    count: int
    slices: tuple[Slice, ...]

    @property
    def point_names(self) -> tuple[str, ...]:
        return tuple(s.point.name for s in self.slices)


def plan_reads(
    points: Iterable[ModbusInput],
    max_gap: int,
    max_registers: int = MAX_READ_REGISTERS,
) -> tuple[Read, ...]:
    """The fewest reads covering ``points``: per (unit, table), no read over ``max_registers``."""
    if not 1 <= max_registers <= MAX_READ_REGISTERS:
        raise ValueError(f"max_registers must be 1..{MAX_READ_REGISTERS}")
    if max_gap < 0:
        raise ValueError("max_gap must not be negative")
    groups: dict[tuple[int, str], list[ModbusInput]] = {}
    for point in points:
        groups.setdefault((point.unit_id, point.table), []).append(point)
    reads: list[Read] = []
    for (unit_id, table), members in sorted(groups.items()):
        members.sort(key=lambda p: (p.address, p.name))
        current: list[ModbusInput] = []
        start = end = 0  # end is one past the last register of the current read
        for point in members:
            stop = point.address + point.registers
            if current:
                gap = point.address - end
                if gap <= max_gap and max(stop, end) - start <= max_registers:
                    current.append(point)
                    end = max(end, stop)
                    continue
                reads.append(_read(unit_id, table, start, end, current))
            current, start, end = [point], point.address, stop
        if current:
            reads.append(_read(unit_id, table, start, end, current))
    return tuple(reads)


def _read(unit_id: int, table: str, start: int, end: int, points: list[ModbusInput]) -> Read:
    slices = tuple(Slice(p, p.address - start) for p in points)
    return Read(unit_id, "input" if table == "input" else "holding", start, end - start, slices)
