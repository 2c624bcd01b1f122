"""The one-zone site the history tests write their history files for, and its day zero."""

from __future__ import annotations

from pathlib import Path
from zoneinfo import ZoneInfo

SITE = """\
site: {{name: test-house, timezone: Europe/Vienna, units: {units}, state_dir: {state}}}
links:
  - {{type: modbus-tcp, name: io, host: 127.0.0.1}}
points:
  - {{type: modbus-input, name: t1, link: io, address: 0}}
  - {{type: modbus-output, name: r, link: io, address: 0}}
zones:
  - {{name: den, inputs: [t1], output: r, heating: hydronic, heater_w: 1500}}
"""
"""The site file's text; ``units`` and ``state`` are filled in by :func:`write_site`."""
T0 = 1_767_225_600.0 + 23 * 3600.0  # 2026-01-02 00:00 in Vienna (UTC+1)
VIENNA = ZoneInfo("Europe/Vienna")


def write_site(tmp_path: Path, units: str = "C", template: str = SITE) -> Path:
    """``tmp_path/site.yaml`` with its state directory ``tmp_path/state`` (not created)."""
    path = tmp_path / "site.yaml"
    path.write_text(template.format(units=units, state=tmp_path / "state"))
    return path
