"""Every mistake of issue 2 (points 5 and 6) gives exit 2 and ``FILE:LINE: key.path: message``.

Each file in ``bad/`` marks the lines that must be reported: ``# ERROR: key.path: fragment``
on the offending line (the fragment must appear in that problem's message), or
``# SYNTAX: LINE`` for a YAML syntax error (reported with line and column). The line
numbers are read from the files, so a fixture and its expectation cannot drift apart.
The command line runs for real (``roomloop.cli.main``), in-process for speed, and a few
cases run ``python -m roomloop`` as a subprocess to prove the installed entry point.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from roomloop.cli import main

BAD = Path(__file__).parent / "bad"
MARK = re.compile(r"#\s*ERROR:\s*(?P<path>[^:]+?):\s*(?P<fragment>.+?)\s*$")
SYNTAX = re.compile(r"#\s*SYNTAX:\s*(?P<line>\d+)")


def _expectations(path: Path) -> list[tuple[int, str, str]]:
    found = []
    for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), start=1):
        match = MARK.search(line)
        if match:
            found.append((number, match["path"], match["fragment"]))
    return found


def _run(capsys: pytest.CaptureFixture[str], path: Path | str) -> tuple[int, str, str]:
    code = main(["check", "-c", str(path)])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


BAD_FILES = sorted(p for p in BAD.glob("*.yaml") if _expectations(p))


@pytest.mark.parametrize("path", BAD_FILES, ids=lambda p: p.stem)
def test_bad_config_reports_each_problem_at_its_line(
    capsys: pytest.CaptureFixture[str], path: Path
) -> None:
    code, out, err = _run(capsys, path)
    assert code == 2, out + err
    assert "Traceback" not in out + err
    lines = err.splitlines()
    for number, key_path, fragment in _expectations(path):
        head = f"{path}:{number}: {key_path}: "
        hits = [line for line in lines if line.startswith(head)]
        assert hits, f"no problem at {head!r}; got:\n{err}"
        assert any(fragment in line for line in hits), f"{fragment!r} not in {hits}"
    # Nothing else: every reported problem was expected (no false alarms).
    expected_heads = {f"{path}:{n}: {p}: " for n, p, _ in _expectations(path)}
    extra = [line for line in lines if not any(line.startswith(h) for h in expected_heads)]
    assert not extra, f"unexpected problems: {extra}"


@pytest.mark.parametrize("name", ["syntax_error.yaml", "syntax_tab.yaml"])
def test_yaml_syntax_error_has_line_and_column(
    capsys: pytest.CaptureFixture[str], name: str
) -> None:
    path = BAD / name
    expected_line = int(SYNTAX.search(path.read_text(encoding="utf-8"))["line"])  # type: ignore[index]
    code, out, err = _run(capsys, path)
    assert code == 2
    assert "Traceback" not in out + err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert re.match(
        rf"{re.escape(str(path))}:{expected_line}:\d+: YAML syntax error: ", lines[0]
    ), lines[0]


def _one_line(capsys: pytest.CaptureFixture[str], path: Path | str, fragment: str) -> None:
    code, out, err = _run(capsys, path)
    assert code == 2
    assert "Traceback" not in out + err
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith(f"{path}:"), lines[0]
    assert fragment in lines[0]


def test_missing_file(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    _one_line(capsys, tmp_path / "nowhere.yaml", "no such file")


def test_empty_file(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    path = tmp_path / "empty.yaml"
    path.write_text("\n  \n", encoding="utf-8")
    _one_line(capsys, path, "the file is empty")


def test_only_comments(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    path = tmp_path / "comments.yaml"
    path.write_text("# nothing here yet\n", encoding="utf-8")
    _one_line(capsys, path, "no YAML document")


@pytest.mark.parametrize(
    ("text", "kind"), [("- site\n- zones\n", "not a list"), ("just words\n", "not a single value")]
)
def test_non_mapping_file(
    capsys: pytest.CaptureFixture[str], tmp_path: Path, text: str, kind: str
) -> None:
    path = tmp_path / "list.yaml"
    path.write_text(text, encoding="utf-8")
    _one_line(
        capsys, path, f"the top level must be a mapping of sections (key: value lines), {kind}"
    )


def test_directory_instead_of_file(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    _one_line(capsys, tmp_path, "is a directory")


def test_not_utf8(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    path = tmp_path / "binary.yaml"
    path.write_bytes(b"site:\n  name: caf\xe9\n")
    _one_line(capsys, path, "not UTF-8")


@pytest.mark.skipif(os.geteuid() == 0, reason="root reads any file")
def test_unreadable_file(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    path = tmp_path / "secret.yaml"
    path.write_text("site: {name: x}\n", encoding="utf-8")
    path.chmod(0)
    _one_line(capsys, path, "cannot read the file: permission denied")


def test_missing_sections(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    path = tmp_path / "bare.yaml"
    path.write_text("logging: {level: info}\n", encoding="utf-8")
    code, _out, err = _run(capsys, path)
    assert code == 2
    assert f"{path}:1: site: missing" in err
    assert f"{path}:1: zones: missing" in err


@pytest.mark.parametrize(
    ("name", "expect"),
    [
        ("unknown_point.yaml", ":10: zones[hall].inputs[1]: unknown point 'hall-tmep'"),
        ("syntax_error.yaml", ":5:"),
    ],
)
def test_real_entry_point(name: str, expect: str) -> None:
    """``python -m roomloop check`` as an integrator runs it: exit 2, the line, no traceback."""
    path = BAD / name
    done = subprocess.run(
        [sys.executable, "-m", "roomloop", "check", "-c", str(path)],
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
    )
    assert done.returncode == 2
    assert "Traceback" not in done.stdout + done.stderr
    assert f"{path}{expect}" in done.stderr


def test_bundled_examples_pass(capsys: pytest.CaptureFixture[str]) -> None:
    root = Path(__file__).resolve().parents[2] / "config"
    for name in ("example.yaml", "minimal.yaml"):
        code, out, err = _run(capsys, root / name)
        assert code == 0, err
        assert err == ""
        assert "zones" in out and f"{root / name}: ok" in out


def test_alias_expansion_is_bounded(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    """Nested aliases (9^8 values from a few lines) are refused, not expanded."""
    lines = ['a0: &a0 ["x", "x", "x", "x", "x", "x", "x", "x", "x"]']
    for i in range(1, 8):
        lines.append(f"a{i}: &a{i} [" + ", ".join([f"*a{i - 1}"] * 9) + "]")
    path = tmp_path / "aliases.yaml"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    code, out, err = _run(capsys, path)
    assert code == 2
    assert "Traceback" not in out + err
    assert "values (aliases expanding?)" in err


def test_check_into_a_closed_pipe_is_quiet() -> None:
    """``roomloop check -c site.yaml | head``: the reader may leave early; no traceback."""
    read_end, write_end = os.pipe()
    os.close(read_end)  # every write now fails with EPIPE
    try:
        done = subprocess.run(
            [sys.executable, "-m", "roomloop", "check", "-c", "config/example.yaml"],
            cwd=Path(__file__).resolve().parents[2],
            stdout=write_end,
            stderr=subprocess.PIPE,
            text=True,
            timeout=60,
            check=False,
        )
    finally:
        os.close(write_end)
    assert "Traceback" not in done.stderr, done.stderr
    assert done.returncode == 0
