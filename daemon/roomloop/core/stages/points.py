"""Points and combination: each configured point judged on its own sample, ``T`` from the trusted.

Samples are matched to the zone's configured points by name (the order and any extra
samples do not matter); a point without a sample this tick has no reading. The
judgement itself is :func:`roomloop.core.reliability.evaluate_point`. The trusted values
are combined by the zone's rule: ``mean``, ``median``, ``min`` or ``first-ok`` (the
first trusted point in the configured order).
"""

from __future__ import annotations

from ..reliability import evaluate_point
from ..settings import PointSettings, ZoneSettings
from ..state import PointState, ZoneState
from ..types import PointSample, Reliability, ZoneInputs

Judged = tuple[
    tuple[PointState, ...], dict[str, Reliability], float | None, PointState | None, float | None
]
"""(points, published reliability per point, zone temperature ``T``, backup point, backup value)"""
Remembered = tuple[float | None, float, float | None]
"""(last trusted temperature, when the zone last had one, start of the current stretch with
one or None while there is none)"""


def sample_named(samples: tuple[PointSample, ...], name: str) -> PointSample | None:
    """The sample of the point ``name``, if there is one."""
    for sample in samples:
        if sample.name == name:
            return sample
    return None


def judge(
    s: ZoneSettings, state: ZoneState, inputs: ZoneInputs, now: float, relay_on_s: float
) -> Judged:
    """Every input point (and the backup point) judged at ``now``; ``T`` from the trusted ones.

    ``relay_on_s`` is the relay-on time of the elapsed tick (stuck detection counts it).
    """
    samples = inputs.samples
    old = state.points
    cfgs = s.inputs
    if len(cfgs) == 1 and s.backup is None:
        return _judge_one(cfgs[0], old, samples, now, relay_on_s)
    n_old = len(old)
    points: list[PointState] = []
    values: list[float] = []
    reliability: dict[str, Reliability] = {}
    for i, cfg in enumerate(cfgs):
        name = cfg.name
        memory = old[i] if i < n_old else None
        sample = None
        for candidate in samples:
            if candidate.name == name:
                sample = candidate
                break
        point = evaluate_point(
            cfg,
            memory if memory is not None and memory.name == name else PointState(name),
            sample,
            now,
            relay_on_s,
        )
        points.append(point)
        reliability[point.name] = point.reliability
        if point.reliability == "ok" and point.value is not None:
            values.append(point.value)
    backup = state.backup
    backup_value: float | None = None
    if s.backup is not None:
        name = s.backup.name
        given = inputs.backup
        backup = evaluate_point(
            s.backup,
            backup if backup is not None and backup.name == name else PointState(name),
            given if given is not None and given.name == name else sample_named(samples, name),
            now,
            relay_on_s,
        )
        reliability[name] = backup.reliability
        if backup.reliability == "ok":
            backup_value = backup.value
    return tuple(points), reliability, combine(s.combine, values), backup, backup_value


def _judge_one(
    cfg: PointSettings,
    old: tuple[PointState, ...],
    samples: tuple[PointSample, ...],
    now: float,
    relay_on_s: float,
) -> Judged:
    """:func:`judge` for the common zone: one input point, no backup point."""
    name = cfg.name
    memory = old[0] if old and old[0].name == name else PointState(name)
    if samples and samples[0].name == name:
        sample: PointSample | None = samples[0]
    else:
        sample = sample_named(samples, name)
    point = evaluate_point(cfg, memory, sample, now, relay_on_s)
    reliability = point.reliability
    temperature = point.value if reliability == "ok" else None
    return (point,), {name: reliability}, temperature, None, None


def combine(rule: str, values: list[float]) -> float | None:
    """The zone temperature from the trusted values (in configured order); None if none."""
    if not values:
        return None
    if len(values) == 1 or rule == "first-ok":
        return values[0]
    if rule == "mean":
        return sum(values) / len(values)
    if rule == "min":
        return min(values)
    ordered = sorted(values)
    mid = len(ordered) // 2
    return ordered[mid] if len(ordered) % 2 else 0.5 * (ordered[mid - 1] + ordered[mid])


def remember(state: ZoneState, temperature: float | None, now: float) -> Remembered:
    """The zone rides on its last trusted temperature while readings are missing."""
    if temperature is None:
        return state.temperature, state.good_at, None
    return temperature, now, state.good_since if state.good_since is not None else now
