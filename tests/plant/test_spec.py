"""Plant files: the EN 442 law, the built-in plants' ISO 13790 claims, and file errors."""

from __future__ import annotations

from pathlib import Path

import pytest

from roomloop.errors import ConfigError
from roomloop.plant.loader import ALL_PLANTS, BUILTIN_PLANTS, load_plant
from roomloop.plant.spec import en442_output_w, log_mean_excess_k


@pytest.mark.parametrize(
    ("excess_k", "expected_w"),
    [(30.0, 514.8), (40.0, 748.2), (60.0, 1267.5), (50.0, 1000.0)],
)
def test_en442_check_values(excess_k: float, expected_w: float) -> None:
    # REFERENCES.md: EN 442-2, 1000 W rated, n = 1.3: 30 K -> 514.8 W; 40 K -> 748.2 W;
    # 60 K -> 1267.5 W [published; computed]; 50 K is the rating point itself.
    assert en442_output_w(1000.0, 1.3, excess_k) == pytest.approx(expected_w, abs=0.05)


def test_en442_published_log_mean_example() -> None:
    # REFERENCES.md: EN 442-2 published example: 1000 W rated at 80/60/20 (log-mean 49.32 K),
    # run at 70/50/20 with n = 1.33 -> 736 W [published].
    rated_excess = log_mean_excess_k(80.0, 60.0, 20.0)
    assert rated_excess == pytest.approx(49.32, abs=0.01)
    # Normalise the rating to 50 K, then apply the law at the new log-mean excess.
    phi_50 = 1000.0 / (rated_excess / 50.0) ** 1.33
    output = en442_output_w(phi_50, 1.33, log_mean_excess_k(70.0, 50.0, 20.0))
    assert output == pytest.approx(736.0, abs=1.0)


def test_plant_model_uses_the_en442_law() -> None:
    spec = load_plant("hydronic")
    assert spec.emitter is not None and spec.emitter.rated_output_w is not None
    assert spec.emitter_output_w(50.0) == pytest.approx(spec.emitter.rated_output_w)
    excess = spec.emitter_excess_for_output_k(600.0)
    assert spec.emitter_output_w(excess) == pytest.approx(600.0)


# ISO 13790 (REFERENCES.md) [published]: C_m in kJ/m2K and the A_m factor x A_f per class.
ISO13790_CLASSES = {
    "very-light": (80.0, 2.5),
    "light": (110.0, 2.5),
    "medium": (165.0, 2.5),
    "heavy": (260.0, 3.0),
    "very-heavy": (370.0, 3.5),
}


def test_iso13790_worked_example() -> None:
    # REFERENCES.md check: A_f = 20 m2, medium: C_m = 3.3 MJ/K, H_tr,ms = 455 W/K,
    # H_tr,is = 310.5 W/K [published; computed].
    c_m, factor = ISO13790_CLASSES["medium"]
    assert c_m * 1e3 * 20 == pytest.approx(3.3e6)
    assert 9.1 * factor * 20 == pytest.approx(455.0)
    assert pytest.approx(310.5) == 3.45 * 4.5 * 20


@pytest.mark.parametrize("name", ALL_PLANTS)
def test_builtin_capacities_match_their_iso13790_class(name: str) -> None:
    # ISO 13790 simple hourly method (REFERENCES.md) [published]: mass capacity C_m x A_f,
    # and the air-to-mass path H_tr,is = 3.45 x 4.5 A_f in series with H_tr,ms = 9.1 A_m.
    spec = load_plant(name)
    assert spec.mass is not None and spec.mass_class is not None and spec.floor_area_m2
    c_m, factor = ISO13790_CLASSES[spec.mass_class]
    area = spec.floor_area_m2
    assert spec.mass.capacity_j_per_k == pytest.approx(c_m * 1e3 * area, rel=0.01)
    h_is = 3.45 * 4.5 * area
    h_ms = 9.1 * factor * area
    assert spec.mass.conductance_w_per_k == pytest.approx(1 / (1 / h_is + 1 / h_ms), rel=0.01)


def test_builtin_plants_claim_the_classes_the_issue_names() -> None:
    claims = {name: load_plant(name).mass_class for name in BUILTIN_PLANTS}
    assert claims == {
        "forced-air": "light",
        "hydronic": "medium",
        "underfloor": "medium",
        "electric": "light",
        "steam": "heavy",
        "thick-slab": "medium",
        "oversized-air": "very-light",
    }


def test_the_stress_plants_stress_what_they_claim() -> None:
    # thick-slab: an emitter time constant of many hours (0.15 m concrete, [memory; derived]);
    # oversized-air: a heater at least twice the design load (1200 W at -10 C in a 20 C room
    # with 40 W/K) on a room lighter than ISO 52016-1's 10 kJ/m2K default [memory].
    slab = load_plant("thick-slab")
    assert slab.emitter is not None and slab.emitter.conductance_w_per_k is not None
    assert slab.emitter.capacity_j_per_k / slab.emitter.conductance_w_per_k >= 6 * 3600
    light = load_plant("oversized-air")
    assert light.heater_w >= 2 * light.room.loss_w_per_k * 30
    assert light.floor_area_m2 is not None
    assert light.room.capacity_j_per_k < 10e3 * light.floor_area_m2


def test_time_constants_match_references() -> None:
    # REFERENCES.md: panel radiator about 25 min [published]; 50-70 mm screed about
    # 2.5-3.6 h [memory; derived]; ordinary buildings 20-60 h [memory].
    hydronic = load_plant("hydronic")
    assert hydronic.emitter is not None and hydronic.emitter.rated_output_w is not None
    assert hydronic.emitter.exponent is not None
    slope = hydronic.emitter.exponent * hydronic.emitter.rated_output_w / 50.0
    assert 20 * 60 <= hydronic.emitter.capacity_j_per_k / slope <= 30 * 60
    floor = load_plant("underfloor")
    assert floor.emitter is not None and floor.emitter.conductance_w_per_k is not None
    assert (
        2.5 * 3600
        <= floor.emitter.capacity_j_per_k / floor.emitter.conductance_w_per_k
        <= 3.6 * 3600
    )
    for name in ("hydronic", "underfloor"):
        spec = load_plant(name)
        assert spec.mass is not None
        hours = (
            (spec.mass.capacity_j_per_k + spec.room.capacity_j_per_k)
            / spec.room.loss_w_per_k
            / 3600
        )
        assert 20 <= hours <= 60


def test_bad_plant_file_reports_file_line_and_key(tmp_path: Path) -> None:
    path = tmp_path / "room.yaml"
    path.write_text(
        "name: test-room\n"
        "heater_w: 2000\n"
        "emitter:\n"
        "  capacity_j_per_k: 3.0e5\n"
        "  conductance_w_per_k: 400\n"
        "  exponent: 1.3\n"
        "room:\n"
        "  capacity_j_per_k: 2.0e5\n"
        "  los_w_per_k: 40\n"
        "mass: null\n"
    )
    with pytest.raises(ConfigError) as caught:
        load_plant(str(path))
    text = [str(p) for p in caught.value.problems]
    assert any(t.startswith(f"{path}:9: room.los_w_per_k:") for t in text), text
    assert any(
        t.startswith(f"{path}:4: emitter") or t.startswith(f"{path}:3: emitter") for t in text
    ), text


def test_unknown_plant_name_is_one_clear_problem() -> None:
    with pytest.raises(ConfigError) as caught:
        load_plant("no-such-plant")
    (problem,) = caught.value.problems
    assert "not a built-in plant" in str(problem)
    assert "hydronic" in str(problem)


def test_duplicate_key_refused(tmp_path: Path) -> None:
    path = tmp_path / "dup.yaml"
    path.write_text(
        "name: a\nname: b\nheater_w: 1\nemitter: null\nmass: null\n"
        "room: {capacity_j_per_k: 1, loss_w_per_k: 1}\n"
    )
    with pytest.raises(ConfigError) as caught:
        load_plant(str(path))
    assert any(p.line == 2 for p in caught.value.problems)
