"""One ``roomloop run`` per site and state directory: an advisory lock held for the process's life.

Two processes for one site would drive the same coils, write the same state file and
throw each other off the broker. The lock is ``fcntl.flock`` on ``<state_dir>/<site>.lock``
(released by the kernel when the process ends, however it ends, so a SIGKILL leaves no
stale lock); the holder writes its pid into it, so the second process can name it.

A read-only state directory (the case where roomloop must still run) cannot take a new
file: an existing lock file is then opened read-only (``flock`` works on it all the same);
if there is none, the lock falls back to a file named after the site and the state
directory's real path in every runtime directory this process can write
(``$RUNTIME_DIRECTORY``, ``$XDG_RUNTIME_DIR``, ``/run``, the state directory's parent).
Taking all of them, not the first, means two processes started with different
environments still meet on a common one. Where no lock can be taken at all, the service
runs unlocked and says so: controlling the zones comes first.
"""

from __future__ import annotations

import contextlib
import errno
import fcntl
import hashlib
import os
from dataclasses import dataclass, field
from pathlib import Path

import structlog

log = structlog.get_logger("roomloop.lock")


class LockHeld(Exception):
    """Another process holds the site's lock; ``pid`` is its process id when it wrote one."""

    def __init__(self, site: str, path: Path, pid: int | None) -> None:
        self.site = site
        self.path = path
        self.pid = pid
        holder = f"process {pid}" if pid is not None else "another process"
        super().__init__(
            f"site {site!r} is already run by {holder} (lock {path}); stop that one first "
            "(systemctl stop roomloop, or kill the process): two processes for one site "
            "switch the same relays and throw each other off the broker"
        )


@dataclass
class SiteLock:
    """The lock files this process holds (keep the object alive as long as the service runs)."""

    paths: list[Path] = field(default_factory=list)
    _fds: list[int] = field(default_factory=list)

    def release(self) -> None:
        for fd in self._fds:
            with contextlib.suppress(OSError):
                os.close(fd)
        self._fds.clear()
        self.paths.clear()


def fallback_dirs(state_dir: Path) -> list[Path]:
    """Where the lock goes when the state directory cannot hold it, in order."""
    found: list[Path] = []
    for raw in (
        os.environ.get("RUNTIME_DIRECTORY", "").split(":")[0],
        os.environ.get("XDG_RUNTIME_DIR", ""),
        "/run",
        str(state_dir.resolve().parent),
    ):
        if raw and Path(raw) not in found:
            found.append(Path(raw))
    return found


def acquire_site_lock(site: str, state_dir: str | os.PathLike[str]) -> SiteLock:
    """Take the site's lock; raise :class:`LockHeld` naming the holder if another has it."""
    directory = Path(state_dir)
    lock = SiteLock()
    primary = directory / f"{site}.lock"
    name = f"roomloop-{site}-{lock_digest(directory)}.lock"
    fallbacks = [parent / name for parent in fallback_dirs(directory)]
    fd, writable = _open(primary)
    if fd is not None:
        _take(lock, primary, fd, writable, site=site, also_named=fallbacks)
        if writable:
            return lock
    for path in fallbacks:
        fd, writable = _open(path)
        if fd is not None:
            _take(lock, path, fd, writable, site=site, also_named=[])
    if not lock.paths:
        log.warning("lock.unavailable", site=site, state_dir=str(directory),
                    consequence="running without the one-process-per-site lock")
    return lock


def lock_digest(directory: Path) -> str:
    """Names the fallback lock file after the state directory's real path."""
    return hashlib.sha256(str(directory.resolve()).encode()).hexdigest()[:16]


def _open(path: Path) -> tuple[int | None, bool]:
    try:
        return os.open(path, os.O_RDWR | os.O_CREAT | os.O_CLOEXEC, 0o644), True
    except OSError:
        pass
    try:
        return os.open(path, os.O_RDONLY | os.O_CLOEXEC), False
    except OSError:
        return None, False


def _take(
    lock: SiteLock, path: Path, fd: int, writable: bool, *, site: str, also_named: list[Path]
) -> None:
    """Lock ``fd``; a holder of a read-only lock file wrote its pid in ``also_named``."""
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError as exc:
        pid = next((p for p in map(_holder_of, also_named) if p is not None), None)
        pid = _holder(fd) if pid is None else pid
        os.close(fd)
        if exc.errno in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
            lock.release()
            raise LockHeld(site, path, pid) from None
        log.warning("lock.failed", path=str(path), error=exc.strerror or str(exc))
        return
    if writable:
        with contextlib.suppress(OSError):
            os.ftruncate(fd, 0)
            os.pwrite(fd, f"{os.getpid()}\n".encode(), 0)
    lock.paths.append(path)
    lock._fds.append(fd)


def _holder_of(path: Path) -> int | None:
    """The pid in a lock file that is held right now, else None."""
    fd, _ = _open_existing(path)
    if fd is None:
        return None
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
        except OSError:
            return _holder(fd)  # held: its pid is current
        fcntl.flock(fd, fcntl.LOCK_UN)
        return None
    finally:
        os.close(fd)


def _open_existing(path: Path) -> tuple[int | None, bool]:
    try:
        return os.open(path, os.O_RDONLY | os.O_CLOEXEC), False
    except OSError:
        return None, False


def _holder(fd: int) -> int | None:
    try:
        text = os.pread(fd, 32, 0).decode("ascii", "replace").strip()
    except OSError:
        return None
    return int(text) if text.isdigit() else None
