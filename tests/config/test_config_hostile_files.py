"""Files that are not the site file an integrator meant: each is one line and exit 2, never a hang
or a traceback, from ``check`` and from ``run`` (both read the site through the same loader)."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from roomloop.cli import main


def _roomloop(*args: str) -> subprocess.CompletedProcess[str]:
    """The real entry point, bounded in time: a hang fails the test instead of blocking it."""
    return subprocess.run(
        [sys.executable, "-m", "roomloop", *args],
        capture_output=True,
        text=True,
        timeout=30,
        check=False,
    )


def _one_problem(done: subprocess.CompletedProcess[str], head: str, fragment: str) -> None:
    assert done.returncode == 2, done.stdout + done.stderr
    assert "Traceback" not in done.stdout + done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1, done.stderr
    assert lines[0].startswith(head), lines[0]
    assert fragment in lines[0], lines[0]


@pytest.mark.parametrize("command", ["check", "run"])
def test_a_fifo_is_refused_without_blocking(tmp_path: Path, command: str) -> None:
    fifo = tmp_path / "site.yaml"
    os.mkfifo(fifo)
    extra = ["--state-dir", str(tmp_path / "state")] if command == "run" else []
    done = _roomloop(command, "-c", str(fifo), *extra)
    _one_problem(done, f"{fifo}: ", "named pipe (FIFO), not a regular file")


def test_a_device_is_refused(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["check", "-c", os.devnull]) == 2
    err = capsys.readouterr().err
    assert err.strip() == f"{os.devnull}: is a device, not a regular file; give the YAML file"


def _deep_flow(levels: int) -> str:
    return "site: {name: deep}\nzones:\n  - " + "[" * levels + "]" * levels + "\n"


def _deep_block(levels: int) -> str:
    keys = "".join("  " * i + f"k{i}:\n" for i in range(1, levels))
    return "site:\n" + keys + "  " * levels + "v: 1\n"


@pytest.mark.parametrize("command", ["check", "run"])
@pytest.mark.parametrize("shape", [_deep_flow, _deep_block], ids=["flow", "block"])
def test_a_deeply_nested_file_is_one_line_not_a_recursion_error(
    tmp_path: Path, command: str, shape: object
) -> None:
    path = tmp_path / "deep.yaml"
    path.write_text(shape(500), encoding="utf-8")  # type: ignore[operator]
    extra = ["--state-dir", str(tmp_path / "state")] if command == "run" else []
    done = _roomloop(command, "-c", str(path), *extra)
    assert "RecursionError" not in done.stderr
    # The 65th level (the top mapping is the first) opens on line 3 (flow) or line 65 (block).
    line = 3 if shape is _deep_flow else 65
    _one_problem(done, f"{path}:{line}:", "nested more than 64 levels deep")


def test_nesting_a_site_needs_is_fine(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    """The bound is far above what a site uses: a 60-level list inside an unknown key is
    reported as that key, not as nesting."""
    path = tmp_path / "nested.yaml"
    path.write_text(
        "site: {name: ok}\nzones: []\nextra: " + "[" * 60 + "]" * 60 + "\n", encoding="utf-8"
    )
    assert main(["check", "-c", str(path)]) == 2
    err = capsys.readouterr().err
    assert "levels deep" not in err
    assert f"{path}:3: extra: unknown section" in err


def test_a_tab_gets_indent_with_spaces(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    path = tmp_path / "tab.yaml"
    path.write_text("site:\n\tname: tabbed\n", encoding="utf-8")
    assert main(["check", "-c", str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith(f"{path}:2:1: YAML syntax error: ")
    assert err.endswith("(indent with spaces, not tabs)")


def test_an_alias_that_contains_itself_is_named_where_it_starts(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    site = tmp_path / "alias.yaml"
    site.write_text("site: {name: x}\nzones:\n  - &a [*a]\n")
    assert main(["check", "-c", str(site)]) == 2
    err = capsys.readouterr().err
    assert "nested more than 64 levels deep below here" in err
    assert "[0][0][0][0]" not in err  # not 64 indices in a row
    assert "Traceback" not in err
