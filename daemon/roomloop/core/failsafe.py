"""Fail-safe: what a zone does while it has no reliable temperature.

The controller enters fail-safe when no trusted zone temperature has been seen
for ``sensor_timeout_s`` and leaves it only after a trusted temperature has
lasted ``fail_safe_recovery_s``. In between, one of three policies drives the
relay:

- ``off``: no heat;
- ``fixed-duty``: on for ``duty x period_s`` at the start of every period,
  counted from the moment fail-safe began;
- ``learned-duty``: the same, with the duty the zone itself ran at during the
  last ``learn_hours`` of ordinary control, clamped to ``[min_duty, max_duty]``;
  with less than one period of history it falls back to ``duty``.

Short-cycle protection still applies to the policy's wishes (the controller
does that), and protection from the backup point, when one is configured and
trusted, overrides them.

The learned history is compact: on-seconds and counted seconds per
:data:`BUCKET_S` bucket, at most ``learn_hours x 3600 / BUCKET_S + 1`` buckets.
Only ordinary control counts (mode auto or hold, a trusted temperature, not in
fail-safe), so the duty reflects the heat the zone really needed.
"""

from __future__ import annotations

import math

BUCKET_S = 900.0
"""Width of one learned-duty history bucket (s)."""

Bucket = tuple[float, float, float]
"""(bucket start, on seconds, counted seconds)."""


def record_duty(
    buckets: tuple[Bucket, ...],
    current: Bucket,
    *,
    at: float,
    on_s: float,
    seen_s: float,
    learn_s: float,
) -> tuple[tuple[Bucket, ...], Bucket]:
    """Add ``seen_s`` counted seconds (``on_s`` of them relay-on) ending at ``at``.

    The interval goes into the bucket that holds ``at``; when ``at`` has passed the
    open bucket, that bucket is closed and buckets older than ``learn_s`` dropped.
    """
    if seen_s <= 0.0:
        return buckets, current
    start = current[0]
    if start <= at < start + BUCKET_S:
        return buckets, (start, current[1] + on_s, current[2] + seen_s)
    new_start = math.floor(at / BUCKET_S) * BUCKET_S
    if current[2] > 0:
        buckets = (*buckets, current)
    horizon = at - learn_s - BUCKET_S
    if buckets and buckets[0][0] < horizon:
        buckets = tuple(b for b in buckets if b[0] >= horizon)
    return buckets, (new_start, on_s, seen_s)


def learned_fraction(
    buckets: tuple[Bucket, ...], current: Bucket, now: float, learn_s: float
) -> tuple[float, float]:
    """Measured on-fraction of the last ``learn_s`` (to a bucket) and the seconds it covers.

    The open bucket is filtered by age like the closed ones: it may be days old
    when the zone has not run ordinary control since (mode off, a long fail-safe).
    """
    on = 0.0
    seen = 0.0
    oldest = now - learn_s
    for start, on_s, seen_s in (*buckets, current):
        if start + BUCKET_S > oldest:
            on += on_s
            seen += seen_s
    return (on / seen if seen > 0 else 0.0), seen


def choose_duty(
    policy: str,
    buckets: tuple[Bucket, ...],
    current: Bucket,
    now: float,
    *,
    duty: float,
    period_s: float,
    learn_hours: float,
    min_duty: float,
    max_duty: float,
) -> tuple[float, str]:
    """The duty a fail-safe policy runs with, and the words that say why."""
    if policy == "off":
        return 0.0, "policy off: no heat"
    if policy == "fixed-duty":
        return duty, f"fixed duty {duty:.0%} of {period_s:g} s"
    fraction, seen = learned_fraction(buckets, current, now, learn_hours * 3600.0)
    if seen < period_s:
        return duty, (
            f"learned duty unavailable ({seen:.0f} s of history); fixed duty {duty:.0%} "
            f"of {period_s:g} s"
        )
    clamped = min(max(fraction, min_duty), max_duty)
    return clamped, (
        f"learned duty {clamped:.0%} of {period_s:g} s (measured {fraction:.1%} over "
        f"{seen / 3600.0:.1f} h)"
    )


def duty_wants_on(since: float, now: float, duty: float, period_s: float) -> bool:
    """Duty cycling: on for the first ``duty x period_s`` of each period counted from ``since``."""
    if duty <= 0.0:
        return False
    if duty >= 1.0:
        return True
    phase = (now - since) % period_s
    return phase < duty * period_s
