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
from roomloop.cli.tune import (
    LOSS_FACTORS,
    WORTH_CHANGING,
    recommendation_text,
    search_tuning,
    today_on,
)
from roomloop.config.loader import load_site
from roomloop.plant.loader import builtin_plant_path, load_plant

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


def simulated_overall(site: Path, plant: str) -> dict[str, float]:
    """``roomloop simulate -c SITE --zone den --plant PLANT``'s overall figures."""
    out = site.parent / "sim.json"
    assert main(
        ["simulate", "-c", str(site), "--zone", "den", "--plant", plant, "--json", str(out)]
    ) == 0
    overall: dict[str, float] = json.loads(out.read_text())["overall"]
    return overall


def test_tune_today_is_simulate_of_the_zone(tmp_path: Path) -> None:
    path = tmp_path / "site.yaml"
    path.write_text(SITE)
    simulated = simulated_overall(path, "hydronic")
    today = today_on(load_site(str(path)), "den", load_plant("hydronic"))
    assert today.control_accuracy_k == pytest.approx(simulated["control_accuracy_k"], abs=1e-9)
    assert today.energy_kwh == pytest.approx(simulated["energy_kwh"], abs=1e-9)
    assert today.control_accuracy_k < 0.5  # a zone in fail-safe throughout gave about 5 K


@pytest.mark.parametrize(
    "own",
    [{"differential_k": "1.5"}, {"differential_k": "1.5", "anticipator_time_constant_s": "900"}],
    ids=["derived-time-constant", "own-time-constant"],
)
def test_a_too_wide_differential_is_narrowed_and_the_pasted_lines_predict_as_printed(
    tmp_path: Path, own: dict[str, str]
) -> None:
    """The recommendation varies the differential (issue 11), and its site-file lines mean
    what the 'recommended' column says: pasted over the zone's tuning, ``simulate -c SITE
    --zone Z`` on the same plant gives the same figures (the search and the site file agree
    on the time constant, also where the site sets its own, which would otherwise stay)."""

    def site_with(tuning: dict[str, str]) -> str:
        keys = ", ".join(f"{key}: {value}" for key, value in tuning.items())
        return SITE.replace(
            "    heater_w: 1500\n", "    heater_w: 1500\n    tuning: {" + keys + "}\n"
        )

    path = tmp_path / "site.yaml"
    path.write_text(site_with(own))
    plant = load_plant("hydronic")
    found = search_tuning(load_site(str(path)), "den", plant)
    assert found.changes
    assert found.settings.differential_k < 1.5
    assert found.best.control_accuracy_k < found.today.control_accuracy_k - WORTH_CHANGING
    text = recommendation_text(found, "den")
    pasted = text.split("site-file lines to paste (zone den):\n")[1]
    lines = dict(
        line.strip().split(": ") for line in pasted.splitlines() if line.startswith("      ")
    )
    assert float(lines["differential_k"]) == found.settings.differential_k
    assert ("anticipator_time_constant_s" in lines) == ("anticipator_time_constant_s" in own)
    tuned = site_with({**own, **lines})
    path.write_text(tuned)
    simulated = simulated_overall(path, "hydronic")
    # (a time constant of the site's own is pasted to 6 digits: agreement to a few mK)
    assert simulated["control_accuracy_k"] == pytest.approx(found.best.control_accuracy_k,
                                                            abs=5e-3)
    assert simulated["cycles_per_hour"] == pytest.approx(found.best.cycles_per_hour, abs=0.05)
    if "anticipator_time_constant_s" not in own:
        assert simulated["control_accuracy_k"] == pytest.approx(
            found.best.control_accuracy_k, abs=1e-9
        )


def test_a_gain_not_above_the_differential_with_its_own_time_constant_is_searched(
    tmp_path: Path,
) -> None:
    """A site may set gain 0.8 K under a 1.0 K differential when it gives the time constant
    itself (the cycle-rate derivation needs gain > differential): tune must not stop with a
    traceback on it."""
    path = tmp_path / "site.yaml"
    path.write_text(SITE.replace(
        "    heater_w: 1500\n",
        "    heater_w: 1500\n    tuning: {differential_k: 1.0, anticipator_gain_k: 0.8, "
        "anticipator_time_constant_s: 600}\n",
    ))
    found = search_tuning(load_site(str(path)), "den", load_plant("hydronic"))
    assert found.today_settings.anticipator_gain_k == 0.8
    assert found.tried > 1


def test_an_undetermined_loss_is_spanned_and_the_span_is_simulate_of_the_scaled_plant(
    tmp_path: Path,
) -> None:
    """Without a determined loss to outdoors (no outdoor point), the recommendation is
    searched at the fitted loss and must hold at a third of it and three times it too; the
    figures printed for those are ``simulate`` on the plant with that loss."""
    path = tmp_path / "site.yaml"
    path.write_text(SITE.replace(
        "    heater_w: 1500\n", "    heater_w: 1500\n    tuning: {differential_k: 1.5}\n"
    ))
    site = load_site(str(path))
    plant = load_plant("hydronic")
    found = search_tuning(site, "den", plant, span_loss=True)
    assert found.changes and found.settings.differential_k < 1.5
    assert len(found.spans) == len(LOSS_FACTORS)
    for today_there, best_there in found.spans:
        assert best_there.control_accuracy_k < today_there.control_accuracy_k
    # the span's 'today' at three times the loss is simulate on such a plant file
    text = builtin_plant_path("hydronic").read_text()
    loss = plant.room.loss_w_per_k
    assert f"loss_w_per_k: {loss:g}" in text
    scaled = tmp_path / "lossy.yaml"
    scaled.write_text(text.replace(f"loss_w_per_k: {loss:g}", f"loss_w_per_k: {loss * 3!r}"))
    simulated = simulated_overall(path, str(scaled))
    assert LOSS_FACTORS[1] == 3.0
    assert found.spans[1][0].control_accuracy_k == pytest.approx(
        simulated["control_accuracy_k"], abs=1e-9
    )
    shown = recommendation_text(found, "den", loss_w_per_k=loss)
    assert f"from {loss / 3:.3g} to {loss * 3:.3g} W/K" in shown
    assert "site-file lines to paste" in shown
