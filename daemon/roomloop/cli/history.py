"""``roomloop history -c SITE --zone Z [--since ..] [--until ..] --csv OUT``: export as CSV.

The CSV (``time,temperature,relay,setpoint,fail_safe``; times ISO 8601 with the
site's offset, temperatures in the site's units) is what ``tune --history`` and
``report --history`` read back. ``--csv -`` writes to standard output.
Exit codes: 0 ok; 1 no history to read, or the file cannot be written; 2 a bad
site file, an unknown zone, a bad time.
"""

from __future__ import annotations

import argparse
import sys
from zoneinfo import ZoneInfo

from roomloop.cli.outputs import output_path_problem
from roomloop.config.loader import load_site
from roomloop.history.csvfile import write_csv
from roomloop.history.source import HistoryUnavailable, load_history, parse_bound

EXIT_OK = 0
EXIT_RUNTIME = 1
EXIT_USAGE = 2


def _fail(message: str, code: int) -> int:
    print(f"roomloop history: {message}", file=sys.stderr)
    return code


def main(args: argparse.Namespace) -> int:
    site = load_site(args.config)  # ConfigError: the CLI front prints it, exit 2
    if args.zone not in {z.name for z in site.zones}:
        return _fail(
            f"no zone {args.zone!r} in {args.config} (zones: "
            + ", ".join(z.name for z in site.zones) + ")",
            EXIT_USAGE,
        )
    tz = ZoneInfo(site.site.timezone)
    try:
        since = parse_bound(args.since, tz, "--since")
        until = parse_bound(args.until, tz, "--until")
    except ValueError as exc:
        return _fail(str(exc), EXIT_USAGE)
    if args.csv != "-":
        problem = output_path_problem("--csv", args.csv)
        if problem:
            return _fail(problem, EXIT_USAGE)
    try:
        history = load_history(
            site, args.zone, state_dir=args.state_dir, since=since, until=until
        )
    except HistoryUnavailable as exc:
        return _fail(str(exc), EXIT_RUNTIME)
    if args.csv == "-":
        write_csv(history, sys.stdout, tz=tz, units=site.site.units)
        return EXIT_OK
    try:
        with open(args.csv, "w", encoding="utf-8", newline="") as out:
            rows = write_csv(history, out, tz=tz, units=site.site.units)
    except OSError as exc:
        return _fail(f"cannot write {args.csv}: {exc.strerror or exc}", EXIT_RUNTIME)
    print(f"{rows} ticks of zone {args.zone} written to {args.csv}", file=sys.stderr)
    return EXIT_OK
