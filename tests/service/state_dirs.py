"""A state directory that really cannot be written, for the persistence-failure tests.

As a normal user a directory without write permission does; root writes through
permissions, so for root the directory is a small tmpfs mounted read-only (the
errno is EROFS, as on a read-only SD card). Skips when neither is possible.
"""

from __future__ import annotations

import contextlib
import os
import subprocess
from collections.abc import Iterator
from pathlib import Path

import pytest

from roomloop.service.lock import fallback_dirs, lock_digest


@contextlib.contextmanager
def read_only_dir(path: Path, files: dict[str, bytes] | None = None) -> Iterator[Path]:
    """``path`` as a read-only directory holding ``files``; writable again afterwards.

    The fallback lock files a ``roomloop run`` on it leaves (service/lock.py; in /run
    for root) are removed afterwards.
    """
    path.mkdir(parents=True, exist_ok=True)
    try:
        with _read_only(path, files) as directory:
            yield directory
    finally:
        for parent in fallback_dirs(path):
            for leftover in parent.glob(f"roomloop-*-{lock_digest(path)}.lock"):
                leftover.unlink(missing_ok=True)


@contextlib.contextmanager
def _read_only(path: Path, files: dict[str, bytes] | None) -> Iterator[Path]:
    if os.geteuid() != 0:
        for name, data in (files or {}).items():
            (path / name).write_bytes(data)
        path.chmod(0o555)
        try:
            yield path
        finally:
            path.chmod(0o755)
        return
    mounted = subprocess.run(
        ["mount", "-t", "tmpfs", "-o", "size=1m", "tmpfs", str(path)],
        capture_output=True, check=False,
    )
    if mounted.returncode != 0:
        pytest.skip(f"root, and no tmpfs to mount read-only: {mounted.stderr.decode().strip()}")
    try:
        for name, data in (files or {}).items():
            (path / name).write_bytes(data)
        subprocess.run(["mount", "-o", "remount,ro", str(path)], check=True)
        yield path
    finally:
        subprocess.run(["umount", "-l", str(path)], check=False)


def make_writable(path: Path) -> None:
    """Undo :func:`read_only_dir` while it is active (the card is writable again)."""
    if os.geteuid() != 0:
        path.chmod(0o755)
    else:
        subprocess.run(["mount", "-o", "remount,rw", str(path)], check=True)
