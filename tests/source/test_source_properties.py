"""Properties of the heat source's step over random demand and random timing (hypothesis).

Whatever the zones do: the minimum on and off times and the starts per sliding hour are
never violated, the pump runs whenever the source fires and for the overrun after, the
source never fires before a calling zone's valve has had its opening time, a call that
lasts a single tick never starts it, it never fires with nobody calling unless its
minimum on time holds it, a restart resumed from the relays as found switches nothing, and
one resumed with the saved history as well gets around no short-cycle limit.
"""

from __future__ import annotations

import itertools

from hypothesis import given, settings
from hypothesis import strategies as st
from source_helpers import T0, Tick, local, run

from roomloop.core.source import (
    SourceInputs,
    SourceLogic,
    SourceMemory,
    SourceSettings,
    ZoneDemand,
)

ZONES = ("a", "b", "c")

timings = st.fixed_dictionaries(
    {
        "valve_opening_s": st.sampled_from([0.0, 10.0, 45.0, 180.0]),
        "pump_pre_run_s": st.sampled_from([0.0, 20.0, 60.0]),
        "pump_overrun_s": st.sampled_from([0.0, 30.0, 180.0]),
        "min_on_s": st.sampled_from([0.0, 25.0, 120.0]),
        "min_off_s": st.sampled_from([0.0, 35.0, 300.0]),
        "max_starts_per_hour": st.integers(1, 12),
        "has_pump": st.booleans(),
    }
)

# Each zone's calls as runs of (ticks, calling) that follow each other.
call_runs = st.lists(
    st.tuples(st.integers(1, 40), st.booleans()), min_size=1, max_size=30
)


def _schedule(runs: list[tuple[int, bool]], ticks: int) -> list[bool]:
    calls: list[bool] = []
    while len(calls) < ticks:
        for length, calling in runs:
            calls += [calling] * length
        if not any(c for _, c in runs):
            break
    return (calls + [False] * ticks)[:ticks]


def _simulate(timing: dict[str, object], per_zone: list[list[tuple[int, bool]]], tick_s: float,
              ticks: int = 500) -> tuple[SourceSettings, list[Tick], dict[str, list[bool]]]:
    settings_ = SourceSettings(name="s", zones=ZONES, **timing)  # type: ignore[arg-type]
    calls = {z: _schedule(runs, ticks) for z, runs in zip(ZONES, per_zone, strict=True)}

    def demands(now: float) -> list[ZoneDemand]:
        k = round((now - T0) / tick_s)
        return [local(z, calls[z][k], now) for z in ZONES]

    return settings_, run(settings_, demands, ticks=ticks, tick_s=tick_s), calls


def _runs(ticks: list[Tick]) -> list[tuple[float, float | None]]:
    """(start, stop) of each run of the source; stop None while it still runs at the end."""
    out: list[tuple[float, float | None]] = []
    was = False
    for tick in ticks:
        if tick.out.enable and not was:
            out.append((tick.now, None))
        elif was and not tick.out.enable:
            out[-1] = (out[-1][0], tick.now)
        was = tick.out.enable
    return out


EPS = 1e-6
EXAMPLES = settings(max_examples=100, deadline=None)
zone_runs = st.lists(call_runs, min_size=3, max_size=3)
ticks_s = st.sampled_from([5.0, 10.0, 30.0])


@EXAMPLES
@given(timing=timings, per_zone=zone_runs, tick_s=ticks_s)
def test_short_cycle_protection_is_never_violated(
    timing: dict[str, object], per_zone: list[list[tuple[int, bool]]], tick_s: float
) -> None:
    s, ticks, _ = _simulate(timing, per_zone, tick_s)
    runs = _runs(ticks)
    for start, stop in runs:
        if stop is not None:
            assert stop - start >= s.min_on_s - EPS
    for (_, stop), (start, _) in itertools.pairwise(runs):
        assert stop is not None and start - stop >= s.min_off_s - EPS
    starts = [start for start, _ in runs]
    for start in starts:
        in_hour = [t for t in starts if start - 3600 < t <= start]
        assert len(in_hour) <= s.max_starts_per_hour
    # start-up counts as a stop long before the first tick; every reported count is honest
    for tick in ticks:
        assert tick.out.starts_1h == len([t for t in starts if tick.now - 3600 < t <= tick.now])


@EXAMPLES
@given(timing=timings, per_zone=zone_runs, tick_s=ticks_s)
def test_pump_runs_while_firing_and_for_the_overrun(
    timing: dict[str, object], per_zone: list[list[tuple[int, bool]]], tick_s: float
) -> None:
    s, ticks, _ = _simulate(timing, per_zone, tick_s)
    if not s.has_pump:
        assert not any(t.out.pump for t in ticks)
        return
    last_stop: float | None = None
    pump_since: float | None = None
    for tick in ticks:
        if tick.out.enable:
            assert tick.out.pump
        elif last_stop is not None and tick.now < last_stop + s.pump_overrun_s - EPS:
            assert tick.out.pump, f"pump off at {tick.now - last_stop} s into the overrun"
        if tick.out.pump and pump_since is None:
            pump_since = tick.now
        elif not tick.out.pump:
            pump_since = None
        if tick.out.enable and tick.state.running_since == tick.now:  # a start
            assert pump_since is not None and tick.now - pump_since >= s.pump_pre_run_s - EPS
        if not tick.out.enable and tick.state.stopped_at == tick.now:
            last_stop = tick.now


@EXAMPLES
@given(timing=timings, per_zone=zone_runs, tick_s=ticks_s)
def test_never_fires_before_a_calling_valve_had_its_opening_time(
    timing: dict[str, object], per_zone: list[list[tuple[int, bool]]], tick_s: float
) -> None:
    s, ticks, calls = _simulate(timing, per_zone, tick_s)
    for k, tick in enumerate(ticks):
        if not tick.out.enable:
            continue
        if tick.state.running_since == tick.now:  # a start: some zone has called long enough
            streaks = []
            for zone in ZONES:
                j = k
                while j >= 0 and calls[zone][j]:
                    j -= 1
                if j < k:
                    streaks.append(tick.now - ticks[j + 1].now)
            assert streaks, "fired with no zone calling"
            assert max(streaks) >= s.valve_opening_s - EPS
        elif not any(calls[z][k] for z in ZONES):
            # no call: only the minimum on time keeps it running
            assert tick.out.reason == "min-on"
            assert tick.state.running_since is not None
            assert tick.now - tick.state.running_since < s.min_on_s


@settings(max_examples=60, deadline=None)
@given(
    timing=timings,
    blips=st.lists(st.integers(2, 498), max_size=20),
    tick_s=ticks_s,
)
def test_a_call_of_a_single_tick_never_starts_the_source(
    timing: dict[str, object], blips: list[int], tick_s: float
) -> None:
    """Isolated one-tick calls (a glitch, a retained message corrected at once) start
    nothing once the valve opening time is at least one tick; with 0 s the valve is
    taken as open at once, and the source follows the call like a wiring centre would."""
    timing = {**timing, "valve_opening_s": max(float(timing["valve_opening_s"]), tick_s)}  # type: ignore[arg-type]
    calls = [False] * 500
    for k in blips:
        if not calls[k - 1] and not calls[k + 1]:
            calls[k] = True
    runs = [[(1, c) for c in calls], [(500, False)], [(500, False)]]
    _, ticks, _ = _simulate(timing, runs, tick_s)
    assert not any(t.out.enable for t in ticks)


@settings(max_examples=60, deadline=None)
@given(
    timing=timings,
    heard=st.lists(
        st.tuples(st.booleans(), st.booleans(), st.integers(0, 900)), min_size=5, max_size=60
    ),
    policy=st.sampled_from(["ignore", "assume-calling", "fixed-duty"]),
)
def test_stale_remote_zones_are_reported_and_follow_the_policy(
    timing: dict[str, object], heard: list[tuple[bool, bool, int]], policy: str
) -> None:
    """Each tick a remote zone is heard or not (online, calling, age of its last message):
    it is reported stale exactly when offline or silent past the timeout, and a stale zone
    under ``ignore`` never calls, under ``assume-calling`` always calls."""
    s = SourceSettings(name="s", zones=("north/a",), stale_policy=policy,  # type: ignore[arg-type]
                       stale_timeout_s=300, **timing)  # type: ignore[arg-type]

    def demands(now: float) -> list[ZoneDemand]:
        online, calling, age = heard[round((now - T0) / 30.0) % len(heard)]
        return [ZoneDemand("north/a", calling, heard_at=now - age, online=online)]

    ticks = run(s, demands, ticks=len(heard), tick_s=30.0)
    for tick in ticks:
        (d,) = tick.demands
        assert d.heard_at is not None
        stale = not d.online or tick.now - d.heard_at > 300
        assert tick.out.stale == (("north/a",) if stale else ())
        calls = "north/a" in tick.out.calling
        if not stale:
            assert calls is d.calling
        elif policy == "ignore":
            assert not calls
        elif policy == "assume-calling":
            assert calls


@settings(max_examples=50, deadline=None)
@given(
    timing=timings,
    per_zone=zone_runs,
    tick_s=ticks_s,
    restarts=st.lists(st.integers(1, 299), max_size=6, unique=True),
)
def test_a_restart_from_the_relays_as_found_never_switches_the_source(
    timing: dict[str, object],
    per_zone: list[list[tuple[int, bool]]],
    tick_s: float,
    restarts: list[int],
) -> None:
    """The daemon restarts at random ticks and resumes the source from its relays as they
    were (``SourceLogic.resume``): the restart's own step neither starts a source that was
    off (it waits out its minimum off time) nor stops one that was firing while a zone still
    calls, and the minimum on and off times hold across the restarts."""
    s = SourceSettings(name="s", zones=ZONES, **timing)  # type: ignore[arg-type]
    logic = SourceLogic(s)
    ticks = 300
    calls = {z: _schedule(runs, ticks) for z, runs in zip(ZONES, per_zone, strict=True)}
    state = logic.initial_state(T0 - 10 * 3600.0)
    enable: list[bool] = []
    pump = False
    for k in range(ticks):
        now = T0 + k * tick_s
        if k in restarts:
            state = logic.resume(enable[-1], pump, now)
        demands = SourceInputs(tuple(local(z, calls[z][k], now) for z in ZONES))
        state, out = logic.step(state, demands, now)
        if k in restarts:
            if not enable[-1]:
                if s.min_off_s > 0:  # (without one a call may start it at once)
                    assert not out.enable, "a restart started the source"
            elif any(calls[z][k] for z in ZONES):
                assert out.enable, "a restart stopped a firing source with a zone calling"
        enable.append(out.enable)
        pump = out.pump
    changes = [k for k in range(1, ticks) if enable[k] != enable[k - 1]]
    for a, b in itertools.pairwise(changes):
        held = (b - a) * tick_s
        if enable[a]:  # a run from a to b
            assert held >= s.min_on_s - EPS
        else:  # a pause from a to b
            assert held >= s.min_off_s - EPS


@settings(max_examples=50, deadline=None)
@given(
    timing=timings,
    per_zone=zone_runs,
    tick_s=ticks_s,
    restarts=st.lists(st.integers(1, 299), max_size=12, unique=True),
)
def test_a_restart_with_the_saved_history_keeps_every_limit(
    timing: dict[str, object],
    per_zone: list[list[tuple[int, bool]]],
    tick_s: float,
    restarts: list[int],
) -> None:
    """The daemon restarts at random ticks, each time resumed from the relays as they were
    and the history the state file kept (``SourceMemory`` of the state before): the starts
    per sliding hour, counted over the whole timeline, never pass the limit; the minimum on
    and off times hold; and every tick's ``starts_1h`` is the true count (a run found going
    on is not counted again)."""
    s = SourceSettings(name="s", zones=ZONES, **timing)  # type: ignore[arg-type]
    logic = SourceLogic(s)
    ticks = 300
    calls = {z: _schedule(runs, ticks) for z, runs in zip(ZONES, per_zone, strict=True)}
    state = logic.initial_state(T0 - 10 * 3600.0)
    enable: list[bool] = []
    reported: list[int] = []
    pump = False
    for k in range(ticks):
        now = T0 + k * tick_s
        if k in restarts:
            state = logic.resume(enable[-1], pump, now, SourceMemory.of(s.kind, state))
        demands = SourceInputs(tuple(local(z, calls[z][k], now) for z in ZONES))
        state, out = logic.step(state, demands, now)
        enable.append(out.enable)
        reported.append(out.starts_1h)
        pump = out.pump
    starts = [T0 + k * tick_s for k in range(ticks) if enable[k] and (k == 0 or not enable[k - 1])]
    for k in range(ticks):
        now = T0 + k * tick_s
        in_hour = [t for t in starts if now - 3600 < t <= now]
        assert reported[k] == len(in_hour)
        assert len(in_hour) <= s.max_starts_per_hour
    changes = [k for k in range(1, ticks) if enable[k] != enable[k - 1]]
    for a, b in itertools.pairwise(changes):
        held = (b - a) * tick_s
        assert held >= (s.min_on_s if enable[a] else s.min_off_s) - EPS
