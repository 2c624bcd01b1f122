"""``roomloop simulate-source``: a built-in estate and a site's heat source, end to end."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from roomloop.cli import main

EXAMPLE = Path(__file__).resolve().parents[2] / "config" / "example.yaml"


def test_builtin_example_prints_and_writes_json(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out_file = tmp_path / "estate.json"
    assert main(["simulate-source", "--example", "two-zone", "--json", str(out_file)]) == 0
    out = capsys.readouterr().out
    assert "estate two-zone: 2 zones on heat source boiler (boiler)" in out
    assert "valves: office opens in 150 s, showroom opens in 240 s" in out
    document = json.loads(out_file.read_text())
    assert set(document["rooms"]) == {"office", "showroom"}
    office = document["rooms"]["office"]
    assert office["waiting_s"] > 0 and office["cost"]["mean_wait_per_call_s"] > 0
    assert office["alone"]["overall"]["control_accuracy_k"] > 0
    assert document["source"]["most_starts_in_an_hour"] <= 6
    row = next(line for line in out.splitlines() if line.startswith("office "))
    ca_alone, ca_shared = (float(v) for v in row.split()[2:4])
    assert ca_alone == pytest.approx(office["alone"]["overall"]["control_accuracy_k"], abs=0.005)
    assert ca_shared == pytest.approx(office["overall"]["control_accuracy_k"], abs=0.005)


def test_site_source_with_slow_actuators(capsys: pytest.CaptureFixture[str]) -> None:
    code = main(["simulate-source", "-c", str(EXAMPLE), "--source", "boiler",
                 "--actuator-s", "300"])
    out = capsys.readouterr().out
    assert code == 0
    assert "estate fernhollow-joinery/boiler: 2 zones" in out
    assert "valves: office opens in 300 s, showroom opens in 300 s" in out
    # the actuators are slower than the configured 240 s: the source fires before the valves
    # are open, so a zone waits on it only in the source's own lockouts (minutes, not the
    # most of an hour a 150 s actuator waits against 240 s: tests/source/test_source_multizone.py)
    rows = [line.split() for line in out.splitlines() if line.startswith(("office", "showroom"))]
    assert len(rows) == 2
    assert all(float(row[7]) < 10 for row in rows), rows


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["--example", "two-zone", "--source", "x"], "go together"),
        (["-c", str(EXAMPLE)], "go together"),
        (["-c", str(EXAMPLE), "--source", "nope"], "no heat source 'nope' (heat sources: boiler)"),
        (["--example", "two-zone", "--json", "/nonexistent/dir/x.json"], "--json"),
        (["--example", "two-zone", "--actuator-s", "nan"], "--actuator-s nan: give the valves'"),
        (["--example", "two-zone", "--actuator-s", "-5"], "seconds, 0 to 1800"),
        (["-c", str(EXAMPLE), "--source", "boiler", "--actuator-s", "1801"], "0 to 1800"),
    ],
)
def test_usage_mistakes_exit_2(
    argv: list[str], message: str, capsys: pytest.CaptureFixture[str]
) -> None:
    assert main(["simulate-source", *argv]) == 2
    err = capsys.readouterr().err
    assert message in err and "Traceback" not in err


def test_builtin_example_takes_the_actuator_time(capsys: pytest.CaptureFixture[str]) -> None:
    """``--actuator-s`` with ``--example``: every valve takes that time (it was ignored)."""
    assert main(["simulate-source", "--example", "three-zone", "--actuator-s", "60"]) == 0
    out = capsys.readouterr().out
    assert "valves: office opens in 60 s, showroom opens in 60 s, meeting opens in 60 s" in out
