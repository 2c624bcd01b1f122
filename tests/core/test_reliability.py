"""Point reliability, one verdict at a time (vocabulary: BACnet reliability, ASHRAE 135)."""

from __future__ import annotations

from collections.abc import Sequence

from roomloop.core.reliability import evaluate_point
from roomloop.core.settings import PointSettings
from roomloop.core.state import PointState
from roomloop.core.types import PointSample

CFG = PointSettings(
    "t1", valid_low_c=-55.0, valid_high_c=125.0, stale_after_s=120.0, max_rate_k_per_min=2.0,
    stuck_after_s=600.0, resolution_k=0.1, recovery_s=60.0,
)


def feed(readings: Sequence[tuple[float, float | None]], relay_on_s: float = 0.0,
         cfg: PointSettings = CFG) -> list[PointState]:
    """Judge a reading per tick (time, value); ``None`` is a failed poll."""
    st = PointState("t1")
    out = []
    last = readings[0][0]
    for now, value in readings:
        sample = (PointSample("t1", None, None, "comm-failure") if value is None
                  else PointSample("t1", value, now))
        st = evaluate_point(cfg, st, sample, now, relay_on_s if now > last else 0.0)
        last = now
        out.append(st)
    return out


def test_good_readings_are_trusted_at_once_after_start() -> None:
    states = feed([(10.0, 20.0), (20.0, 20.1)])
    assert [s.reliability for s in states] == ["ok", "ok"]


def test_range_checks() -> None:
    assert feed([(10.0, -60.0)])[0].reliability == "under-range"
    assert feed([(10.0, 130.0)])[0].reliability == "over-range"


def test_transport_verdicts_pass_through() -> None:
    st = evaluate_point(CFG, PointState("t1"), PointSample("t1", 20.0, 10.0, "over-range"), 10.0, 0)
    assert st.reliability == "over-range"
    st = evaluate_point(CFG, st, PointSample("t1", None, None, "comm-failure"), 20.0, 0)
    assert st.reliability == "comm-failure"


def test_stale_after_the_timeout() -> None:
    st = evaluate_point(CFG, PointState("t1"), PointSample("t1", 20.0, 0.0), 0.0, 0)
    st = evaluate_point(CFG, st, PointSample("t1", 20.0, 0.0), 120.0, 0)
    assert st.reliability == "ok"
    st = evaluate_point(CFG, st, PointSample("t1", 20.0, 0.0), 121.0, 0)
    assert st.reliability == "stale"


def test_power_on_85_is_implausible_and_recovery_takes_its_time() -> None:
    """REFERENCES.md: a DS18B20-type probe reads 85.0 C at power-on [published: datasheet];
    85.0 is inside its -55..125 C range, so only the rate of change can catch it."""
    readings = [(t * 10.0, 21.0) for t in range(1, 6)] + [(60.0, 85.0)]
    readings += [(60.0 + t * 10.0, 21.0) for t in range(1, 10)]
    states = feed(readings)
    assert states[5].reliability == "implausible"
    assert states[5].value == 21.0  # the spike never becomes the accepted value
    # back at 70 s; trusted again once good for recovery_s = 60 s (at 130 s)
    by_time = {t: s.reliability for (t, _), s in zip(readings, states, strict=True)}
    assert by_time[120.0] == "implausible" and by_time[130.0] == "ok"


def test_a_real_step_is_accepted_once_the_time_makes_it_plausible() -> None:
    # 3 K step held: plausible after 3 K / 2 K/min = 90 s since the last accepted reading
    readings = [(0.0, 20.0)] + [(t * 10.0, 23.0) for t in range(1, 20)]
    states = feed(readings)
    first_ok_value = next(t for (t, _), s in zip(readings, states, strict=True) if s.value == 23.0)
    assert first_ok_value == 90.0


def test_stuck_counts_relay_on_time_only() -> None:
    readings = [(t * 10.0, 20.0) for t in range(0, 200)]
    # relay off all along: never stuck
    assert all(s.reliability == "ok" for s in feed(readings, relay_on_s=0.0))
    # relay on all along: stuck once 600 s of on-time passed without a 0.1 K move
    states = feed(readings, relay_on_s=10.0)
    first_stuck = next(
        t for (t, _), s in zip(readings, states, strict=True) if s.verdict == "stuck"
    )
    assert first_stuck == 600.0


def test_moving_by_the_resolution_resets_stuck() -> None:
    readings = [(t * 10.0, 20.0 + (0.1 if (t // 30) % 2 else 0.0)) for t in range(0, 200)]
    assert all(s.reliability == "ok" for s in feed(readings, relay_on_s=10.0))
    # a move below the resolution is no move
    readings = [(t * 10.0, 20.0 + (0.05 if t % 2 else 0.0)) for t in range(0, 200)]
    assert any(s.reliability == "stuck" for s in feed(readings, relay_on_s=10.0))
