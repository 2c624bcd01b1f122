"""The daemon's history recorder: ``record()`` on the event loop, the disk in a thread.

``record(zone, at, outputs, state)`` is all a zone loop calls after its step: it
builds one small :class:`~roomloop.history.store.Tick` and puts it on a bounded
queue, never waiting. A writer thread takes the ticks, commits them in one
transaction at most every ``history.commit_s`` and prunes rows older than
``history.keep_days``, both on the recorded times: the service's clock, the wall
clock in the field (the SD card's wear), a simulated or virtual clock in the demo
and the tests, which then pace the writer by their own time.

Nothing here may stop control:

- a full queue (the disk is slower than the ticks) drops the tick and counts it,
  logged as ``history.dropped`` (the first, then every ``DROP_LOG_EVERY``);
- a failed write (disk full, I/O error) logs ``history.write_failed``; its ticks
  are kept for the next try up to the queue's bound, the oldest dropped beyond it;
- a file that cannot be opened (no permission, the disk gone) logs
  ``history.unavailable``, tried again every ``RETRY_OPEN_S`` of recorded time, its
  repeats folded (:class:`~roomloop.io.eventlog.RateLimitedLog`) until
  ``history.recovered``;
- a damaged file (not a database, malformed) is renamed aside to
  ``<file>.damaged-<time>`` with ``history.damaged_moved_aside`` and a new one is
  started.

Lifecycle::

    async with HistoryRecorder(path, commit_s=60, keep_days=60) as history:
        ...  history.record(zone, now, outputs, state) after each step
"""

from __future__ import annotations

import asyncio
import contextlib
import math
import os
import queue
import sqlite3
import threading
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import structlog

from roomloop.core.state import ZoneState
from roomloop.core.types import ZoneOutputs
from roomloop.history.store import HistoryDamaged, HistoryFile, Tick, history_path, is_damaged
from roomloop.io.eventlog import RateLimitedLog

log = structlog.get_logger("roomloop.history")

QUEUE_TICKS = 50_000
"""Ticks the queue holds: at a 10 s tick, 20 zones for about 7 hours of a stalled disk."""
DROP_LOG_EVERY = 1000
LOG_FAILURES_EVERY = 100
RETRY_OPEN_S = 30.0
"""Seconds (recorded time) between attempts to open a history file that could not be opened."""
PRUNE_EVERY_S = 3600.0
"""Seconds (recorded time) between prunes (and the first one at the first commit)."""
STOP_WAIT_S = 3.0
"""Real seconds the final flush at stop may take before the service goes on without it."""

_STOP = object()


def tick_from(
    zone_at: float,
    outputs: ZoneOutputs,
    state: ZoneState,
    outdoor: tuple[str, float | None] | None = None,
) -> Tick:
    """The tick to record from one zone step's outputs and new state; ``outdoor``: the site's
    outdoor point (name, value if it reads good and fresh), recorded as one more point."""
    points: tuple[tuple[str, float | None, str], ...] = tuple(
        (p.name, p.value, outputs.reliability.get(p.name, p.reliability)) for p in state.points
    )
    if outdoor is not None and all(p[0] != outdoor[0] for p in points):
        name, value = outdoor
        points += ((name, value, "ok" if value is not None else "unreliable-other"),)
    return Tick(
        at=zone_at,
        temperature=outputs.temperature,
        setpoint=outputs.setpoint,
        level=outputs.level,
        mode=outputs.mode,
        relay=outputs.demand,
        anticipator_k=outputs.anticipator_k,
        droop_k=outputs.droop_k,
        fail_safe=outputs.fail_safe,
        reason=outputs.reason,
        points=points,
    )


class HistoryRecorder:
    """Records every zone's ticks into the site's history file, off the event loop."""

    def __init__(
        self,
        path: str | Path,
        *,
        commit_s: float = 60.0,
        keep_days: float = 60.0,
        queue_ticks: int = QUEUE_TICKS,
        max_pages: int | None = None,
        stall_s: float | None = None,
    ) -> None:
        self.path = Path(path)
        self._stall_s = stall_s
        self.commit_s = commit_s
        self.keep_days = keep_days
        self.max_pages = max_pages
        """Tests only: SQLite's page limit, a small disk that really fills up."""
        self._queue: queue.Queue[Any] = queue.Queue(maxsize=queue_ticks)
        self._bound = queue_ticks
        self._thread: threading.Thread | None = None
        self.dropped = 0
        """Ticks lost: queue full, or beyond the bound while the disk refused them."""
        self.written = 0
        self.commits = 0
        self.failures = 0
        self.moved_aside: list[Path] = []
        self._failing = 0
        self._events = RateLimitedLog(log)
        """Folds the repeats of ``history.unavailable`` (a try every RETRY_OPEN_S)."""
        self._progress = threading.Condition()
        """Notified when the writer has taken the queue and after each try to write a batch."""

    @classmethod
    def for_site(cls, site: Any, state_dir: str | Path) -> HistoryRecorder | None:
        """The recorder a site's ``history:`` section asks for (None when disabled)."""
        settings = site.history
        if not settings.enabled:
            return None
        return cls(
            history_path(state_dir, site.name),
            commit_s=settings.commit_s,
            keep_days=settings.keep_days,
        )

    # ------------------------------------------------------------------ event loop side

    def record(
        self,
        zone: str,
        at: float,
        outputs: ZoneOutputs,
        state: ZoneState,
        outdoor: tuple[str, float | None] | None = None,
    ) -> None:
        """Queue one zone tick; never blocks (a full queue drops it, counted and logged)."""
        try:
            self._queue.put_nowait((zone, tick_from(at, outputs, state, outdoor)))
        except queue.Full:
            self.dropped += 1
            if self.dropped == 1 or self.dropped % DROP_LOG_EVERY == 0:
                log.warning("history.dropped", dropped=self.dropped, reason="queue full")

    @property
    def queued(self) -> int:
        """Ticks waiting for the writer."""
        return self._queue.qsize()

    def start(self) -> None:
        self._thread = threading.Thread(target=self._run, name="history-writer", daemon=True)
        self._thread.start()

    def stop(self, timeout_s: float = STOP_WAIT_S) -> None:
        """Flush what is queued and end the writer (bounded); blocking: call from a thread."""
        if self._thread is None:
            return
        deadline = time.monotonic() + timeout_s
        while True:
            try:
                self._queue.put(_STOP, timeout=0.1)
                break
            except queue.Full:
                if time.monotonic() > deadline:
                    break
        self._thread.join(max(0.0, deadline - time.monotonic()))
        if self._thread.is_alive():
            log.warning("history.stop_timed_out", within_s=timeout_s)
        self._thread = None

    async def __aenter__(self) -> HistoryRecorder:
        self.start()
        return self

    async def __aexit__(self, *exc: object) -> None:
        await asyncio.to_thread(self.stop)

    # ------------------------------------------------------------------ writer thread

    def _run(self) -> None:
        """Commit, open and prune on the recorded times (the service's clock), so a virtual
        clock paces the writer too; a batch is also written when the clock steps back by
        more than ``commit_s`` (it starts over from there) and when no tick came for
        :attr:`stall_s` real seconds (the zones stalled: what they recorded is kept)."""
        db: HistoryFile | None = None
        pending: list[tuple[str, Tick]] = []
        seen = -math.inf  # the recorded time of the latest tick taken: the service's now
        batch_from: float | None = None  # the recorded time the pending batch began
        next_open = next_prune = -math.inf
        stopping = False
        try:
            while not stopping:
                stopping, taken = self._collect(pending, self.stall_s)
                self._progressed()
                if not pending:
                    continue
                stepped_back = taken is not None and taken < seen - self.commit_s
                if taken is not None:
                    seen = taken
                if stepped_back:
                    next_open, next_prune = min(next_open, seen), min(next_prune, seen)
                if batch_from is None:
                    batch_from = seen
                due = stopping or taken is None or stepped_back
                if not due and seen < batch_from + self.commit_s:
                    self._bound_pending(pending)
                    continue
                batch_from = seen
                db, next_open = self._write(db, pending, seen, next_open)
                if db is not None and not pending and seen >= next_prune:
                    next_prune = seen + PRUNE_EVERY_S
                    self._prune(db, last_at=self._last_at)
                self._progressed()
        finally:
            if db is not None:
                with contextlib.suppress(sqlite3.Error):
                    db.close()
            self._progressed()

    def _write(
        self, db: HistoryFile | None, pending: list[tuple[str, Tick]], seen: float,
        next_open: float,
    ) -> tuple[HistoryFile | None, float]:
        """Write the batch, opening the file first if it is not open (and an attempt is due
        at ``seen``); the file as it is after, and when to try opening it next."""
        if db is None and seen >= next_open:
            db = self._open(seen)
            if db is None:
                next_open = seen + RETRY_OPEN_S
        if db is None:
            self._bound_pending(pending)
            return None, next_open
        return self._commit(db, pending), next_open

    @property
    def stall_s(self) -> float:
        """Real seconds without a tick after which the pending batch is written anyway
        (ten commit intervals, at least a minute, unless given)."""
        return self._stall_s if self._stall_s is not None else max(10.0 * self.commit_s, 60.0)

    _last_at: float = 0.0

    def _progressed(self) -> None:
        """Wake :meth:`wait_until` callers: the queue was taken, or a batch was tried."""
        with self._progress:
            self._progress.notify_all()

    def wait_until(self, condition: Callable[[HistoryRecorder], bool], timeout_s: float) -> bool:
        """Block (in a thread, never on the event loop) until ``condition(self)`` holds when
        the writer has taken the queue or tried a batch, at most ``timeout_s`` real
        seconds; whether it holds. What a caller that must see the disk's state (the
        tests) waits on, rather than on the clock."""
        with self._progress:
            return self._progress.wait_for(lambda: condition(self), timeout_s)

    def _collect(
        self, pending: list[tuple[str, Tick]], timeout_s: float
    ) -> tuple[bool, float | None]:
        """Move what is queued into ``pending``, waiting up to ``timeout_s`` for the first
        item: whether the stop request came (what was queued before it is kept), and the
        recorded time of the last tick taken (None: none came in time)."""
        try:
            item = self._queue.get(timeout=timeout_s)
        except queue.Empty:
            return False, None
        taken: float | None = None
        while item is not _STOP:
            pending.append(item)
            taken = item[1].at
            try:
                item = self._queue.get_nowait()
            except queue.Empty:
                return False, taken
        return True, taken

    def _open(self, now: float) -> HistoryFile | None:
        """Open (or create) the file; a damaged one is moved aside and a new one started.
        ``now``: the recorded time of the try (what the repeats are folded on)."""
        for attempt in range(2):
            try:
                self.path.parent.mkdir(parents=True, exist_ok=True)
                db = HistoryFile(self.path, max_pages=self.max_pages)
                problem = db.check()
                if problem == "ok":
                    if attempt == 0:
                        log.info("history.opened", path=str(self.path))
                    self._events.recovered("open", "history.recovered", now, path=str(self.path))
                    return db
                db.close()
                raise HistoryDamaged(f"integrity check: {problem}")
            except sqlite3.DatabaseError as exc:
                # cannot open, disk full, locked: try again later; damaged: once moved aside
                if not is_damaged(exc) or attempt == 1 or not self._move_aside(str(exc)):
                    self._unavailable(now, exc)
                    return None
            except OSError as exc:
                self._unavailable(now, exc)
                return None
        return None

    def _unavailable(self, now: float, exc: Exception) -> None:
        self.failures += 1
        self._events.problem(
            "open", "history.unavailable", now, path=str(self.path), reason=str(exc),
            retry_s=RETRY_OPEN_S,
        )

    def _move_aside(self, reason: str) -> bool:
        stamp = time.strftime("%Y%m%dT%H%M%S", time.gmtime())
        target = self.path.with_name(f"{self.path.name}.damaged-{stamp}")
        try:
            os.replace(self.path, target)
            for suffix in ("-wal", "-shm"):
                side = Path(f"{self.path}{suffix}")
                if side.exists():
                    os.replace(side, Path(f"{target}{suffix}"))
        except OSError as exc:
            log.error("history.move_aside_failed", path=str(self.path), error=str(exc))
            return False
        self.moved_aside.append(target)
        log.error(
            "history.damaged_moved_aside", path=str(self.path), moved_to=str(target), reason=reason
        )
        return True

    def _commit(self, db: HistoryFile, pending: list[tuple[str, Tick]]) -> HistoryFile | None:
        batches: dict[str, list[Tick]] = {}
        for zone, tick in pending:
            batches.setdefault(zone, []).append(tick)
        try:
            self.written += db.write(batches)
        except sqlite3.DatabaseError as exc:
            if is_damaged(exc):  # the file went bad under us
                self.failures += 1
                with contextlib.suppress(sqlite3.Error):
                    db.close()
                self._move_aside(str(exc))
                self._bound_pending(pending)
                return None
            # disk full, I/O error, locked: try again at the next commit; logged when it
            # starts and then every LOG_FAILURES_EVERY tries, not at every commit
            self.failures += 1
            self._failing += 1
            if self._failing == 1 or self._failing % LOG_FAILURES_EVERY == 0:
                log.error(
                    "history.write_failed",
                    path=str(self.path),
                    error=str(exc),
                    ticks=len(pending),
                    tries=self._failing,
                )
            self._bound_pending(pending)
            return db
        self.commits += 1
        if self._failing:
            log.info("history.write_recovered", path=str(self.path), after_tries=self._failing)
            self._failing = 0
        self._last_at = max(self._last_at, *(t.at for _, t in pending))
        pending.clear()
        return db

    def _bound_pending(self, pending: list[tuple[str, Tick]]) -> None:
        excess = len(pending) - self._bound
        if excess > 0:
            del pending[:excess]
            self.dropped += excess
            log.warning("history.dropped", dropped=self.dropped, reason="not written in time")

    def _prune(self, db: HistoryFile, *, last_at: float) -> None:
        try:
            removed = db.prune(last_at - self.keep_days * 86400.0)
        except sqlite3.Error as exc:
            log.warning("history.prune_failed", error=str(exc))
            return
        if removed:
            log.info("history.pruned", chunks=removed, keep_days=self.keep_days)
