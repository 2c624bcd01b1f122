"""The pure optimum-start planner (roomloop.core.optimum_start): when an early start begins,
what it never does, and the learned model's record."""

from __future__ import annotations

import json
import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from roomloop.core.optimum_start import (
    MAX_RATE_K_PER_H,
    MIN_RATE_K_PER_H,
    REACHED_K,
    Band,
    OptimumStartInputs,
    OptimumStartSettings,
    OptimumStartState,
    WarmUpModel,
    lead_s,
    plan,
)

SWITCH = 1_767_340_800.0  # some 07:00 UTC; only differences matter
SETPOINTS = {"comfort": 20.0, "standby": 18.0, "economy": 17.0, "protection": 7.0}
LEVELS = tuple(SETPOINTS)


def _settings(**kw: float | bool) -> OptimumStartSettings:
    base: dict[str, object] = {
        "enabled": True, "earliest_s": 3 * 3600.0, "initial_rate_k_per_h": 2.0,
        "dead_time_s": 600.0, "setpoints": tuple(SETPOINTS.items()),
    }
    base.update(kw)
    return OptimumStartSettings(**base)  # type: ignore[arg-type]


def _inputs(
    temperature: float | None = 17.0, *, mode: str = "auto", level: str = "economy",
    target: str = "comfort", outdoor: float | None = None, switch_at: float = SWITCH,
) -> OptimumStartInputs:
    return OptimumStartInputs(
        mode=mode, scheduled_level=level, next_switch_at=switch_at,  # type: ignore[arg-type]
        next_level=target, temperature_c=temperature, outdoor_c=outdoor,  # type: ignore[arg-type]
    )


def _first_early(
    cfg: OptimumStartSettings, state: OptimumStartState, inputs: OptimumStartInputs,
    tick_s: float = 10.0, back_s: float = 86400.0,
) -> float | None:
    """Tick from ``back_s`` before the switch up to it; the first instant the plan starts early."""
    t = SWITCH - back_s
    while t < SWITCH:
        state, decision = plan(cfg, state, inputs, t)
        if decision.early:
            return t
        t += tick_s
    return None


def test_lead_is_dead_time_plus_gap_over_rate() -> None:
    """3 K at 2 K/h is 90 min, plus 10 min dead time: the early start begins 100 min before.

    The gap is to the set point less REACHED_K (the plan aims at the same temperature a
    warm-up counts as reached at): 20 - 0.1 - 17.1 = 2.8 K, 84 min + 10 min = 94 min."""
    assert lead_s(3.0, 2.0, 600.0) == pytest.approx(6000.0)
    assert lead_s(0.0, 2.0, 600.0) == 0.0
    begin = _first_early(_settings(), OptimumStartState(), _inputs(17.1))
    assert begin is not None
    expected = SWITCH - (600.0 + 3600.0 * (20.0 - REACHED_K - 17.1) / 2.0)
    assert expected <= begin < expected + 10.0


def test_cap_at_the_earliest_start() -> None:
    """A gap the rate cannot close in time starts exactly at the earliest start, and says so."""
    cfg = _settings(earliest_s=3600.0, initial_rate_k_per_h=0.5)
    state = OptimumStartState()
    begin = None
    t = SWITCH - 7200.0
    while t < SWITCH:
        state, decision = plan(cfg, state, _inputs(16.0), t)
        if decision.early:
            begin = t
            assert "capped" in decision.reason
            break
        t += 10.0
    assert begin == SWITCH - 3600.0


def test_early_start_lasts_until_the_switch() -> None:
    """Once begun it holds the warmer level even when the room is warm early (no flicker)."""
    cfg = _settings()
    state, decision = plan(cfg, OptimumStartState(), _inputs(17.0), SWITCH - 5000.0)
    assert decision.early and decision.level == "comfort"
    since = decision.since
    state, decision = plan(cfg, state, _inputs(19.95), SWITCH - 100.0)
    assert decision.early and decision.level == "comfort" and decision.since == since
    assert "K/h" in decision.reason and decision.to_dict()["since"] == since
    # after the switch the program itself is at comfort: no early start any more
    after = _inputs(19.95, level="comfort", target="economy", switch_at=SWITCH + 15 * 3600)
    state, decision = plan(cfg, state, after, SWITCH + 10.0)
    assert not decision.early and decision.level == "comfort"


def test_disabled_and_no_temperature_start_nothing_early() -> None:
    for cfg, inputs in (
        (_settings(enabled=False), _inputs(17.0)),
        (_settings(), _inputs(None)),
    ):
        assert _first_early(cfg, OptimumStartState(), inputs) is None


@settings(max_examples=200, deadline=None)
@given(
    temperature=st.floats(5.0, 25.0),
    rate=st.floats(MIN_RATE_K_PER_H, MAX_RATE_K_PER_H),
    earliest=st.floats(0.0, 6 * 3600.0),
    dead=st.floats(0.0, 3600.0),
    ahead=st.floats(1.0, 10 * 3600.0),
    level=st.sampled_from(LEVELS),
    target=st.sampled_from(LEVELS),
    mode=st.sampled_from(("auto", "hold", "off")),
    latched=st.booleans(),
)
def test_never_before_earliest_never_outside_auto_never_cooler(
    *, temperature: float, rate: float, earliest: float, dead: float, ahead: float,
    level: str, target: str, mode: str, latched: bool,
) -> None:
    """The planner's three promises, on any state it can be in."""
    cfg = _settings(earliest_s=earliest, dead_time_s=dead, initial_rate_k_per_h=rate)
    state = OptimumStartState()
    inputs = _inputs(temperature, mode=mode, level=level, target=target)
    if latched:  # an early start already running (any time), then a tick at ``now``
        state, _ = plan(cfg, state, _inputs(5.0), SWITCH - earliest)
    now = SWITCH - ahead
    state, decision = plan(cfg, state, inputs, now)
    if decision.early:
        assert mode == "auto"
        assert SETPOINTS[target] > SETPOINTS[level]
        assert decision.since is not None
        assert decision.since >= SWITCH - earliest
        assert now >= SWITCH - earliest
        assert decision.level == target
    else:
        assert decision.level == level


def test_warm_up_measured_from_start_to_set_point() -> None:
    """A warm-up from 17.0 that dips to 16.9, is 0.2 K above that (17.1) 10 min after the start
    and reaches 19.9 (20 - REACHED_K) 90 min later: dead time 600 s, rate 2.8 K / 1.5 h."""
    cfg = _settings(enabled=False)

    def comfort(temperature: float) -> OptimumStartInputs:
        return _inputs(temperature, level="comfort", target="economy", switch_at=1e9)

    state, _ = plan(cfg, OptimumStartState(), _inputs(17.0, level="economy"), 0.0)
    state, _ = plan(cfg, state, comfort(17.0), 10.0)
    assert state.warm_up is not None and state.warm_up.start_c == 17.0
    for t, temperature in ((200.0, 16.9), (400.0, 17.0), (610.0, 17.1), (3000.0, 19.0)):
        state, _ = plan(cfg, state, comfort(temperature), t)
        assert state.warm_up is not None
    assert state.warm_up is not None and state.warm_up.rose_at == 610.0
    state, _ = plan(cfg, state, comfort(19.9), 6010.0)
    assert state.warm_up is None
    assert state.last_rate_k_per_h == pytest.approx(2.8 / 1.5)
    rate, source = state.model.rate_at(None, 99.0)
    assert rate == pytest.approx(2.8 / 1.5) and "1 warm-up" in source
    assert state.model.dead_time_or(1.0) == pytest.approx(600.0)


def test_interrupted_warm_up_teaches_nothing() -> None:
    cfg = _settings(enabled=False)
    state, _ = plan(cfg, OptimumStartState(), _inputs(17.0, level="economy"), 0.0)
    state, _ = plan(cfg, state, _inputs(17.0, level="comfort", switch_at=1e9), 10.0)
    assert state.warm_up is not None
    state, _ = plan(cfg, state, _inputs(18.0, mode="hold", level="comfort", switch_at=1e9), 900.0)
    assert state.warm_up is None and state.model.bands == ()


def test_model_bands_interpolate_and_fall_back() -> None:
    model = WarmUpModel().learned(1.0, -7.0).learned(3.0, 8.0)  # bands -2 and 1
    assert model.rate_at(-6.0, 9.0)[0] == pytest.approx(1.0)  # own band
    # linear between the band centres -7.5 C and +7.5 C
    assert model.rate_at(0.0, 9.0)[0] == pytest.approx(2.0)
    assert model.rate_at(2.5, 9.0)[0] == pytest.approx(1.0 + 2.0 * (10.0 / 15.0))
    assert model.rate_at(20.0, 9.0)[0] == pytest.approx(3.0)  # warmer than any: nearest
    # colder than any learned band: the line goes on, down to half the slowest band
    assert model.rate_at(-11.0, 9.0)[0] == pytest.approx(1.0 - 3.5 * 2.0 / 15.0)
    assert model.rate_at(-20.0, 9.0)[0] == pytest.approx(0.5)
    # a line that falls as it gets warmer is noise: the nearest band, never faster when colder
    falling = WarmUpModel().learned(3.0, -7.0).learned(1.0, 8.0)
    assert falling.rate_at(2.5, 9.0)[0] == pytest.approx(1.0)
    assert falling.rate_at(-20.0, 9.0)[0] == pytest.approx(2.0)  # min(band 3.0, overall 2.0)
    assert model.rate_at(None, 9.0)[0] == pytest.approx(2.0)  # overall mean of both
    assert WarmUpModel().rate_at(0.0, 1.7) == (1.7, "initial value of the heating type")


def test_one_bad_morning_cannot_undo_a_week() -> None:
    model = WarmUpModel()
    for _ in range(5):
        model = model.learned(2.0, None)
    model = model.learned(MAX_RATE_K_PER_H, None)  # a window opened, a sensor jumped
    rate = model.rate_at(None, 1.0)[0]
    assert rate <= 2.0 + 0.3 * (2.0 * 2.0 - 2.0) + 1e-9  # clamped to 2x, then weight 0.3


@settings(max_examples=100, deadline=None)
@given(
    samples=st.lists(
        st.tuples(st.floats(MIN_RATE_K_PER_H, MAX_RATE_K_PER_H),
                  st.one_of(st.none(), st.floats(-30.0, 30.0))),
        max_size=20,
    )
)
def test_model_json_round_trip(samples: list[tuple[float, float | None]]) -> None:
    model = WarmUpModel()
    for rate, outdoor in samples:
        model = model.learned(rate, outdoor)
    back = WarmUpModel.from_json(model.to_json())
    assert [b.index for b in back.bands] == [b.index for b in model.bands]
    for a, b in zip(back.bands, model.bands, strict=True):
        assert a.count == b.count and math.isclose(a.rate_k_per_h, b.rate_k_per_h, rel_tol=1e-5)


@pytest.mark.parametrize(
    "text",
    [
        "not json",
        "[]",
        json.dumps({"version": 2, "bands": []}),
        json.dumps({"version": 1, "bands": [{"band": 0, "rate_k_per_h": -1.0, "count": 1}]}),
        json.dumps({"version": 1, "bands": [{"band": 0, "rate_k_per_h": 1.0, "count": 0}]}),
        json.dumps({"version": 1, "bands": [{"band": "x", "rate_k_per_h": 1.0, "count": 1}]}),
        json.dumps({"version": 1, "bands": [{"band": 1, "rate_k_per_h": 1.0, "count": 1}] * 2}),
    ],
)
def test_malformed_model_is_refused(text: str) -> None:
    with pytest.raises(ValueError):
        WarmUpModel.from_json(text)


def test_band_record_is_frozen() -> None:
    band = Band(0, 1.0, 1)
    with pytest.raises(AttributeError):
        band.count = 2  # type: ignore[misc]


@settings(max_examples=60, deadline=None)
@given(
    steps=st.lists(
        st.tuples(
            st.floats(1.0, 1800.0),  # tick length
            st.floats(5.0, 25.0),  # zone temperature
            st.sampled_from(("auto", "auto", "auto", "hold", "off")),
            st.one_of(st.none(), st.floats(-20.0, 20.0)),  # outdoor
        ),
        min_size=1,
        max_size=60,
    ),
    earliest=st.floats(0.0, 5 * 3600.0),
    rate=st.floats(MIN_RATE_K_PER_H, MAX_RATE_K_PER_H),
)
def test_sequences_keep_the_promises(
    steps: list[tuple[float, float, str, float | None]], earliest: float, rate: float
) -> None:
    """Along any run of ticks toward a switch (any tick lengths, temperatures, modes), every
    early decision lies inside the earliest start, in mode auto, toward the warmer level."""
    cfg = _settings(earliest_s=earliest, initial_rate_k_per_h=rate)
    state = OptimumStartState()
    t = SWITCH - 8 * 3600.0
    for dt_s, temperature, mode, outdoor in steps:
        t += dt_s
        if t >= SWITCH:
            break
        state, decision = plan(cfg, state, _inputs(temperature, mode=mode, outdoor=outdoor), t)
        if decision.early:
            assert mode == "auto" and decision.level == "comfort"
            assert decision.since is not None and SWITCH - earliest <= decision.since <= t
        else:
            assert decision.level == "economy"


def test_a_jump_to_the_set_point_teaches_nothing() -> None:
    """A reading that jumps from 17 to 20 in one tick (a sensor swapped, a probe in the sun) is no
    warm-up: there was no first 0.2 K rise to end a dead time."""
    cfg = _settings(enabled=False)
    state, _ = plan(cfg, OptimumStartState(), _inputs(17.0, level="economy"), 0.0)
    state, _ = plan(cfg, state, _inputs(17.0, level="comfort", switch_at=1e9), 10.0)
    state, _ = plan(cfg, state, _inputs(17.1, level="comfort", switch_at=1e9), 600.0)
    state, _ = plan(cfg, state, _inputs(20.0, level="comfort", switch_at=1e9), 610.0)
    assert state.warm_up is None and state.model == WarmUpModel()
