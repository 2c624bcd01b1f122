"""Heating-type presets and the anticipator time constant derived from a cycle rate.

The derivation (DESIGN.md, "Cycle-rate sizing"; REFERENCES.md "Anticipator sizing at
50 % on-time" [derived]): with the room steady, the anticipator term a rises toward the
gain G while the relay is on and decays toward 0 while off, between thresholds a band D
apart. At 50 % on-time the thresholds are L = (G - D) / 2 and U = (G + D) / 2, and
on-time = off-time = tau ln((G + D) / (G - D)); a cycle of 3600 / cph seconds therefore
needs tau = 3600 / (2 cph ln((G + D) / (G - D))).
"""

from __future__ import annotations

import math

import pytest
from scipy.optimize import brentq

from roomloop.config.models import TuningInput, Zone, resolve_tuning
from roomloop.config.presets import (
    COMPRESSOR_MIN_OFF_S,
    COOLING_PRESETS,
    PRESETS,
    time_constant_for_cycle_rate,
)


def test_time_constant_check_value() -> None:
    # Hand computation: G = 1.5 K, D = 0.5 K, 3 cph: tau = 3600 / (6 ln 2) = 865.617 s.
    assert time_constant_for_cycle_rate(3.0, 1.5, 0.5) == pytest.approx(865.617, abs=1e-3)
    # G = 1.0, D = 0.5, 6 cph: tau = 3600 / (12 ln 3) = 300 / 1.098612 = 273.07 s.
    assert time_constant_for_cycle_rate(6.0, 1.0, 0.5) == pytest.approx(273.07, abs=1e-2)


@pytest.mark.parametrize("gain", [0.5, 0.4])
def test_gain_not_above_differential_is_refused(gain: float) -> None:
    with pytest.raises(ValueError, match="must exceed the differential"):
        time_constant_for_cycle_rate(3.0, gain, 0.5)


@pytest.mark.parametrize(
    ("cph", "gain", "diff"), [(1.0, 1.5, 0.5), (3.0, 1.5, 0.5), (5.0, 2.0, 0.3), (9.0, 0.8, 0.6)]
)
def test_derived_tau_gives_half_period_on_and_off(cph: float, gain: float, diff: float) -> None:
    """Crossing times of the exact exponential, found numerically (scipy brentq), are 1800 / cph."""
    # REFERENCES.md: anticipator sizing at 50 % on-time [derived]; scipy finds the roots.
    tau = time_constant_for_cycle_rate(cph, gain, diff)
    low, high = (gain - diff) / 2, (gain + diff) / 2

    def rising(t: float) -> float:  # relay on: a -> G from L
        return gain + (low - gain) * math.exp(-t / tau) - high

    def falling(t: float) -> float:  # relay off: a -> 0 from U
        return high * math.exp(-t / tau) - low

    on_time = brentq(rising, 0.0, 10 * 3600.0, xtol=1e-9)
    off_time = brentq(falling, 0.0, 10 * 3600.0, xtol=1e-9)
    assert on_time == pytest.approx(1800.0 / cph, rel=1e-9)
    assert off_time == pytest.approx(1800.0 / cph, rel=1e-9)


@pytest.mark.parametrize("heating", sorted(PRESETS))
def test_control_law_with_derived_tau_cycles_at_the_rate(heating: str) -> None:
    """Step the DESIGN.md control law (exact anticipator update) with the room held steady.

    The room sits at S - G/2, where the steady cycle is at 50 % on-time (REFERENCES.md: the
    room droops by about G x duty [derived]); counting switch-ons over many hours must give the
    preset's cycle rate.
    """
    preset = PRESETS[heating]
    gain, diff, cph = preset.anticipator_gain_k, preset.differential_k, preset.cycle_rate_cph
    tau = time_constant_for_cycle_rate(cph, gain, diff)
    setpoint = 20.0
    room = setpoint - gain / 2
    dt = 0.25
    decay = math.exp(-dt / tau)
    a, relay = 0.0, False
    starts, on_steps, steps = 0, 0, 0
    warmup = int(4 * 3600 / dt)
    total = warmup + int(10 * 3600 / dt)
    for step in range(total):
        sensed = room + a
        if not relay and sensed <= setpoint - diff / 2:
            relay = True
            if step >= warmup:
                starts += 1
        elif relay and sensed >= setpoint + diff / 2:
            relay = False
        u = 1.0 if relay else 0.0
        a = gain * u + (a - gain * u) * decay
        if step >= warmup:
            steps += 1
            on_steps += relay
    assert starts / 10.0 == pytest.approx(cph, abs=1.0 / 10.0 + 0.02 * cph)
    assert on_steps / steps == pytest.approx(0.5, abs=0.02)


def test_presets_follow_the_trade_cycle_rates() -> None:
    # REFERENCES.md: usual cycle rates: forced-air gas/oil 5-6, hot water / radiant 3,
    # steam or gravity 1, electric 9 [trade, common practice, no single source].
    assert 5 <= PRESETS["forced-air"].cycle_rate_cph <= 6
    assert PRESETS["hydronic"].cycle_rate_cph == 3
    assert PRESETS["underfloor"].cycle_rate_cph == 3
    assert PRESETS["steam"].cycle_rate_cph == 1
    assert PRESETS["electric"].cycle_rate_cph == 9
    for preset in PRESETS.values():
        # REFERENCES.md: typical heating differential about 0.5 K [trade].
        assert preset.differential_k == pytest.approx(0.5)
        # Self-consistency: the preset can reach its own cycle rate.
        assert preset.anticipator_gain_k > preset.differential_k
        assert preset.min_on_s + preset.min_off_s <= 3600 / preset.cycle_rate_cph
        assert preset.max_cycles_per_hour >= preset.cycle_rate_cph


def test_origins_of_each_value() -> None:
    tuning, origins = resolve_tuning("hydronic", TuningInput(cycle_rate_cph=2, min_on_s=240))
    assert origins["cycle_rate_cph"] == "file"
    assert origins["min_on_s"] == "file"
    assert origins["min_off_s"] == "preset hydronic"
    assert origins["differential_k"] == "preset hydronic"
    assert origins["anticipator_time_constant_s"] == "derived from cycle rate"
    assert tuning.min_on_s == 240 and tuning.min_off_s == PRESETS["hydronic"].min_off_s
    # 2 cph, the preset's G = 2.5, D = 0.5: tau = 3600 / (4 ln 1.5) = 2219.67 s (hand computation).
    assert PRESETS["hydronic"].anticipator_gain_k == 2.5
    assert tuning.anticipator_time_constant_s == pytest.approx(2219.67, abs=0.01)


def test_given_time_constant_wins() -> None:
    tuning, origins = resolve_tuning("electric", TuningInput(anticipator_time_constant_s=400))
    assert tuning.anticipator_time_constant_s == 400
    assert origins["anticipator_time_constant_s"] == "file"


def test_smoothing_from_the_file_reaches_the_controller_settings() -> None:
    from roomloop.config.models import ModbusInput
    from roomloop.core.settings import ZoneSettings

    sensor = ModbusInput(type="modbus-input", name="t", link="bus", address=0)

    def zone(tuning: dict[str, float]) -> Zone:
        return Zone.model_validate(
            {
                "name": "hall",
                "inputs": ["t"],
                "output": "r",
                "heating": "hydronic",
                "tuning": tuning,
            }
        )

    derived = zone({})
    assert derived.origins["smoothing_s"] == "derived from cycle rate"
    assert ZoneSettings.from_zone(derived, {"t": sensor}).smoothing_s is None  # one cycle
    off = zone({"smoothing_s": 0})
    assert off.origins["smoothing_s"] == "file"
    assert ZoneSettings.from_zone(off, {"t": sensor}).smoothing_s == 0.0
    assert ZoneSettings.from_zone(zone({"smoothing_s": 300}), {"t": sensor}).smoothing_s == 300.0


def test_proportional_gain_comes_from_the_heating_type_or_the_file() -> None:
    from roomloop.config.models import ModbusInput
    from roomloop.core.settings import ZoneSettings

    sensor = ModbusInput(type="modbus-input", name="t", link="bus", address=0)

    def zone(heating: str, tuning: dict[str, float]) -> Zone:
        return Zone.model_validate(
            {"name": "hall", "inputs": ["t"], "output": "r", "heating": heating, "tuning": tuning}
        )

    screed = zone("underfloor", {})
    assert screed.origins["proportional_gain"] == "preset underfloor"
    assert ZoneSettings.from_zone(screed, {"t": sensor}).proportional_gain == 1.0
    radiators = zone("hydronic", {})
    assert ZoneSettings.from_zone(radiators, {"t": sensor}).proportional_gain == 0.0
    given = zone("hydronic", {"proportional_gain": 0.5})
    assert given.origins["proportional_gain"] == "file"
    assert ZoneSettings.from_zone(given, {"t": sensor}).proportional_gain == 0.5


def test_fahrenheit_tuning_is_held_in_kelvin() -> None:
    zone = Zone.model_validate(
        {
            "name": "hall",
            "inputs": ["t"],
            "output": "r",
            "heating": "forced-air",
            "tuning": {"differential_k": 0.9, "anticipator_gain_k": 2.7},
            "setpoints": {"comfort": 68, "standby": 64.4, "economy": 60.8, "protection": 44.6},
        },
        context={"units": "F"},
    )
    assert zone.effective.differential_k == pytest.approx(0.5)
    assert zone.effective.anticipator_gain_k == pytest.approx(1.5)
    assert zone.setpoints.comfort == pytest.approx(20.0)
    assert zone.setpoints.protection == pytest.approx(7.0)
    # 5 cph, G = 1.5 K, D = 0.5 K: tau = 3600 / (10 ln 2) = 519.37 s (hand computation).
    assert zone.effective.anticipator_time_constant_s == pytest.approx(519.37, abs=0.01)


def test_presets_and_models_form_no_import_cycle() -> None:
    """models reads presets; presets imports nothing of roomloop (not even lazily)."""
    import ast
    from pathlib import Path

    from roomloop.config import models, presets

    def roomloop_imports(module: object) -> set[str]:
        tree = ast.parse(Path(module.__file__).read_text(encoding="utf-8"))  # type: ignore[attr-defined]
        found: set[str] = set()
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom) and node.module:
                found.add(node.module)
            elif isinstance(node, ast.Import):
                found.update(alias.name for alias in node.names)
        return {name for name in found if name.startswith("roomloop")}

    assert roomloop_imports(presets) == set()
    assert "roomloop.config.presets" in roomloop_imports(models)


@pytest.mark.parametrize("cooling", sorted(COOLING_PRESETS))
def test_cooling_presets_satisfy_their_own_checks(cooling: str) -> None:
    """Each cooling type passes the heating presets' checks, and a compressor rests long enough.

    Compressor anti-short-cycle: at least 3-5 min off between starts (REFERENCES.md [trade]:
    common practice, no source); 3-4 starts per hour for small compressors [trade].
    """
    preset = COOLING_PRESETS[cooling]
    assert preset.anticipator_gain_k > preset.differential_k
    assert preset.min_on_s + preset.min_off_s <= 3600.0 / preset.cycle_rate_cph
    assert preset.max_cycles_per_hour >= preset.cycle_rate_cph
    if cooling == "direct-expansion":
        assert preset.min_off_s >= COMPRESSOR_MIN_OFF_S >= 180.0
        assert preset.max_cycles_per_hour <= 4
    zone = Zone.model_validate(
        {"name": "z", "inputs": ["t"], "output": "h", "heating": "forced-air",
         "cooling": {"output": "c", "type": cooling}}
    )
    tuning = zone.cooling_effective
    assert tuning is not None
    # the time constant is derived with the heating formula: on = off = 1800 / cph at 50 %
    on = tuning.anticipator_time_constant_s * math.log(
        (preset.anticipator_gain_k + preset.differential_k)
        / (preset.anticipator_gain_k - preset.differential_k)
    )
    assert on == pytest.approx(1800.0 / preset.cycle_rate_cph, rel=1e-12)
    assert zone.cooling_origins["anticipator_time_constant_s"] == "derived from cycle rate"
