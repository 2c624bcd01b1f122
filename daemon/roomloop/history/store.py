"""The history file: each zone's trajectory in SQLite, packed so a zone-day stays small.

One file per site, ``<state_dir>/<site>.history.sqlite``, in WAL mode (a ``kill -9``
or a crash loses at most the batch being written; a reader never blocks the writer).
A row of ``chunks`` holds one zone's ticks of one batch, packed column by column
and zlib-compressed (:func:`pack_chunk`): a row per tick would cost about 50 bytes
with its index, a packed tick a few. Strings (zone, point, reason, level, mode and
verdict names) are stored once in ``names`` and referred to by id.

Standard library only (``sqlite3``, ``zlib``, ``array``): the daemon's path stays
free of numpy. Readers (``history``, ``report``, ``tune``) use :func:`read_zone`.
"""

from __future__ import annotations

import math
import sqlite3
import struct
import zlib
from array import array
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

SCHEMA_VERSION = 1
CHUNK_FORMAT = 1
CHUNK_TICKS = 180
"""Most ticks in one chunk: half an hour at a 10 s tick (each commit repacks the open chunk,
so a longer one costs CPU; a shorter one, bytes)."""
CHUNK_SPAN_S = 7200.0
"""Longest time one chunk spans (pruning removes whole chunks)."""
NONE_INT = -(2**31)
"""Stands for a missing value in a packed int32 column."""

SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS names (id INTEGER PRIMARY KEY, text TEXT NOT NULL UNIQUE);
CREATE TABLE IF NOT EXISTS chunks (
    zone INTEGER NOT NULL,
    t0 REAL NOT NULL,
    t1 REAL NOT NULL,
    n INTEGER NOT NULL,
    data BLOB NOT NULL,
    PRIMARY KEY (zone, t0)
) WITHOUT ROWID;
CREATE INDEX IF NOT EXISTS chunks_t1 ON chunks (t1);
"""


class HistoryDamaged(sqlite3.DatabaseError):
    """The file is no sound history: it fails SQLite's integrity check, or a chunk of it does
    not unpack."""


def is_damaged(exc: sqlite3.DatabaseError) -> bool:
    """Whether an error means the file itself is bad (not a database, corrupt, another schema),
    not the disk or the file's access (locked, cannot open, disk full)."""
    if isinstance(exc, HistoryDamaged):
        return True
    name = getattr(exc, "sqlite_errorname", "")
    if name in ("SQLITE_CORRUPT", "SQLITE_NOTADB"):
        return True
    text = str(exc)
    return "schema" in text and "is not" in text  # HistoryFile: another schema version


def history_path(state_dir: str | Path, site_name: str) -> Path:
    """Where a site's history lives: ``<state_dir>/<site>.history.sqlite``."""
    return Path(state_dir) / f"{site_name}.history.sqlite"


@dataclass(frozen=True, slots=True)
class Tick:
    """One zone's tick as recorded: the decision and what it was made from (Celsius, K)."""

    at: float
    temperature: float | None
    setpoint: float
    level: str
    mode: str
    relay: bool
    anticipator_k: float
    droop_k: float
    fail_safe: bool
    reason: str
    points: tuple[tuple[str, float | None, str], ...] = ()
    """Per input point: name, last accepted value, published reliability."""


@dataclass(slots=True)
class ZoneHistory:
    """A zone's ticks as columns (what ``report`` and ``tune`` read)."""

    zone: str
    time: list[float] = field(default_factory=list)
    temperature: list[float | None] = field(default_factory=list)
    setpoint: list[float | None] = field(default_factory=list)
    level: list[str] = field(default_factory=list)
    mode: list[str] = field(default_factory=list)
    relay: list[bool] = field(default_factory=list)
    anticipator_k: list[float] = field(default_factory=list)
    droop_k: list[float] = field(default_factory=list)
    fail_safe: list[bool] = field(default_factory=list)
    reason: list[str] = field(default_factory=list)
    points: dict[str, list[tuple[float | None, str]]] = field(default_factory=dict)
    """Per point name, per tick: (value, reliability); ``(None, "absent")`` where the point
    was not part of the zone at that tick."""
    outdoor: list[float | None] | None = None
    """Outdoor temperature per tick, when known (an imported CSV's ``outdoor`` column)."""

    def __len__(self) -> int:
        return len(self.time)


# --------------------------------------------------------------------------- packing


def _q(value: float | None, scale: float) -> int:
    if value is None or not math.isfinite(value):
        return NONE_INT
    return max(NONE_INT + 1, min(2**31 - 1, round(value * scale)))


def _dq(value: int, scale: float) -> float | None:
    return None if value == NONE_INT else value / scale


def pack_chunk(ticks: Sequence[Tick], name_id: dict[str, int]) -> bytes:
    """One zone's ticks as one blob: column-major int32 arrays, zlib-compressed.

    Temperatures are kept to 0.001 K, times to 1 ms after the chunk's first tick.
    ``name_id`` maps every string the ticks use to its id (see :class:`HistoryFile`).
    """
    points = ticks[0].points
    names = [p[0] for p in points]
    cols: list[array[int]] = [array("i") for _ in range(9 + 2 * len(names))]
    t0 = ticks[0].at
    for tick in ticks:
        flags = (1 if tick.relay else 0) | (2 if tick.fail_safe else 0)
        row = [
            _q(tick.at - t0, 1000.0),
            _q(tick.temperature, 1000.0),
            _q(tick.setpoint, 1000.0),
            _q(tick.anticipator_k, 1000.0),
            _q(tick.droop_k, 1000.0),
            name_id[tick.level],
            name_id[tick.mode],
            name_id[tick.reason],
            flags,
        ]
        by_name = {p[0]: p for p in tick.points}
        for name in names:
            point = by_name.get(name)
            if point is None:
                row += [NONE_INT, name_id["absent"]]
            else:
                row += [_q(point[1], 1000.0), name_id[point[2]]]
        for col, value in zip(cols, row, strict=True):
            col.append(value)
    header = struct.pack("<BHB", CHUNK_FORMAT, len(ticks), len(names)) + b"".join(
        struct.pack("<i", name_id[n]) for n in names
    )
    encoded = [_delta(col) for col in cols]
    kinds = bytes(kind for kind, _ in encoded)
    body = kinds + b"".join(col.tobytes() for _, col in encoded)
    return header + zlib.compress(body, 6)


def _delta(col: array[int]) -> tuple[int, array[int]]:
    """(1, successive differences) for a column without gaps, so slow columns become runs
    of zeros that compress to nothing; (0, the column as it is) when it has a gap."""
    if NONE_INT in col or len(col) < 2:
        return 0, col
    out = array("i", col)
    for i in range(len(col) - 1, 0, -1):
        out[i] = col[i] - col[i - 1]
    return 1, out


def _undelta(kind: int, col: Sequence[int]) -> list[int]:
    if kind == 0:
        return list(col)
    out = list(col)
    for i in range(1, len(out)):
        out[i] += out[i - 1]
    return out


def unpack_chunk(blob: bytes, t0: float, id_name: dict[int, str]) -> list[Tick]:
    """The ticks :func:`pack_chunk` packed (to its rounding)."""
    version, n, npoints = struct.unpack_from("<BHB", blob, 0)
    if version != CHUNK_FORMAT:
        raise ValueError(f"unknown chunk format {version}")
    offset = struct.calcsize("<BHB")
    point_ids = struct.unpack_from(f"<{npoints}i", blob, offset)
    offset += 4 * npoints
    body = zlib.decompress(blob[offset:])
    ncols = 9 + 2 * npoints
    kinds, body = body[:ncols], body[ncols:]
    flat = array("i")
    flat.frombytes(body)
    if len(flat) != ncols * n or len(kinds) != ncols:
        raise ValueError("chunk size does not match its header")
    cols = [_undelta(kinds[i], flat[i * n : (i + 1) * n]) for i in range(ncols)]
    names = [id_name[i] for i in point_ids]
    ticks: list[Tick] = []
    for k in range(n):
        dt = cols[0][k]
        points = tuple(
            (name, _dq(cols[9 + 2 * j][k], 1000.0), id_name[cols[10 + 2 * j][k]])
            for j, name in enumerate(names)
        )
        setpoint = _dq(cols[2][k], 1000.0)
        ticks.append(
            Tick(
                at=t0 + (0.0 if dt == NONE_INT else dt / 1000.0),
                temperature=_dq(cols[1][k], 1000.0),
                setpoint=0.0 if setpoint is None else setpoint,
                anticipator_k=_dq(cols[3][k], 1000.0) or 0.0,
                droop_k=_dq(cols[4][k], 1000.0) or 0.0,
                level=id_name[cols[5][k]],
                mode=id_name[cols[6][k]],
                reason=id_name[cols[7][k]],
                relay=bool(cols[8][k] & 1),
                fail_safe=bool(cols[8][k] & 2),
                points=points,
            )
        )
    return ticks


# --------------------------------------------------------------------------- the file


class HistoryFile:
    """One open history database (writer or reader). Not thread-safe: one thread uses it."""

    def __init__(self, path: str | Path, *, max_pages: int | None = None) -> None:
        self.path = Path(path)
        self.db = sqlite3.connect(self.path, timeout=5.0, isolation_level=None)
        try:
            if max_pages is not None:  # tests: small pages (set before the first table)
                self.db.execute("PRAGMA page_size=512")
            self.db.execute("PRAGMA journal_mode=WAL")
            # WAL + NORMAL: a commit survives a killed process (it is in the OS's cache);
            # only a power cut may lose the last batches. One fsync per checkpoint, not
            # per commit, spares an SD card.
            self.db.execute("PRAGMA synchronous=NORMAL")
            if max_pages is not None:  # tests: a small "disk" that fills up for real
                self.db.execute(f"PRAGMA max_page_count={int(max_pages)}")
            self.db.executescript(SCHEMA)
            row = self.db.execute("SELECT value FROM meta WHERE key='schema'").fetchone()
            if row is None:
                self.db.execute(
                    "INSERT INTO meta (key, value) VALUES ('schema', ?)", (str(SCHEMA_VERSION),)
                )
            elif row[0] != str(SCHEMA_VERSION):
                raise sqlite3.DatabaseError(f"history schema {row[0]} is not {SCHEMA_VERSION}")
            self._ids: dict[str, int] = dict(self.db.execute("SELECT text, id FROM names"))
            self._open: dict[str, list[Tick]] = {}
            """Each zone's newest chunk, still growing (see :meth:`write`)."""
        except BaseException:
            self.db.close()
            raise

    def close(self) -> None:
        self.db.close()

    def check(self) -> str:
        """SQLite's quick integrity check: ``ok`` or what is wrong."""
        rows = self.db.execute("PRAGMA quick_check").fetchall()
        return "ok" if rows == [("ok",)] else "; ".join(str(r[0]) for r in rows[:3])

    # ------------------------------------------------------------------ writing

    def _name_ids(self, texts: Iterable[str]) -> dict[str, int]:
        for text in texts:
            if text not in self._ids:  # (another writer may have added it meanwhile)
                self.db.execute("INSERT OR IGNORE INTO names (text) VALUES (?)", (text,))
                row = self.db.execute("SELECT id FROM names WHERE text = ?", (text,)).fetchone()
                self._ids[text] = int(row[0])
        return self._ids

    def write(self, batches: dict[str, list[Tick]]) -> int:
        """Write one batch (per zone, its ticks in order) in one transaction; ticks written.

        A zone's newest chunk stays open: the next batch is appended to it and the row
        rewritten, up to ``CHUNK_TICKS`` ticks or ``CHUNK_SPAN_S``, so chunks are large
        (and compress well) however often the writer commits. A chunk is closed where the
        zone's set of points changes (one layout per chunk).
        """
        written = 0
        still_open = dict(self._open)
        self.db.execute("BEGIN")
        try:
            for zone, ticks in batches.items():
                texts = {zone, "absent"}
                for t in ticks:
                    texts.update((t.level, t.mode, t.reason))
                    texts.update(p[0] for p in t.points)
                    texts.update(p[2] for p in t.points)
                ids = self._name_ids(sorted(texts))
                current = list(still_open.get(zone, ()))
                for i, tick in enumerate(ticks):
                    if current and (
                        len(current) >= CHUNK_TICKS
                        or tick.at - current[0].at >= CHUNK_SPAN_S
                        or _layout(tick) != _layout(current[0])
                    ):
                        current = []
                    current.append(tick)
                    if (  # the chunk is written before the next tick would close it
                        i + 1 == len(ticks)
                        or len(current) >= CHUNK_TICKS
                        or ticks[i + 1].at - current[0].at >= CHUNK_SPAN_S
                        or _layout(ticks[i + 1]) != _layout(current[0])
                    ):
                        self._put(ids, zone, current)
                    written += 1
                still_open[zone] = current
            self.db.execute("COMMIT")
        except BaseException:
            if self.db.in_transaction:
                self.db.execute("ROLLBACK")
            self._ids = dict(self.db.execute("SELECT text, id FROM names"))
            raise
        self._open = still_open
        return written

    def _put(self, ids: dict[str, int], zone: str, ticks: list[Tick]) -> None:
        self.db.execute(
            "INSERT OR REPLACE INTO chunks (zone, t0, t1, n, data) VALUES (?, ?, ?, ?, ?)",
            (ids[zone], ticks[0].at, ticks[-1].at, len(ticks), pack_chunk(ticks, ids)),
        )

    def prune(self, before: float) -> int:
        """Delete the chunks that end before ``before`` (POSIX seconds); chunks deleted."""
        cur = self.db.execute("DELETE FROM chunks WHERE t1 < ?", (before,))
        return cur.rowcount

    # ------------------------------------------------------------------ reading

    def zones(self) -> list[str]:
        rows = self.db.execute(
            "SELECT DISTINCT names.text FROM chunks JOIN names ON names.id = chunks.zone"
        ).fetchall()
        return sorted(r[0] for r in rows)

    def read(
        self, zone: str, since: float | None = None, until: float | None = None
    ) -> ZoneHistory:
        """The zone's ticks with ``since <= at < until``, in time order; :class:`HistoryDamaged`
        when a chunk does not unpack."""
        out = ZoneHistory(zone)
        zone_id = self._ids.get(zone)
        if zone_id is None:
            return out
        lo = -math.inf if since is None else since
        hi = math.inf if until is None else until
        id_name = {v: k for k, v in self._ids.items()}
        rows = self.db.execute(
            "SELECT t0, data FROM chunks WHERE zone = ? AND t1 >= ? AND t0 < ? ORDER BY t0",
            (zone_id, lo if math.isfinite(lo) else -1e300, hi if math.isfinite(hi) else 1e300),
        )
        for t0, data in rows:
            try:
                ticks = unpack_chunk(data, t0, id_name)
            except (ValueError, KeyError, TypeError, struct.error, zlib.error) as exc:
                raise HistoryDamaged(f"a chunk of zone {zone} does not unpack: {exc}") from None
            for tick in ticks:
                if lo <= tick.at < hi:
                    _append(out, tick)
        return out


def _layout(tick: Tick) -> tuple[str, ...]:
    return tuple(p[0] for p in tick.points)


def _append(out: ZoneHistory, tick: Tick) -> None:
    k = len(out.time)
    out.time.append(tick.at)
    out.temperature.append(tick.temperature)
    out.setpoint.append(tick.setpoint)
    out.level.append(tick.level)
    out.mode.append(tick.mode)
    out.relay.append(tick.relay)
    out.anticipator_k.append(tick.anticipator_k)
    out.droop_k.append(tick.droop_k)
    out.fail_safe.append(tick.fail_safe)
    out.reason.append(tick.reason)
    seen = set()
    for name, value, verdict in tick.points:
        column = out.points.get(name)
        if column is None:
            column = out.points[name] = [(None, "absent")] * k
        column.append((value, verdict))
        seen.add(name)
    for name, column in out.points.items():
        if name not in seen:
            column.append((None, "absent"))


def read_zone(
    path: str | Path, zone: str, since: float | None = None, until: float | None = None
) -> ZoneHistory:
    """Open the history at ``path``, read one zone, close it."""
    history = HistoryFile(path)
    try:
        return history.read(zone, since, until)
    finally:
        history.close()
