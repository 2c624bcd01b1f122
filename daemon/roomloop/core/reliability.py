"""Point reliability: may this reading be used to control the zone?

Pure functions over :class:`~roomloop.core.state.PointState`; the vocabulary is
BACnet's reliability property (ASHRAE 135, REFERENCES.md). This is the only place
that judges a reading: the I/O layer and the simulator deliver transport facts only
(:class:`~roomloop.core.types.PointSample`). A reading's verdict is, in order:

1. the I/O layer's transport verdict (``comm-failure``, or ``over-range`` /
   ``under-range`` when it saw a configured raw sentinel);
2. ``under-range`` / ``over-range`` against the point's valid range (a value outside
   it is never used, however fresh or old);
3. ``stale`` when the reading is older than ``stale_after_s`` (judged every tick);
   a reading judged before (the same ``received_at``) keeps its verdict;
4. ``implausible`` when it moved away from the last accepted reading faster than
   ``max_rate_k_per_min`` (a probe's power-on 85.0 C is the classic case,
   REFERENCES.md). The rate is taken against the last *accepted* reading over
   the time since then, so a real but sudden change is accepted once the time
   since the last good reading makes it plausible;
5. ``stuck`` when the value has not moved by at least ``resolution_k`` for
   ``stuck_after_s`` seconds *of relay-on time* (a heated room moves; a frozen
   transmitter does not). Relay-off time does not count, so a zone that idles
   in mild weather is never called stuck.

After any fault the point must read ``ok`` for ``recovery_s`` before it is
trusted again; meanwhile the published reliability keeps the fault's name. A
point that has simply not delivered its first reading yet is ``stale`` but not
faulted, so start-up needs no recovery time.
"""

from __future__ import annotations

from .records import point_state as _new_point
from .settings import PointSettings
from .state import PointState
from .types import PointSample, Reliability, Transport


def reading_verdict(cfg: PointSettings, value: float | None, transport: Transport) -> Reliability:
    """What one reading says on its own: the transport verdict, else the range (``probe``
    shows it; :func:`evaluate_point` adds staleness, rate, stuck and recovery over time)."""
    if transport != "ok":
        return transport
    if value is None:
        return "stale"
    if value < cfg.valid_low_c:
        return "under-range"
    if value > cfg.valid_high_c:
        return "over-range"
    return "ok"


def evaluate_point(  # noqa: PLR0912, PLR0915 - the verdicts in their order; per point per tick
    cfg: PointSettings,
    st: PointState,
    sample: PointSample | None,
    now: float,
    relay_on_s: float,
) -> PointState:
    """Judge one point at ``now``; ``relay_on_s`` is the relay-on time since the previous step."""
    still_value = st.still_value
    still_on_s = st.still_on_s + relay_on_s
    value = st.value
    value_at = st.value_at
    seen_at = st.seen_at
    verdict: Reliability
    if sample is None or sample.value is None or sample.received_at is None:
        transport = "stale" if sample is None else sample.transport
        verdict = transport if transport != "ok" else "stale"
        if verdict == "stale" and value is None and not st.faulted:
            # Nothing delivered yet since start: not a fault.
            return _new_point(
                cfg.name, ("stale", "stale"), (None, None, None), (None, 0.0), (None, False)
            )
    else:
        received_at = sample.received_at
        reading = sample.value
        if sample.transport != "ok":
            verdict = sample.transport
            seen_at = received_at
        elif reading < cfg.valid_low_c:
            verdict = "under-range"
            seen_at = received_at
        elif reading > cfg.valid_high_c:
            verdict = "over-range"
            seen_at = received_at
        elif now - received_at > cfg.stale_after_s:
            verdict = "stale"
        elif seen_at is not None and received_at <= seen_at:
            # The same reading again: keep its verdict, but stuck time runs on.
            verdict = st.verdict
            if verdict == "stale":
                verdict = "ok"
            if verdict in ("ok", "stuck") and cfg.stuck_after_s is not None:
                verdict = "stuck" if still_on_s >= cfg.stuck_after_s else "ok"
        else:
            seen_at = received_at
            if (
                value is not None
                and value_at is not None
                and abs(reading - value) * 60.0
                > cfg.max_rate_k_per_min * (received_at - value_at)
            ):
                verdict = "implausible"
            else:
                value = reading
                value_at = received_at
                step = cfg.resolution_k if cfg.resolution_k > 0 else 1e-9
                if still_value is None or abs(reading - still_value) >= step * (1.0 - 1e-9):
                    still_value = reading
                    still_on_s = 0.0
                if cfg.stuck_after_s is not None and still_on_s >= cfg.stuck_after_s:
                    verdict = "stuck"
                else:
                    verdict = "ok"

    if verdict == "ok":
        good_since = st.good_since if st.verdict == "ok" and st.good_since is not None else now
        faulted = st.faulted and now - good_since < cfg.recovery_s
        if faulted:
            reliability: Reliability = st.reliability if st.reliability != "ok" else "stale"
        else:
            reliability = "ok"
        return _new_point(
            cfg.name, (reliability, "ok"), (value, value_at, seen_at), (still_value, still_on_s),
            (good_since, faulted),
        )
    return _new_point(
        cfg.name, (verdict, verdict), (value, value_at, seen_at), (still_value, still_on_s),
        (None, True),
    )
