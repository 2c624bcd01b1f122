"""``roomloop history -c SITE --zone Z [--since ..] [--until ..] --csv OUT``: export as CSV.

The CSV (``time,temperature,relay,setpoint,fail_safe``; times ISO 8601 with the
site's offset, temperatures in the site's units) is what ``tune --history`` and
``report --history`` read back. ``--csv -`` writes to standard output; a reader
that leaves early (``| head``) stops the export quietly, exit 0.
Exit codes: 0 ok; 1 no history to read (none, or a damaged history file), or the
file cannot be written; 2 a bad site file, an unknown zone, a bad time.
"""

from __future__ import annotations

import argparse
import os
import sys
from zoneinfo import ZoneInfo

from roomloop.cli.outputs import output_path_problem
from roomloop.cli.refusal import Refused
from roomloop.config.loader import load_site
from roomloop.config.models import Site
from roomloop.history.csvfile import write_csv
from roomloop.history.source import Bound, HistoryUnavailable, load_history, parse_bound
from roomloop.history.store import ZoneHistory

EXIT_OK = 0
EXIT_RUNTIME = 1
EXIT_USAGE = 2


def _fail(message: str, code: int) -> int:
    print(f"roomloop history: {message}", file=sys.stderr)
    return code


def main(args: argparse.Namespace) -> int:
    site = load_site(args.config)  # ConfigError: the CLI front prints it, exit 2
    try:
        return _export(args, site)
    except Refused as refused:
        return _fail(refused.message, refused.code)


def _export(args: argparse.Namespace, site: Site) -> int:
    """Check the options against the site, read the zone's ticks, write them as CSV."""
    _check_zone(args, site)
    tz = ZoneInfo(site.site.timezone)
    since, until = time_window(args, tz)
    if args.csv != "-":
        _check_csv_path(args.csv)
    try:
        history = load_history(
            site, args.zone, state_dir=args.state_dir, since=since, until=until
        )
    except HistoryUnavailable as exc:
        raise Refused(str(exc), EXIT_RUNTIME) from None
    if args.csv == "-":
        _write_stdout(history, tz, site.site.units)
        return EXIT_OK
    rows = _write_file(history, args.csv, tz, site.site.units)
    print(f"{rows} ticks of zone {args.zone} written to {args.csv}", file=sys.stderr)
    return EXIT_OK


def _check_zone(args: argparse.Namespace, site: Site) -> None:
    """A zone the site does not have is refused, naming the zones it has."""
    if args.zone not in {z.name for z in site.zones}:
        raise Refused(
            f"no zone {args.zone!r} in {args.config} (zones: "
            + ", ".join(z.name for z in site.zones) + ")",
            EXIT_USAGE,
        )


def time_window(args: argparse.Namespace, tz: ZoneInfo) -> tuple[Bound, Bound]:
    """``--since`` and ``--until`` in the site's time zone (a bad one is a usage error);
    ``report`` reads its window the same way."""
    try:
        since = parse_bound(args.since, tz, "--since")
        until = parse_bound(args.until, tz, "--until")
    except ValueError as exc:
        raise Refused(str(exc), EXIT_USAGE) from None
    return since, until


def _check_csv_path(path: str) -> None:
    """The CSV file is checked before the history is read, so a bad path costs no read."""
    problem = output_path_problem("--csv", path)
    if problem:
        raise Refused(problem, EXIT_USAGE)


def _write_stdout(history: ZoneHistory, tz: ZoneInfo, units: str) -> None:
    """The CSV on standard output; a reader that left (``| head``) ends it quietly."""
    try:
        write_csv(history, sys.stdout, tz=tz, units=units)
        sys.stdout.flush()
    except BrokenPipeError:
        # The Python docs' "Note on SIGPIPE" (signal module): what is still buffered cannot
        # be written, and would be tried again at exit ("Exception ignored ... BrokenPipeError"):
        # point standard output at /dev/null so that flush succeeds.
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        os.close(devnull)


def _write_file(history: ZoneHistory, path: str, tz: ZoneInfo, units: str) -> int:
    """Write the CSV file; the number of ticks written (a failed write is a runtime error)."""
    try:
        with open(path, "w", encoding="utf-8", newline="") as out:
            return write_csv(history, out, tz=tz, units=units)
    except OSError as exc:
        raise Refused(f"cannot write {path}: {exc.strerror or exc}", EXIT_RUNTIME) from None
