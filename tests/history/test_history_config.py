"""The site file's ``history:`` section and a zone's ``heater_w``: defaults and refusals."""

from __future__ import annotations

from pathlib import Path

import pytest

from roomloop.cli import main
from roomloop.config.loader import load_site
from roomloop.errors import ConfigError

SITE = """\
site: {{name: h-site, state_dir: {state}}}
links:
  - {{type: modbus-tcp, name: io, host: 127.0.0.1}}
points:
  - {{type: modbus-input, name: t, link: io, address: 0}}
  - {{type: modbus-output, name: r, link: io, address: 0}}
zones:
  - name: room
    inputs: [t]
    output: r
    heating: hydronic
{extra_zone}{extra}"""


def _write(tmp_path: Path, extra: str = "", extra_zone: str = "") -> Path:
    path = tmp_path / "site.yaml"
    path.write_text(SITE.format(state=tmp_path, extra=extra, extra_zone=extra_zone))
    return path


def test_defaults_on_without_a_section(tmp_path: Path) -> None:
    site = load_site(_write(tmp_path))
    assert site.history.enabled is True
    assert site.history.commit_s == 60.0
    assert site.history.keep_days == 60.0
    assert site.zones[0].heater_w is None


def test_section_and_heater_read(tmp_path: Path) -> None:
    site = load_site(
        _write(
            tmp_path,
            extra="history: {enabled: false, commit_s: 5, keep_days: 7}\n",
            extra_zone="    heater_w: 2400\n",
        )
    )
    assert (site.history.enabled, site.history.commit_s, site.history.keep_days) == (
        False,
        5.0,
        7.0,
    )
    assert site.zones[0].heater_w == 2400.0


@pytest.mark.parametrize(
    ("case", "key"),
    [
        (("history: {commit_s: 0}\n", ""), "history.commit_s"),
        (("history: {keep_days: -1}\n", ""), "history.keep_days"),
        (("history: {commit: 5}\n", ""), "history.commit"),
        (("", "    heater_w: 0\n"), "zones[room].heater_w"),
    ],
)
def test_bad_values_name_file_key_and_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], case: tuple[str, str], key: str
) -> None:
    line = 12  # the line after the zone's last key: the history section or the heater_w line
    path = _write(tmp_path, extra=case[0], extra_zone=case[1])
    with pytest.raises(ConfigError) as caught:
        load_site(path)
    text = "\n".join(str(p) for p in caught.value.problems)
    assert f"{path}:{line}: {key}" in text
    assert main(["check", "-c", str(path)]) == 2
    assert key in capsys.readouterr().err


def test_keep_days_bounds_are_the_ones_the_docs_give(tmp_path: Path) -> None:
    """docs/configuration.md said 0-3660, but the model refuses 0 (it would prune every
    row): the docs' row gives the model's bounds, and the model holds to them."""
    docs = (Path(__file__).resolve().parents[2] / "docs" / "configuration.md").read_text()
    row = next(line for line in docs.splitlines() if line.startswith("| `keep_days` |"))
    assert "(above 0, at most 3660; 0.5: half a day)" in row
    for days in ("0.5", "3660"):
        (tmp_path / days).mkdir()
        site = load_site(_write(tmp_path / days, extra=f"history: {{keep_days: {days}}}\n"))
        assert site.history.keep_days == float(days)
    for days in ("0", "3660.5"):
        (tmp_path / days).mkdir()
        with pytest.raises(ConfigError) as caught:
            load_site(_write(tmp_path / days, extra=f"history: {{keep_days: {days}}}\n"))
        assert "history.keep_days" in str(caught.value)
