"""``roomloop bms-map``: prints the map the face serves, and writes it as CSV."""

from __future__ import annotations

import csv
import subprocess
import sys
from pathlib import Path

import pytest

from roomloop.bms.registers import RegisterMap
from roomloop.cli import main
from roomloop.config.loader import load_site

EXAMPLE = Path(__file__).parents[2] / "config" / "example.yaml"


def test_prints_every_register_and_writes_csv(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "map.csv"
    assert main(["bms-map", "-c", str(EXAMPLE), "--csv", str(out)]) == 0
    text = capsys.readouterr().out
    regmap = RegisterMap(load_site(EXAMPLE))
    for register in regmap.registers:
        assert register.name in text
    with out.open(newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    assert rows == regmap.rows()
    assert {r["access"] for r in rows} == {"R", "RW"}
    assert rows[0]["address"] == "0" and rows[0]["name"].endswith(".temperature")


def test_bad_site_exits_2_and_unwritable_csv_exits_1(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    bad = tmp_path / "bad.yaml"
    bad.write_text(EXAMPLE.read_text().replace("zone_block: 100", "zone_block: 5"))
    assert main(["bms-map", "-c", str(bad)]) == 2
    assert "bms" in capsys.readouterr().err
    assert main(["bms-map", "-c", str(EXAMPLE), "--csv", str(tmp_path / "no" / "x.csv")]) == 1
    assert "cannot write" in capsys.readouterr().err


def test_installed_entry_point() -> None:
    done = subprocess.run(
        [sys.executable, "-m", "roomloop", "bms-map", "-c", str(EXAMPLE)],
        capture_output=True, text=True, timeout=60, check=False,
    )
    assert done.returncode == 0, done.stderr
    assert "holding registers" in done.stdout
