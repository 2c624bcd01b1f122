"""Topic names are bounded by MQTT's own limits.

MQTT 3.1.1 (OASIS Standard, 2014) section 1.5.3 and MQTT 5.0 (OASIS Standard, 2019) section
1.5.4: a UTF-8 string, a topic name among them, carries a two-byte length, so at most 65535
bytes, and never U+0000 [published; MQTT-1.5.3-2 and MQTT-1.5.4-2]. Wildcards never in a topic
name (section 4.7.1) and ``$`` topics being the broker's (section 4.7.2): the fixtures
``bad/topic_prefix_*.yaml`` [published; the 4.7.x section numbers recalled from memory].
roomloop appends at most 128 bytes to its prefix (``/zone/<zone, up to 64 bytes>/cmd/<field>``),
so a prefix may have 65535 - 128 bytes.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from roomloop.cli import main
from roomloop.config.models import MQTT_STRING_MAX_BYTES, PREFIX_HEADROOM_BYTES

LONGEST_ZONE = "z" * 64
LONGEST_SUFFIX = f"/zone/{LONGEST_ZONE}/cmd/hold_until"


def _site(tmp_path: Path, prefix: str, topic: str = "sensors/t1") -> Path:
    path = tmp_path / "site.yaml"
    path.write_text(
        "site: {name: long}\n"
        f'broker: {{host: 127.0.0.1, topic_prefix: "{prefix}"}}\n'
        "points:\n"
        f'  - {{name: t1, type: mqtt-input, topic: "{topic}"}}\n'
        "  - {name: r1, type: mqtt-output, command_topic: relays/r1}\n"
        f"zones:\n  - {{name: {LONGEST_ZONE}, inputs: [t1], output: r1, heating: electric}}\n",
        encoding="utf-8",
    )
    return path


def _check(capsys: pytest.CaptureFixture[str], path: Path) -> tuple[int, str]:
    code = main(["check", "-c", str(path)])
    captured = capsys.readouterr()
    assert "Traceback" not in captured.out + captured.err
    return code, captured.err


def test_the_limit_is_mqtts() -> None:
    assert MQTT_STRING_MAX_BYTES == 2**16 - 1  # two-byte length prefix (MQTT 3.1.1, 1.5.3)
    assert len(LONGEST_SUFFIX.encode()) <= PREFIX_HEADROOM_BYTES


def test_a_70000_character_prefix_is_refused(
    capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    code, err = _check(capsys, _site(tmp_path, "p" * 70_000))
    assert code == 2
    line = err.strip()
    assert line.startswith(f"{tmp_path / 'site.yaml'}:2: broker.topic_prefix: ")
    assert "70000 bytes of UTF-8; MQTT allows a topic at most 65535 bytes" in line
    assert "MQTT 3.1.1 section 1.5.3" in line
    assert len(line) < 400  # the prefix itself is not repeated


def test_the_longest_prefix_leaves_room_for_the_longest_topic(
    capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    prefix = "p" * (MQTT_STRING_MAX_BYTES - PREFIX_HEADROOM_BYTES)
    code, err = _check(capsys, _site(tmp_path, prefix))
    assert code == 0, err
    assert len((prefix + LONGEST_SUFFIX).encode()) <= MQTT_STRING_MAX_BYTES
    code, err = _check(capsys, _site(tmp_path, prefix + "p"))
    assert code == 2
    assert "roomloop appends up to 128 bytes to it" in err


def test_bytes_not_characters_are_counted(
    capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    # 'é' is two bytes in UTF-8 (RFC 3629): 33,000 characters are 66,000 bytes.
    code, err = _check(capsys, _site(tmp_path, "roomloop/ok", topic="é" * 33_000))
    assert code == 2
    assert "points[t1].topic: the topic is 66000 bytes of UTF-8" in err


def test_a_point_topic_of_exactly_65535_bytes_passes(
    capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    code, err = _check(capsys, _site(tmp_path, "roomloop/ok", topic="t" * 65_535))
    assert code == 0, err
    code, err = _check(capsys, _site(tmp_path, "roomloop/ok", topic="t" * 65_536))
    assert code == 2
    assert "65536 bytes" in err
