"""The state file: zone runtime state kept across restarts, written so a crash never corrupts it.

One JSON file per site in the state directory. Saving writes a temporary file
in the same directory, fsyncs it, renames it over the old one and fsyncs the
directory, so after a power cut the file is either the old or the new one,
never half of each. A file that cannot be read as ours (corrupt, another
program's, another site's, a newer format, nested too deeply to parse, a
directory) is renamed aside with a log event and the service starts fresh; it
never blocks the start.

Relay switches are also made durable the moment they happen, before the device
is written (:meth:`StateStore.record_switch`): one line appended to
``<site>.switches`` (the zone's state at the switch) and synced, cheaper than
rewriting the state file with its directory. At load a zone whose recorded
switch is newer than its saved one takes the recorded state, so the switch times
short-cycle protection needs survive a SIGKILL between a switch and the next full
save (and before the first). A full save that covers the journal empties it.

The document also keeps each zone's learned warm-up model of optimum start (``warm_up``:
zone name -> :meth:`~roomloop.core.optimum_start.WarmUpModel.to_dict`), present only once a
zone has learned something; :attr:`StateStore.warm_up` holds what the file had at load.
Each heat source's short-cycle history (``sources``: source name ->
:meth:`~roomloop.core.source.SourceMemory.to_dict`: its starts of the last hour, whether it
runs and since when, when it last stopped) is kept beside them, so a restart does not get
around its starts per hour; :attr:`StateStore.sources` holds what the file had at load (the
reader checks each entry). A file without the key (from before sources were kept, or a site
without sources) loads as before.

A state directory that cannot be written (a read-only SD card, a lost mount,
permissions) does not stop the service either: the zones start fresh (the file,
if readable, may date from before the directory failed), every save is tried
and fails, and :attr:`StateStore.status` says ``failed: <reason>`` (published in
each zone's state as ``persistence``) until a save succeeds again.
"""

from __future__ import annotations

import contextlib
import json
import os
import tempfile
import threading
import time
from pathlib import Path
from typing import TYPE_CHECKING, Any

import structlog

from roomloop.io.eventlog import RateLimitedLog

if TYPE_CHECKING:
    from roomloop.core.state import ZoneState

log = structlog.get_logger("roomloop.persist")

FORMAT = "roomloop-state"
VERSION = 1
MAX_TIME_S = 253402300799.0
"""The end of year 9999 (as ``roomloop.core.state``): a switch time beyond is not ours."""


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
        self.journal_path = self.directory / f"{site_name}.switches"
        self.failure: str | None = None
        """Why the state cannot be made durable (``None`` while saves work)."""
        self._events = RateLimitedLog(log)
        """Folds the failed saves: a full disk is tried at every change, not logged each time."""
        self._lock = threading.Lock()
        """Saves run in a worker thread, switch records in another: one at a time."""
        self._recorded: dict[str, tuple[float, bool]] = {}
        """Per zone the last switch recorded in the journal since it was last emptied."""
        self._journal_synced = False
        self.warm_up: dict[str, Any] = {}
        """The saved warm-up models by zone as found at :meth:`load` (checked by the reader)."""
        self.sources: dict[str, Any] = {}
        """The saved heat sources' histories by name as found at :meth:`load` (checked by
        the reader)."""

    @property
    def status(self) -> str:
        """``ok``, or ``failed: <reason>`` while the state cannot be saved."""
        return "ok" if self.failure is None else f"failed: {self.failure}"

    def load(self) -> dict[str, Any]:
        """The saved zone states by zone name, newest switches applied; empty if none usable.

        A state directory that cannot be written marks persistence failed and loads
        nothing: the zones start fresh and control goes on.
        """
        problem = _unwritable(self.directory)
        if problem is not None:
            self.failure = problem  # told once, by persist.failed_at_start
            log.error(
                "persist.failed_at_start",
                path=str(self.path),
                reason=problem,
                consequence="zones start fresh; commands and switch times are not kept",
            )
            return {}
        zones = self._load_file()
        applied = self._apply_journal(zones)
        if zones:
            log.info("persist.loaded", path=str(self.path), zones=sorted(zones), switches=applied)
        return zones

    def _load_file(self) -> dict[str, Any]:
        read = self._read_document()
        if read is None:
            return {}
        (document,) = read
        problem = _check_document(document, self.site_name)
        if problem is not None:
            self._move_aside(problem)
            return {}
        zones: dict[str, Any] = document["zones"]
        warm_up = document.get("warm_up")
        self.warm_up = dict(warm_up) if isinstance(warm_up, dict) else {}
        sources = document.get("sources")
        if sources is not None and not isinstance(sources, dict):
            log.warning(
                "persist.source_states_rejected", path=str(self.path),
                reason="sources is not an object", consequence="every source starts fresh",
            )
        self.sources = dict(sources) if isinstance(sources, dict) else {}
        self._last_written = _dump({**document, "saved_at": None})
        return zones

    def _read_document(self) -> tuple[Any] | None:
        """The state file's JSON (in a 1-tuple: the file may hold ``null``); None when there
        is no file or it is unreadable or not JSON (then it is moved aside)."""
        try:
            text = self.path.read_text(encoding="utf-8")
        except FileNotFoundError:
            log.info("persist.no_state", path=str(self.path))
            return None
        except UnicodeDecodeError:
            self._move_aside("not UTF-8 text")
            return None
        except OSError as exc:  # a directory in its place, no permission, an I/O error
            self._move_aside(f"unreadable ({exc.strerror or exc})")
            return None
        try:
            return (json.loads(text),)
        except json.JSONDecodeError as exc:
            self._move_aside(f"not JSON ({exc.msg} at line {exc.lineno})")
        except RecursionError:
            self._move_aside("nested too deeply to be a roomloop state file")
        return None

    def record_switch(self, zone: str, state: ZoneState) -> bool:
        """Make the relay switch in ``state`` durable now; True if written (or already).

        Called before the output is written to the device, so a switch the device saw is
        never lost with the process. The line holds the zone's whole state at the switch
        (a few hundred bytes: one block), so it serves even before the first full save.
        Never raises: a failure marks persistence failed.
        """
        mark = _mark(json.loads(state.to_json()))
        if mark is None:
            return False
        entry = mark
        if self._recorded.get(zone) == entry:
            return True
        line = json.dumps(
            {"zone": zone, "at": entry[0], "on": entry[1], "state": json.loads(state.to_json())},
            separators=(",", ":"),
        ) + "\n"
        with self._lock:
            try:
                fd = os.open(self.journal_path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
                try:
                    os.write(fd, line.encode("utf-8"))
                    os.fdatasync(fd)
                finally:
                    os.close(fd)
                if not self._journal_synced:  # a new journal: make its name durable too
                    _fsync_directory(self.directory)
                    self._journal_synced = True
            except OSError as exc:
                self.failure = f"cannot write {self.journal_path}: {exc.strerror or exc}"
                # folded as the saves are, on the switch's time; the next save that works
                # (it holds the switch) closes both with persist.save_recovered
                self._events.problem(
                    "store", "persist.switch_record_failed", entry[0],
                    path=str(self.journal_path), reason=self.failure,
                )
                return False
            self._recorded[zone] = entry
        return True

    def _apply_journal(self, zones: dict[str, Any]) -> int:
        """Take each zone's state from its newest recorded switch if that is newer; how many."""
        try:
            text = self.journal_path.read_text(encoding="utf-8", errors="replace")
        except FileNotFoundError:
            return 0
        except OSError as exc:
            log.warning("persist.journal_unreadable", path=str(self.journal_path),
                        error=exc.strerror or str(exc))
            return 0
        applied = 0
        for line in text.splitlines():
            entry = _journal_entry(line)
            if entry is None:
                continue  # a line cut short by the crash, or not ours
            zone, at, state = entry
            raw = zones.get(zone)
            last_mark = _mark(raw) if isinstance(raw, dict) else None
            last = None if last_mark is None else last_mark[0]
            if last is not None and at <= last:
                continue
            zones[zone] = state
            applied += 1
        return applied

    def save(
        self,
        zones: dict[str, Any],
        now: float,
        warm_up: dict[str, Any] | None = None,
        *,
        sources: dict[str, Any] | None = None,
    ) -> bool:
        """Write the zone states (and the learned warm-up models and the heat sources'
        histories, if any) if they differ from what was last written; True if written."""
        document: dict[str, Any] = {
            "format": FORMAT,
            "version": VERSION,
            "site": self.site_name,
            "saved_at": now,
            "zones": zones,
        }
        if warm_up:
            document["warm_up"] = warm_up
        if sources:
            document["sources"] = sources
        comparable = _dump({**document, "saved_at": None})
        if comparable == self._last_written:
            return False
        with self._lock:
            try:
                self._write(_dump(document).encode("utf-8"))
            except OSError as exc:
                self.failure = f"cannot write {self.path}: {exc.strerror or exc}"
                # on the caller's clock (``now``): the first at once, then reminders spaced
                self._events.problem(
                    "store", "persist.save_failed", now, path=str(self.path), reason=self.failure
                )
                raise
            self._empty_journal_if_covered(zones)
            if self.failure is not None:
                # one event closes the story: the folded failures' own, else (only the
                # check at start had failed) persist.recovered
                closed = self._events.recovered(
                    "store", "persist.save_recovered", now, path=str(self.path)
                )
                if not closed:
                    log.warning("persist.recovered", path=str(self.path), was=self.failure)
                self.failure = None
        self._last_written = comparable
        return True

    def _write(self, data: bytes) -> None:
        self.directory.mkdir(parents=True, exist_ok=True)
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

    def _empty_journal_if_covered(self, zones: dict[str, Any]) -> None:
        """Empty the journal once the state file just written holds every switch in it."""
        for zone, (at, _on) in self._recorded.items():
            saved = zones.get(zone)
            saved_mark = _mark(saved) if isinstance(saved, dict) else None
            if saved_mark is None or saved_mark[0] < at:
                return
        if not self._recorded and not self.journal_path.exists():
            return
        with contextlib.suppress(OSError):
            os.truncate(self.journal_path, 0)
            self._recorded.clear()

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


def _unwritable(directory: Path) -> str | None:
    """Why nothing can be saved in ``directory`` (tried for real: a read-only mount fools
    permission checks for root), or ``None``."""
    if not directory.exists():
        try:
            directory.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            return f"state directory {directory} cannot be created: {exc.strerror or exc}"
    if not directory.is_dir():
        return f"state directory {directory} is not a directory"
    try:
        fd, name = tempfile.mkstemp(prefix=".write-test.", dir=directory)
    except OSError as exc:
        return f"state directory {directory} is not writable: {exc.strerror or exc}"
    os.close(fd)
    with contextlib.suppress(OSError):
        os.unlink(name)
    return None


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


def _journal_entry(line: str) -> tuple[str, float, dict[str, Any]] | None:
    """(zone, switch time, zone state) of one journal line; None if it is not a whole one."""
    try:
        item = json.loads(line)
    except (ValueError, RecursionError):
        return None
    if not isinstance(item, dict):
        return None
    zone, at, on, state = item.get("zone"), item.get("at"), item.get("on"), item.get("state")
    if not isinstance(zone, str) or not isinstance(on, bool) or not isinstance(state, dict):
        return None
    if isinstance(at, bool) or not isinstance(at, int | float) or not abs(at) <= MAX_TIME_S:
        return None
    if _mark(state) != (at, on):
        return None
    return zone, float(at), state


def _time(value: Any) -> float | None:
    if isinstance(value, bool) or not isinstance(value, int | float):
        return None
    return float(value)


def _mark(state: dict[str, Any]) -> tuple[float, bool] | None:
    """A saved state's last switch: (time, heating relay on). The time is the heating relay's
    ``switched_at``, or in a zone with a cooling call the latest of it, the cooling call's
    ``switched_at`` and the changeover output's ``valve_at`` (None: nothing switched yet)."""
    on = state.get("relay_on")
    times = [_time(state.get("switched_at"))]
    cooling = state.get("cooling")
    if isinstance(cooling, dict):
        times += [_time(cooling.get("switched_at")), _time(cooling.get("valve_at"))]
    known = [t for t in times if t is not None]
    if not known or not isinstance(on, bool):
        return None
    return max(known), on


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
