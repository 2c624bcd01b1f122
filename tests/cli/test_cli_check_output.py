"""What ``check`` prints for a valid site: rounded derived seconds, and warnings that are
not errors (the site still passes, exit 0)."""

from __future__ import annotations

import math
import re
from pathlib import Path

import pytest

from roomloop.cli import main

SITE = """\
site: {{name: warn}}
links: [{{name: io, type: modbus-tcp, host: 127.0.0.1}}]
points:
  - {{name: meeting-temp, type: modbus-input, link: io, table: holding, address: {address}}}
  - {{name: r1, type: modbus-output, link: io, table: holding, address: 2}}
zones:
  - name: meeting
    inputs: [meeting-temp]
    output: r1
    heating: hydronic
    tuning:
      cycle_rate_cph: 7
      max_cycles_per_hour: 8
      anticipator_gain_k: 2.5
      differential_k: 0.5
      min_on_s: 60
      min_off_s: 60
"""


def _check(
    capsys: pytest.CaptureFixture[str], tmp_path: Path, address: int
) -> tuple[int, str, str, Path]:
    path = tmp_path / "site.yaml"
    path.write_text(SITE.format(address=address), encoding="utf-8")
    code = main(["check", "-c", str(path)])
    captured = capsys.readouterr()
    return code, captured.out, captured.err, path


@pytest.mark.parametrize(
    ("address", "table", "wire"),
    [(40001, "holding", 0), (40100, "holding", 99), (30001, "input", 0), (39999, "input", 9998)],
)
def test_a_one_based_reference_number_is_a_warning(
    capsys: pytest.CaptureFixture[str], tmp_path: Path, address: int, table: str, wire: int
) -> None:
    code, out, err, path = _check(capsys, tmp_path, address)
    assert code == 0, err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    # Modbus Application Protocol Specification V1.1b3, section 4.4: the item numbered X is
    # addressed X - 1 [published; the section number recalled from memory]; 3xxxx input /
    # 4xxxx holding reference numbers: common practice in device manuals, no source.
    assert lines[0].startswith(f"{path}:4: points[meeting-temp].address: warning: ")
    assert f"write table: {table} and address: {wire}" in lines[0]
    assert out.rstrip().endswith(f"{path}: ok (1 warning)")


@pytest.mark.parametrize("address", [40000, 30000, 29999, 50000, 100, 0])
def test_other_addresses_give_no_warning(
    capsys: pytest.CaptureFixture[str], tmp_path: Path, address: int
) -> None:
    code, out, err, path = _check(capsys, tmp_path, address)
    assert code == 0 and err == "", err
    assert out.rstrip().endswith(f"{path}: ok")


def test_derived_seconds_are_rounded(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    _code, out, _err, _path = _check(capsys, tmp_path, 0)
    # DESIGN.md cycle-rate sizing, by hand: tau = 3600 / (2 * 7 * ln(3.0 / 2.0)) = 634.19 s.
    tau = 3600 / (2 * 7 * math.log(3.0 / 2.0))
    row = re.search(r"anticipator time constant\s+(\S+) s\s+derived from cycle rate", out)
    assert row is not None, out
    assert row[1] == str(round(tau)) == "634"
    # Smoothing: the hydronic type's three cycle periods, 3 x 3600 / 7 = 1542.86 s, shown as 1543 s.
    smoothing = re.search(r"smoothing\s+(\S+) s\s+derived from cycle rate", out)
    assert smoothing is not None and smoothing[1] == "1543"
    # The cooling call's time constant too: direct expansion (3 cph, gain 1.5 K, differential
    # 0.5 K), tau = 3600 / (2 * 3 * ln(2.0 / 1.0)) = 865.62 s, shown as 866 s.
    path = tmp_path / "cooling.yaml"
    path.write_text(COOLING_SITE, encoding="utf-8")
    code = main(["check", "-c", str(path)])
    out = capsys.readouterr().out
    assert code == 0, out
    cooling_tau = 3600 / (2 * 3 * math.log(2.0 / 1.0))
    shown = re.findall(r"cooling: .*\n\s+differential .*, time constant (\S+) s,", out)
    assert shown == [str(round(cooling_tau))] * 2 == ["866", "866"], out


COOLING_SITE = """\
site: {name: lofts}
links: [{name: io, type: modbus-tcp, host: 127.0.0.1}]
points:
  - {name: t1, type: modbus-input, link: io, address: 0}
  - {name: t2, type: modbus-input, link: io, address: 1}
  - {name: h2, type: modbus-output, link: io, address: 0}
  - {name: c1, type: modbus-output, link: io, address: 1}
  - {name: c2, type: modbus-output, link: io, address: 2}
zones:
  - name: server-loft
    inputs: [t1]
    heating: steam
    setpoints: {comfort: 21, standby: 19, economy: 16, protection: 7}
    limits: {min: 5, max: 30}
    cooling:
      output: c1
      type: direct-expansion
      setpoints: {comfort: 24, standby: 26, economy: 28}
  - name: studio
    inputs: [t2]
    output: h2
    heating: forced-air
    setpoints: {comfort: 21, standby: 19, economy: 16, protection: 7}
    limits: {min: 5, max: 30}
    cooling:
      output: c2
      type: direct-expansion
      setpoints: {comfort: 24, standby: 26, economy: 28}
"""


def test_smoothing_shown_is_the_one_the_controller_uses(
    capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    """A zone that only cools smooths over its cooling call's period (direct expansion 3 cph:
    1200 s), not its (unused) heating type's 4 steam periods; a zone with both calls over one
    heating period (forced air 5 cph: 720 s), not forced air's 3 (the controller's
    LawConstants, core/stages/constants.py)."""
    path = tmp_path / "site.yaml"
    path.write_text(COOLING_SITE, encoding="utf-8")
    code = main(["check", "-c", str(path)])
    out = capsys.readouterr().out
    assert code == 0, out
    shown = re.findall(r"smoothing\s+(\S+) s\s+derived from cycle rate", out)
    assert shown == ["1200", "720"], out

    from roomloop.config.loader import load_site
    from roomloop.core.settings import ZoneSettings
    from roomloop.core.stages.constants import LawConstants

    site = load_site(path)
    used = [
        LawConstants.of(ZoneSettings.from_site(site, z.name)).smoothing_s for z in site.zones
    ]
    assert used == [1200.0, 720.0]


def test_program_and_calendar_entries_show_their_changeover(
    capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    """An entry that sets the changeover shows it beside its level; one that does not shows
    none (its zone keeps the changeover it has)."""
    path = tmp_path / "site.yaml"
    path.write_text(
        COOLING_SITE
        + """\
    program:
      - {days: mon-fri, at: "08:00", level: comfort, changeover: auto}
      - {days: mon-fri, at: "18:00", level: economy}
calendar:
  - {name: summer, start: 2026-06-01, end: 2026-08-31, level: standby, changeover: cool,
     zones: [studio]}
  - {name: closure, start: 2026-12-24, end: 2027-01-01, level: protection}
""",
        encoding="utf-8",
    )
    code = main(["check", "-c", str(path)])
    out = capsys.readouterr().out
    assert code == 0, out
    lines = out.splitlines()
    assert "      mon,tue,wed,thu,fri      08:00  comfort, changeover auto" in lines, out
    assert "      mon,tue,wed,thu,fri      18:00  economy" in lines, out
    assert "  summer: 2026-06-01 to 2026-08-31 (whole day): standby, changeover cool, studio" in (
        lines
    ), out
    assert "  closure: 2026-12-24 to 2027-01-01 (whole day): protection, every zone" in lines, out


def test_check_shows_the_history_the_outdoor_point_and_each_heater_power(
    capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    """The keys issue 11 added are shown as resolved, defaults included."""
    _code, out, _err, _path = _check(capsys, tmp_path, 0)
    assert "outdoor temperature: none" in out
    assert re.search(r"history: \S+/warn\.history\.sqlite, a commit at most every 60 s, "
                     r"kept 60 days", out), out
    assert "heater power: not given (no energy figures" in out
    path = tmp_path / "site.yaml"
    path.write_text(
        SITE.format(address=0).replace("site: {name: warn}", "site: {name: warn}\nhistory: "
                                       "{enabled: false}").replace(
            "    heating: hydronic\n", "    heating: hydronic\n    heater_w: 1500\n"
        ),
        encoding="utf-8",
    )
    assert main(["check", "-c", str(path)]) == 0
    out = capsys.readouterr().out
    assert "history: off" in out and "heater power: 1500 W" in out, out
