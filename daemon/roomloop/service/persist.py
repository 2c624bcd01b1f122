"""The state file: zone runtime state kept across restarts, written so a crash never corrupts it.

One JSON file per site in the state directory. Saving writes a temporary file
in the same directory, fsyncs it, renames it over the old one and fsyncs the
directory, so after a power cut the file is either the old or the new one,
never half of each. A file that cannot be read as ours (corrupt, another
program's, another site's, a newer format) is renamed aside with a log event
and the service starts fresh; it never blocks the start.
"""

from __future__ import annotations

import contextlib
import json
import os
import tempfile
import time
from pathlib import Path
from typing import Any

import structlog

log = structlog.get_logger("roomloop.persist")

FORMAT = "roomloop-state"
VERSION = 1


class StateDirError(Exception):
    """The state directory cannot be used; ``usage`` when the path itself is wrong (a file)."""

    def __init__(self, message: str, *, usage: bool) -> None:
        super().__init__(message)
        self.usage = usage


def prepare_state_dir(state_dir: str | os.PathLike[str]) -> Path:
    """Create the state directory if needed and check it is writable, before the service starts.

    Raises :class:`StateDirError` with one line naming the directory: ``usage`` for a
    path that is (or goes through) a file, not ``usage`` for missing permissions.
    """
    directory = Path(state_dir)
    if directory.exists() and not directory.is_dir():
        raise StateDirError(
            f"state directory {directory} is a file, not a directory", usage=True
        )
    try:
        directory.mkdir(parents=True, exist_ok=True)
    except (FileExistsError, NotADirectoryError):
        blocker = next((p for p in directory.parents if p.exists() and not p.is_dir()), None)
        where = f" ({blocker} is a file)" if blocker is not None else ""
        raise StateDirError(
            f"state directory {directory} cannot be created{where}", usage=True
        ) from None
    except PermissionError:
        raise StateDirError(
            f"state directory {directory} cannot be created: permission denied", usage=False
        ) from None
    except OSError as exc:
        raise StateDirError(
            f"state directory {directory} cannot be created: {exc.strerror or exc}", usage=False
        ) from None
    if not os.access(directory, os.W_OK | os.X_OK):
        raise StateDirError(
            f"state directory {directory} is not writable by this user: permission denied",
            usage=False,
        )
    return directory


class StateStore:
    """Reads and atomically writes ``<state_dir>/<site>.state.json``."""

    def __init__(self, state_dir: str | os.PathLike[str], site_name: str) -> None:
        self.directory = Path(state_dir)
        self.site_name = site_name
        self.path = self.directory / f"{site_name}.state.json"
        self._last_written: str | None = None

    def load(self) -> dict[str, Any]:
        """The saved zone states by zone name; empty when there is no usable file."""
        try:
            text = self.path.read_text(encoding="utf-8")
        except FileNotFoundError:
            log.info("persist.no_state", path=str(self.path))
            return {}
        except OSError as exc:
            log.warning("persist.unreadable", path=str(self.path), error=str(exc))
            return {}
        except UnicodeDecodeError:
            self._move_aside("not UTF-8 text")
            return {}
        try:
            document = json.loads(text)
        except json.JSONDecodeError as exc:
            self._move_aside(f"not JSON ({exc.msg} at line {exc.lineno})")
            return {}
        problem = _check_document(document, self.site_name)
        if problem is not None:
            self._move_aside(problem)
            return {}
        zones: dict[str, Any] = document["zones"]
        log.info("persist.loaded", path=str(self.path), zones=sorted(zones))
        self._last_written = _dump({**document, "saved_at": None})
        return zones

    def save(self, zones: dict[str, Any], now: float) -> bool:
        """Write the zone states if they differ from what was last written; True if written."""
        document = {
            "format": FORMAT,
            "version": VERSION,
            "site": self.site_name,
            "saved_at": now,
            "zones": zones,
        }
        comparable = _dump({**document, "saved_at": None})
        if comparable == self._last_written:
            return False
        self.directory.mkdir(parents=True, exist_ok=True)
        data = _dump(document).encode("utf-8")
        fd, tmp_name = tempfile.mkstemp(
            prefix=f".{self.path.name}.", suffix=".tmp", dir=self.directory
        )
        try:
            with os.fdopen(fd, "wb") as handle:
                handle.write(data)
                handle.flush()
                os.fsync(handle.fileno())
            os.replace(tmp_name, self.path)
        except BaseException:
            with contextlib.suppress(OSError):
                os.unlink(tmp_name)
            raise
        _fsync_directory(self.directory)
        self._last_written = comparable
        return True

    def _move_aside(self, reason: str) -> None:
        stamp = time.strftime("%Y%m%dT%H%M%S", time.gmtime())
        target = self.path.with_name(f"{self.path.name}.bad-{stamp}")
        counter = 1
        while target.exists():
            counter += 1
            target = self.path.with_name(f"{self.path.name}.bad-{stamp}-{counter}")
        try:
            os.replace(self.path, target)
        except OSError as exc:
            log.error(
                "persist.move_aside_failed", path=str(self.path), reason=reason, error=str(exc)
            )
            return
        log.warning("persist.moved_aside", path=str(self.path), moved_to=str(target), reason=reason)


def _check_document(document: Any, site_name: str) -> str | None:
    if not isinstance(document, dict) or document.get("format") != FORMAT:
        return "not a roomloop state file"
    if document.get("version") != VERSION:
        return f"state format version {document.get('version')!r}, this roomloop reads {VERSION}"
    if document.get("site") != site_name:
        return f"state of site {document.get('site')!r}, not {site_name!r}"
    if not isinstance(document.get("zones"), dict):
        return "no zone states in the file"
    return None


def _dump(document: dict[str, Any]) -> str:
    return json.dumps(document, sort_keys=True, separators=(",", ":"))


def _fsync_directory(directory: Path) -> None:
    """Make the rename itself durable (POSIX needs the directory synced too)."""
    try:
        fd = os.open(directory, os.O_RDONLY | os.O_DIRECTORY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
