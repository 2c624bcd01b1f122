"""``roomloop run -c SITE [--state-dir DIR]``: the service, in the foreground, under systemd or not.

SIGTERM and SIGINT stop it cleanly (outputs to their safe state, ``offline``
published, state saved, exit 0). SIGHUP reloads the site file
(:mod:`roomloop.service.reload`): checked first as ``roomloop check`` does, a bad
file is refused with its problems logged and the running site kept; a good one
replaces the site, each kept zone keeping its state and its output. The state
directory is ``--state-dir``, else systemd's ``$STATE_DIRECTORY``, else the
site's ``state_dir``.

Exit codes: 0 stopped on a signal; 1 another process already runs the site
with this state directory (its pid is named; see :mod:`roomloop.service.lock`);
2 a bad site file, a state directory that is a file, or a TLS or password file
or variable the broker section names that is missing (checked at start, before
any output is touched, rather than retried for ever). A state directory
that cannot be written is no reason to stop: the zones run, start fresh, and
their state shows ``persistence: "failed: <reason>"``.

Test hook (not for users, see DEVELOPERS.md): ``ROOMLOOP_CLOCK_SPEED=N`` runs
the service on a simulated clock N times faster than real time, so the
end-to-end tests exercise the real process without waiting hours;
``ROOMLOOP_CLOCK_ORIGIN=T`` (POSIX seconds) is the real instant at which that
clock reads real time, so a restarted process continues the same timeline.
"""

from __future__ import annotations

import argparse
import asyncio
import os
import signal
import sys

import structlog

from roomloop.config.loader import load_site
from roomloop.config.models import Site
from roomloop.service.clock import Clock, RealClock, SimulatedClock
from roomloop.service.lock import LockHeld, acquire_site_lock
from roomloop.service.persist import StateDirError, prepare_state_dir

EXIT_OK = 0
EXIT_RUNTIME = 1
EXIT_USAGE = 2
CLOCK_SPEED_ENV = "ROOMLOOP_CLOCK_SPEED"
CLOCK_ORIGIN_ENV = "ROOMLOOP_CLOCK_ORIGIN"


def _clock() -> Clock:
    raw = os.environ.get(CLOCK_SPEED_ENV)
    if not raw:
        return RealClock()
    try:
        speed = float(raw)
    except ValueError:
        speed = 0.0
    if not speed > 0:
        raise ValueError(f"{CLOCK_SPEED_ENV}={raw!r} is not a positive number")
    origin_raw = os.environ.get(CLOCK_ORIGIN_ENV)
    try:
        origin = float(origin_raw) if origin_raw else None
    except ValueError:
        raise ValueError(f"{CLOCK_ORIGIN_ENV}={origin_raw!r} is not POSIX seconds") from None
    return SimulatedClock(speed, origin=origin)


def _state_dir(args: argparse.Namespace, default: str) -> str:
    if args.state_dir:
        return str(args.state_dir)
    systemd = os.environ.get("STATE_DIRECTORY")
    if systemd:
        return systemd.split(":")[0]
    return default


def _configure_logging(level: str, fmt: str) -> None:
    try:
        from roomloop.log import configure_logging
    except ImportError:  # pragma: no cover - the log module ships with roomloop
        structlog.configure()
        return
    configure_logging(level, fmt)


async def _serve(config: str, site: Site, state_dir: str, clock: Clock) -> None:
    from roomloop.service.reload import serve

    stop = asyncio.Event()
    reload = asyncio.Event()
    loop = asyncio.get_running_loop()
    for signum in (signal.SIGTERM, signal.SIGINT):
        loop.add_signal_handler(signum, stop.set)
    loop.add_signal_handler(signal.SIGHUP, reload.set)
    await serve(config, site, stop=stop, reload=reload, state_dir=state_dir, clock=clock)


def main(args: argparse.Namespace) -> int:
    site = load_site(args.config)  # ConfigError: the CLI front prints it and exits 2
    _configure_logging(site.logging.level, site.logging.format)
    log = structlog.get_logger("roomloop.run")
    try:
        clock = _clock()
    except ValueError as exc:
        print(f"roomloop run: {exc}", file=sys.stderr)
        return EXIT_USAGE
    if site.broker is not None:
        from roomloop.io.broker import BrokerSetupError, check_broker_files

        try:
            check_broker_files(site.broker)
        except BrokerSetupError as exc:
            print(f"roomloop run: {exc}", file=sys.stderr)
            return EXIT_USAGE
    state_dir = _state_dir(args, site.site.state_dir)
    try:
        prepare_state_dir(state_dir)
    except StateDirError as exc:
        if exc.usage:
            print(f"roomloop run: {exc}", file=sys.stderr)
            return EXIT_USAGE
        # A read-only SD card must not leave the zones without even frost protection:
        # control goes on, the zones start fresh and the state shows persistence failed.
        print(f"roomloop run: {exc}; running without saving state", file=sys.stderr)
        log.error("run.state_dir_unusable", state_dir=state_dir, reason=str(exc))
    try:
        lock = acquire_site_lock(site.name, state_dir)
    except LockHeld as exc:
        print(f"roomloop run: {exc}", file=sys.stderr)
        return EXIT_RUNTIME
    log.info(
        "run.start", config=str(args.config), state_dir=state_dir, pid=os.getpid(),
        lock=[str(p) for p in lock.paths],
    )
    try:
        asyncio.run(_serve(str(args.config), site, state_dir, clock))
    finally:
        lock.release()
    return EXIT_OK
