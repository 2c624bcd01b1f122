"""``roomloop tune``'s prediction runs the zone as ``roomloop simulate -c SITE --zone Z`` does.

The 'today' column of the recommendation is the standard protocol on the identified plant
with the zone's own tuning, set points and input points: the same run as ``simulate -c
SITE --zone Z --plant P`` (here on a built-in plant, so no identification is needed). A
zone whose input is not called 'temperature' once ran that prediction in fail-safe.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from roomloop.cli import main
from roomloop.cli.tune import today_on
from roomloop.config.loader import load_site
from roomloop.plant.loader import load_plant

SITE = """\
site: {name: elm-cottage, timezone: Europe/London, units: C, state_dir: /tmp/unused}
links:
  - {type: modbus-tcp, name: io, host: 127.0.0.1}
points:
  - {type: modbus-input, name: den-air, link: io, address: 0}
  - {type: modbus-output, name: den-valve, link: io, address: 0}
zones:
  - name: den
    inputs: [den-air]
    output: den-valve
    heating: hydronic
    heater_w: 1500
    setpoints: {comfort: 21, standby: 19, economy: 16, protection: 7}
"""


def test_tune_today_is_simulate_of_the_zone(tmp_path: Path) -> None:
    path = tmp_path / "site.yaml"
    path.write_text(SITE)
    out = tmp_path / "sim.json"
    assert main(
        ["simulate", "-c", str(path), "--zone", "den", "--plant", "hydronic", "--json", str(out)]
    ) == 0
    simulated = json.loads(out.read_text())["overall"]
    today = today_on(load_site(str(path)), "den", load_plant("hydronic"))
    assert today.control_accuracy_k == pytest.approx(simulated["control_accuracy_k"], abs=1e-9)
    assert today.energy_kwh == pytest.approx(simulated["energy_kwh"], abs=1e-9)
    assert today.control_accuracy_k < 0.5  # a zone in fail-safe throughout gave about 5 K
