"""``roomloop --help`` and each sub-command's help read well in an 80-column terminal."""

from __future__ import annotations

import pytest

from roomloop.cli import main

COMMANDS = [
    "check",
    "simulate",
    "simulate-source",
    "probe",
    "bms-map",
    "run",
    "demo",
    "history",
    "report",
    "tune",
]


def _help(capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch, *argv: str) -> str:
    monkeypatch.setenv("COLUMNS", "80")  # argparse wraps its own parts to this
    with pytest.raises(SystemExit) as done:
        main([*argv, "--help"])
    assert done.value.code == 0
    return capsys.readouterr().out


def test_top_level_description_is_wrapped_at_80_columns(
    capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    text = _help(capsys, monkeypatch)
    assert "An anticipating on/off controller for heating zones" in text
    assert "safety: roomloop switches heating plant" in text
    assert [line for line in text.splitlines() if len(line) > 80] == []


@pytest.mark.parametrize("command", COMMANDS)
def test_sub_command_descriptions_are_wrapped_at_80_columns(
    command: str, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    text = _help(capsys, monkeypatch, command)
    # argparse's own usage line lists every choice of an option; only our texts are checked
    usage_end = text.index("\n\n")
    ours = text[usage_end:].splitlines()
    assert [line for line in ours if len(line) > 80] == []


def test_the_help_states_the_demos_ranges_and_the_heating_types(
    capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    from typing import get_args

    from roomloop.cli import (
        COOLING_TYPES,
        DEMO_HEATING,
        DEMO_HOURS,
        DEMO_MAX_SPEED,
        HEATING_TYPES,
    )
    from roomloop.config.models import CoolingType, HeatingType
    from roomloop.demo.runner import MAX_SPEED, demo_site
    from roomloop.demo.timeline import MAX_HOURS, MIN_HOURS

    # the parser's written-out copies stay equal to what the commands check
    assert get_args(HeatingType) == HEATING_TYPES
    assert get_args(CoolingType) == COOLING_TYPES
    assert DEMO_HOURS == (MIN_HOURS, MAX_HOURS) and DEMO_MAX_SPEED == MAX_SPEED
    site = demo_site(port=1502, state_dir="/nonexistent-demo-state")
    assert tuple(zone.heating for zone in site.zones) == DEMO_HEATING
    demo = " ".join(_help(capsys, monkeypatch, "demo").split())
    assert "simulated hours, 1 to 48 (default 8)" in demo
    assert "above 0 and at most 3600" in demo
    assert "Its zones' heating types: underfloor, hydronic, electric." in demo
    assert "(heating: TYPE): forced-air, hydronic, underfloor, electric, steam;" in demo
    simulate = " ".join(_help(capsys, monkeypatch, "simulate").split())
    assert "forced-air, hydronic, underfloor, electric, steam" in simulate


def test_every_sub_command_is_in_the_help_checks() -> None:
    import argparse

    from roomloop.cli import build_parser

    parser = build_parser()
    commands = next(
        action.choices
        for action in parser._actions
        if isinstance(action, argparse._SubParsersAction)
    )
    assert sorted(commands) == sorted(COMMANDS)


@pytest.mark.parametrize("command", ["history", "report", "tune"])
def test_the_help_says_a_span_counts_back_from_the_end_of_the_history(
    command: str, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    """``--since 24h`` is the last 24 h of the history (source.parse_bound), which on an
    old history or one of the demo's fast clock is not the last 24 h before now."""
    text = " ".join(_help(capsys, monkeypatch, command).split())
    assert (
        "--since WHEN 24h, 7d (counted back from the newest tick of the history, not from "
        "now), a date or date-time"
    ) in text
