"""``roomloop simulate --mode cool``: every built-in cooling plant, and the combinations refused."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from roomloop.cli import main
from roomloop.plant.loader import COOLING_PLANTS

REPO = Path(__file__).resolve().parents[2]
EXAMPLE = REPO / "config" / "example.yaml"


@pytest.mark.parametrize("plant", COOLING_PLANTS)
def test_simulate_cool_runs_every_builtin_cooling_plant(
    plant: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "cool.json"
    code = main(["simulate", "--mode", "cool", "--cooling", plant, "--json", str(out)])
    assert code == 0
    doc = json.loads(out.read_text())
    assert doc["plant"] == plant and doc["mode"] == "cool"
    assert doc["setpoints_c"] == {"comfort": 24.0, "economy": 27.0}
    phases = doc["phases"]
    assert set(phases) == {"low-load", "high-load", "recovery"}
    # EN 15500's control accuracy as the heating figures: CA = |CSD| + CV, the worse load phase
    for name in ("low-load", "high-load"):
        f = phases[name]
        assert f["control_accuracy_k"] == pytest.approx(
            abs(f["setpoint_deviation_k"]) + f["control_variation_k"]
        )
        assert f["cycles_per_hour"] > 0 and 0 < f["on_fraction"] < 1
    assert doc["overall"]["control_accuracy_k"] == max(
        phases["low-load"]["control_accuracy_k"], phases["high-load"]["control_accuracy_k"]
    )
    # the cooler ran about as much as the gains ask: 30 % and 60 % of its capacity
    assert phases["low-load"]["on_fraction"] == pytest.approx(0.3, abs=0.05)
    assert phases["high-load"]["on_fraction"] == pytest.approx(0.6, abs=0.05)
    printed = capsys.readouterr().out
    assert f"on plant {plant}" in printed and "cooling run" in printed
    assert "overall: control accuracy" in printed and "economy 27" in printed


def test_cooling_alone_implies_mode_cool_and_takes_a_baseline(
    tmp_path: Path,
) -> None:
    out = tmp_path / "cool.json"
    code = main(
        ["simulate", "--cooling", "direct-expansion", "--controller", "time-proportional",
         "--seed", "4", "--json", str(out)]
    )
    assert code == 0
    doc = json.loads(out.read_text())
    assert (doc["mode"], doc["controller"], doc["seed"]) == ("cool", "time-proportional", 4)


def refused(capsys: pytest.CaptureFixture[str], *argv: str) -> str:
    assert main(["simulate", *argv]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "Traceback" not in err[0]
    return err[0]


def test_a_heating_only_plant_with_mode_cool_exits_2(capsys: pytest.CaptureFixture[str]) -> None:
    line = refused(capsys, "--mode", "cool", "--cooling", "chilled-water", "--plant", "hydronic")
    assert "plant hydronic has no cooler_w" in line and "direct-expansion" in line


def test_a_plant_file_without_cooler_w_with_mode_cool_exits_2(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    plant = tmp_path / "warm-only.yaml"
    plant.write_text(
        "name: warm-only\nheater_w: 1500\nemitter: null\nmass: null\n"
        "room: {capacity_j_per_k: 2.0e5, loss_w_per_k: 40}\n"
    )
    line = refused(capsys, "--cooling", "direct-expansion", "--plant", str(plant))
    assert "plant warm-only has no cooler_w" in line


def test_heating_defaults_with_mode_cool_exit_2(capsys: pytest.CaptureFixture[str]) -> None:
    line = refused(capsys, "--heating", "hydronic", "--mode", "cool")
    assert "--heating hydronic has no cooling call" in line and "--cooling TYPE" in line


def test_a_cooling_only_zone_with_mode_heat_exits_2(capsys: pytest.CaptureFixture[str]) -> None:
    line = refused(capsys, "--cooling", "chilled-water", "--mode", "heat")
    assert "cooling-only zone" in line


def test_a_site_zone_without_cooling_with_mode_cool_exits_2(
    capsys: pytest.CaptureFixture[str],
) -> None:
    line = refused(capsys, "-c", str(EXAMPLE), "--zone", "office", "--mode", "cool")
    assert "zone office has no cooling output" in line


def test_a_heating_run_on_a_cooling_plant_uses_its_heater(tmp_path: Path) -> None:
    out = tmp_path / "heat.json"
    code = main(
        ["simulate", "--heating", "forced-air", "--plant", "direct-expansion", "--controller",
         "plain", "--json", str(out)]
    )
    assert code == 0
    doc = json.loads(out.read_text())
    assert doc["mode"] == "heat" and doc["setpoints_c"] == {"comfort": 20.0, "economy": 17.0}


SITE = """\
site:
  name: quillby-annex
links:
  - name: io
    type: modbus-tcp
    host: 127.0.0.1
points:
  - name: annex-temp
    type: modbus-input
    link: io
    address: 0
    scale: 0.1
  - name: annex-heat
    type: modbus-output
    link: io
    address: 0
  - name: annex-cool
    type: modbus-output
    link: io
    address: 1
zones:
  - name: annex
    inputs: [annex-temp]
    output: annex-heat
    heating: forced-air
    cooling:
      output: annex-cool
      type: chilled-water
      setpoints: {comfort: 23.5, standby: 25.0, economy: 26.5}
"""


def test_a_site_zone_with_cooling_runs_at_its_own_cooling_setpoints(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    site = tmp_path / "annex.yaml"
    site.write_text(SITE)
    out = tmp_path / "annex.json"
    code = main(
        ["simulate", "-c", str(site), "--zone", "annex", "--mode", "cool", "--controller",
         "plain", "--json", str(out)]
    )
    assert code == 0, capsys.readouterr().err
    doc = json.loads(out.read_text())
    # the default plant is the built-in plant of the zone's cooling type
    assert doc["plant"] == "chilled-water" and doc["mode"] == "cool"
    assert doc["setpoints_c"] == {"comfort": 23.5, "economy": 26.5}
    printed = capsys.readouterr().out
    assert "zone annex (chilled-water)" in printed and "cooling comfort 23.5" in printed


def test_a_site_zone_that_only_cools_runs_the_cooling_variant_by_default(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    site = tmp_path / "annex.yaml"
    site.write_text(SITE.replace("    output: annex-heat\n", ""))
    out = tmp_path / "annex.json"
    code = main(
        ["simulate", "-c", str(site), "--zone", "annex", "--controller", "plain",
         "--json", str(out)]
    )
    assert code == 0, capsys.readouterr().err
    assert json.loads(out.read_text())["mode"] == "cool"
    line = refused(capsys, "-c", str(site), "--zone", "annex", "--mode", "heat")
    assert "zone annex only cools" in line
