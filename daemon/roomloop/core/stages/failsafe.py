"""Entering and leaving fail-safe, and the learned-duty history that fail-safe may run on.

Fail-safe starts when the zone has had no trusted temperature for ``sensor_timeout_s``
and ends when a trusted temperature has lasted ``fail_safe_recovery_s``. Until it
starts the zone *coasts* on its last trusted temperature (:mod:`.relay`). The policies
and the duty they run with are :mod:`roomloop.core.failsafe`.
"""

from __future__ import annotations

from ..failsafe import BUCKET_S, Bucket, choose_duty, duty_wants_on, record_duty
from ..settings import ZoneSettings
from ..state import ZoneState

FailSafe = tuple[bool, float | None, float | None, str | None, bool]
"""(in fail-safe, since, duty, why, left fail-safe this tick)"""


def judge(
    s: ZoneSettings, state: ZoneState, good_at: float, good_since: float | None, now: float
) -> FailSafe:
    """Fail-safe after this tick; ``good_at``, ``good_since`` as :func:`.points.remember` gives
    them (``good_since`` is None exactly while there is no trusted temperature)."""
    if state.fail_safe:
        if good_since is not None and now - good_since >= s.fail_safe_recovery_s:
            return False, None, None, None, True
    elif good_since is None and now - good_at >= s.sensor_timeout_s:
        duty, why = choose_duty(
            s.fail_safe_policy, state.duty_buckets, state.duty_current, now,
            duty=s.fail_safe_duty, period_s=s.fail_safe_period_s,
            learn_hours=s.learn_hours, min_duty=s.min_duty, max_duty=s.max_duty,
        )
        return True, now, duty, f"no reliable temperature for {now - good_at:.0f} s; {why}", False
    return (
        state.fail_safe, state.fail_safe_since, state.fail_safe_duty, state.fail_safe_reason,
        False,
    )


def wants_on(s: ZoneSettings, since: float | None, duty: float | None, now: float) -> bool:
    """The policy's wish: on for the first ``duty x period`` of each period since it began."""
    assert since is not None and duty is not None
    return duty_wants_on(since, now, duty, s.fail_safe_period_s)


def learn(
    state: ZoneState, relay_on_s: float, dt: float, now: float, learn_s: float
) -> tuple[tuple[Bucket, ...], Bucket]:
    """The learned-duty history with the elapsed tick, if the tick was ordinary control."""
    if state.normal and dt > 0.0:
        start, on, seen = state.duty_current
        if start <= now < start + BUCKET_S:  # the open bucket goes on (record_duty's own case)
            return state.duty_buckets, (start, on + relay_on_s, seen + dt)
        return record_duty(
            state.duty_buckets, state.duty_current,
            at=now, on_s=relay_on_s, seen_s=dt, learn_s=learn_s,
        )
    return state.duty_buckets, state.duty_current
