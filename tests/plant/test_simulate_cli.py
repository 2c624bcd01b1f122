"""``roomloop simulate``: JSON keys, exit codes, messages (DESIGN.md "CLI")."""

from __future__ import annotations

import json
import os
import sys
from pathlib import Path

import pytest

from roomloop.cli import main

REPO = Path(__file__).resolve().parents[2]
EXAMPLE = REPO / "config" / "example.yaml"

PHASE_KEYS = {
    "setpoint_deviation_k",
    "control_variation_k",
    "control_accuracy_k",
    "cycles_per_hour",
    "on_fraction",
    "shortest_on_s",
    "shortest_off_s",
    "energy_kwh",
}


def test_heating_type_run_writes_the_designed_json(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "out.json"
    code = main(["simulate", "--heating", "hydronic", "--plant", "hydronic", "--json", str(out)])
    assert code == 0
    doc = json.loads(out.read_text())
    assert set(doc["phases"]) == {"low-load", "high-load", "recovery"}
    assert set(doc["phases"]["low-load"]) == PHASE_KEYS
    assert set(doc["phases"]["high-load"]) == PHASE_KEYS
    assert set(doc["phases"]["recovery"]) == PHASE_KEYS | {"overshoot_k", "settle_s"}
    assert set(doc["overall"]) == {
        "control_accuracy_k",
        "overshoot_k",
        "cycles_per_hour",
        "energy_kwh",
    }
    phases = doc["phases"]
    assert doc["overall"]["control_accuracy_k"] == max(
        phases["low-load"]["control_accuracy_k"], phases["high-load"]["control_accuracy_k"]
    )
    assert doc["overall"]["overshoot_k"] == phases["recovery"]["overshoot_k"]
    printed = capsys.readouterr().out
    assert "low-load" in printed and "overall: control accuracy" in printed


def test_site_zone_run_and_seed_repeatability(tmp_path: Path) -> None:
    first, second, other = tmp_path / "a.json", tmp_path / "b.json", tmp_path / "c.json"
    base = ["simulate", "-c", str(EXAMPLE), "--zone", "office", "--plant", "hydronic"]
    assert main([*base, "--seed", "5", "--json", str(first)]) == 0
    assert main([*base, "--seed", "5", "--json", str(second)]) == 0
    assert main([*base, "--seed", "6", "--controller", "plain", "--json", str(other)]) == 0
    assert first.read_text() == second.read_text()
    assert json.loads(other.read_text())["controller"] == "plain"


def one_line_error(capsys: pytest.CaptureFixture[str]) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert err, "expected a message on stderr"
    assert not any("Traceback" in line for line in err)
    return err[0]


def test_unknown_plant_name_exits_2(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["simulate", "--heating", "hydronic", "--plant", "radiator-9000"]) == 2
    line = one_line_error(capsys)
    assert line.startswith("radiator-9000: no such plant file, and not a built-in plant")


def test_bad_plant_file_exits_2_with_file_line_key(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    bad = tmp_path / "bad-plant.yaml"
    bad.write_text(
        "name: bad\nheater_w: 0\nemitter: null\nmass: null\n"
        "room: {capacity_j_per_k: 1.0e5, loss_w_per_k: 40}\n"
    )
    assert main(["simulate", "--heating", "electric", "--plant", str(bad)]) == 2
    assert one_line_error(capsys).startswith(f"{bad}:2: heater_w: ")


def test_physically_absurd_plant_is_refused_at_once_naming_the_key(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    # The built-in hydronic room with its air capacity typed as 1 J/K instead of 2.0e5: a
    # room time constant of milliseconds, which once made simulate sub-step for minutes.
    builtin = REPO / "daemon" / "roomloop" / "plant" / "builtin" / "hydronic.yaml"
    lines = builtin.read_text().splitlines(keepends=True)
    (at,) = [i for i, line in enumerate(lines) if line.startswith("  capacity_j_per_k: 2.0e5")]
    lines[at] = "  capacity_j_per_k: 1\n"
    absurd = tmp_path / "absurd.yaml"
    absurd.write_text("".join(lines))
    assert main(["simulate", "--heating", "hydronic", "--plant", str(absurd)]) == 2
    line = one_line_error(capsys)
    assert line.startswith(f"{absurd}:{at + 1}: room.capacity_j_per_k: "), line
    assert "time constant" in line and "10 s" in line


def test_plant_file_with_yaml_syntax_error_exits_2(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    bad = tmp_path / "broken.yaml"
    bad.write_text("name: [unclosed\n")
    assert main(["simulate", "--heating", "electric", "--plant", str(bad)]) == 2
    assert one_line_error(capsys).startswith(str(bad))


def test_unknown_zone_exits_2(capsys: pytest.CaptureFixture[str]) -> None:
    code = main(["simulate", "-c", str(EXAMPLE), "--zone", "attic", "--plant", "hydronic"])
    assert code == 2
    assert "attic" in one_line_error(capsys)


def test_site_without_zone_and_zone_without_site_exit_2(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["simulate", "-c", str(EXAMPLE), "--plant", "hydronic"]) == 2
    assert "--zone" in one_line_error(capsys)
    assert (
        main(["simulate", "--heating", "hydronic", "--zone", "office", "--plant", "hydronic"]) == 2
    )
    assert "--zone" in one_line_error(capsys)


def test_missing_site_file_exits_2(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    code = main(
        ["simulate", "-c", str(tmp_path / "none.yaml"), "--zone", "x", "--plant", "hydronic"]
    )
    assert code == 2
    one_line_error(capsys)


ELECTRIC = ["simulate", "--heating", "electric", "--plant", "electric"]


def refused_before_the_run(capsys: pytest.CaptureFixture[str]) -> str:
    """The one error line, after checking that no figures were printed (nothing ran)."""
    captured = capsys.readouterr()
    assert "low-load" not in captured.out and captured.out == ""
    err = captured.err.strip().splitlines()
    assert len(err) == 1 and "Traceback" not in captured.err
    return err[0]


def test_json_into_a_missing_folder_is_refused_before_the_run(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    target = tmp_path / "no-such-dir" / "out.json"
    assert main([*ELECTRIC, "--json", str(target)]) == 2
    line = refused_before_the_run(capsys)
    assert f"--json {target}" in line and "does not exist" in line


def test_json_into_an_unwritable_folder_is_refused_before_the_run(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    if os.geteuid() == 0:
        pytest.skip("root may write into any folder")
    locked = tmp_path / "locked"
    locked.mkdir(mode=0o500)
    assert main([*ELECTRIC, "--json", str(locked / "out.json")]) == 2
    assert "not writable" in refused_before_the_run(capsys)


@pytest.mark.parametrize("name", ["x.txt", "x.pdf", "x", "x.png.bak"])
def test_plot_not_named_png_is_refused_before_the_run(
    name: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    assert main([*ELECTRIC, "--plot", str(tmp_path / name)]) == 2
    assert "must end in .png" in refused_before_the_run(capsys)
    assert not (tmp_path / name).exists()


def test_plot_into_a_missing_folder_is_refused_before_the_run(
    capsys: pytest.CaptureFixture[str],
) -> None:
    assert main([*ELECTRIC, "--plot", "/nonexistent/roomloop/x.png"]) == 2
    assert "the folder /nonexistent/roomloop does not exist" in refused_before_the_run(capsys)


def test_plot_name_in_capitals_is_accepted(tmp_path: Path) -> None:
    pytest.importorskip("matplotlib")
    png = tmp_path / "RUN.PNG"
    assert main([*ELECTRIC, "--plot", str(png)]) == 0
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_plot_writes_a_png(tmp_path: Path) -> None:
    pytest.importorskip("matplotlib")
    png = tmp_path / "run.png"
    assert (
        main(["simulate", "--heating", "underfloor", "--plant", "underfloor", "--plot", str(png)])
        == 0
    )
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_plot_without_matplotlib_says_so_and_exits_2(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    # A None entry in sys.modules makes `import matplotlib` raise ImportError, as if absent.
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    code = main(
        [
            "simulate",
            "--heating",
            "electric",
            "--plant",
            "electric",
            "--plot",
            str(tmp_path / "x.png"),
        ]
    )
    assert code == 2  # a usage problem: the option asks for what is not installed
    line = refused_before_the_run(capsys)  # asked before the run, not after it
    assert "pip install matplotlib" in line and "pip install '.[plot]'" in line
    assert "roomloop[plot]" not in line  # roomloop is installed from a checkout, not an index
    assert not (tmp_path / "x.png").exists()


def test_summary_names_a_heating_type_zone_and_a_recovery_that_never_settles() -> None:
    from dataclasses import replace

    from roomloop.cli.simulate import format_summary
    from roomloop.core.settings import ZoneSettings
    from roomloop.plant.controllers import make_controller
    from roomloop.plant.loader import load_plant
    from roomloop.plant.protocol import protocol_settings, run_protocol

    settings = protocol_settings(ZoneSettings.for_heating_type("electric"))
    result = run_protocol(
        make_controller("plain", settings),
        load_plant("electric"),
        seed=1,
        sensor_names=[p.name for p in settings.inputs],
        controller_name="plain",
    )
    text = format_summary(result, settings, from_site=False)
    assert "zone zone" not in text
    assert "an electric zone with the heating type's defaults" in text.splitlines()[0]
    assert "within 0.5 K of the set point after " in text
    phases = dict(result.phases)
    phases["recovery"] = replace(phases["recovery"], settle_s=None)
    never = format_summary(replace(result, phases=phases), settings, from_site=True)
    assert "after never" not in never
    assert "never within 0.5 K of the set point" in never
    assert f"zone {settings.name} (electric)" in never.splitlines()[0]


def test_zone_with_two_inputs_reads_the_plant_sensor_on_both(tmp_path: Path) -> None:
    # The example's workshop combines two input points; both get the plant's reading, so the
    # zone never falls back to fail-safe and really controls.
    out = tmp_path / "workshop.json"
    code = main(
        [
            "simulate",
            "-c",
            str(EXAMPLE),
            "--zone",
            "workshop",
            "--plant",
            "forced-air",
            "--json",
            str(out),
        ]
    )
    assert code == 0
    low = json.loads(out.read_text())["phases"]["low-load"]
    assert 0.1 < low["on_fraction"] < 0.6
    assert abs(low["setpoint_deviation_k"]) < 0.5
