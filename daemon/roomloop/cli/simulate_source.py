"""``roomloop simulate-source``: zones sharing one heat source on the standard protocol.

``-c SITE --source NAME`` runs the site's heat source with every local zone it serves
(each zone's own settings and set points, its heating type's built-in plant, valves that
open in the source's ``valve_opening_s`` unless ``--actuator-s`` says otherwise);
``--example two-zone|three-zone`` runs a built-in estate. Every room also runs alone, so
the table shows what the source's timing costs each zone. A separate sub-command, not an
option of ``simulate``: that one runs one zone (``--zone``, ``--controller``, ``--plant``,
``--plot`` are about a single zone), and this run's inputs and figures differ.
Exit codes: 0 ok; 1 the JSON could not be written; 2 a bad site file, an unknown source,
an output path that cannot be written.
"""

from __future__ import annotations

import argparse
import json
import math
import sys

from roomloop.cli.outputs import output_path_problem
from roomloop.config.loader import load_site
from roomloop.core.settings import SettingsError
from roomloop.plant.multizone import (
    Estate,
    EstateResult,
    builtin_estate,
    estate_from_site,
    run_estate,
)

EXIT_OK = 0
EXIT_RUNTIME = 1
EXIT_USAGE = 2


def _fail(message: str, code: int) -> int:
    print(f"roomloop simulate-source: {message}", file=sys.stderr)
    return code


ACTUATOR_MAX_S = 1800.0
"""The longest ``--actuator-s``: the longest ``valve_opening_s`` a site file takes."""


def _estate(args: argparse.Namespace) -> tuple[Estate, tuple[str, ...]]:
    if args.config is None:
        return builtin_estate(args.example, actuator_s=args.actuator_s), ()
    site = load_site(args.config)
    try:
        return estate_from_site(site, args.source, actuator_s=args.actuator_s)
    except KeyError:
        names = ", ".join(hs.name for hs in site.heat_sources) or "none"
        raise SettingsError(
            f"site {site.name!r} has no heat source {args.source!r} (heat sources: {names})"
        ) from None


def _usage_problem(args: argparse.Namespace) -> str | None:
    """What is wrong with the options themselves (exit 2), if anything."""
    if (args.config is None) != (args.source is None):
        return "-c SITE and --source NAME go together"
    actuator = args.actuator_s
    if actuator is not None and not (math.isfinite(actuator) and 0 <= actuator <= ACTUATOR_MAX_S):
        return (
            f"--actuator-s {actuator:g}: give the valves' opening time in seconds, "
            f"0 to {ACTUATOR_MAX_S:.0f}"
        )
    return output_path_problem("--json", args.json) if args.json else None


def main(args: argparse.Namespace) -> int:
    problem = _usage_problem(args)
    if problem:
        return _fail(problem, EXIT_USAGE)
    try:
        estate, remote = _estate(args)
    except SettingsError as exc:
        return _fail(str(exc), EXIT_USAGE)
    if not estate.rooms:
        return _fail(f"heat source {args.source!r} serves no local zone to simulate", EXIT_USAGE)
    result = run_estate(estate, seed=args.seed)
    print(format_estate(result, estate, remote))
    if args.json:
        try:
            with open(args.json, "w", encoding="utf-8") as out:
                json.dump(result.to_dict(), out, indent=2)
                out.write("\n")
        except OSError as exc:
            return _fail(f"cannot write {args.json}: {exc.strerror or exc}", EXIT_RUNTIME)
    return EXIT_OK


def _s(value: float | None) -> str:
    return "-" if value is None else f"{value:.0f}"


def format_estate(result: EstateResult, estate: Estate, remote: tuple[str, ...] = ()) -> str:
    """A readable table: each room shared and alone, and the source."""
    s = estate.source
    lines = [
        f"estate {result.estate}: {len(estate.rooms)} zones on heat source {s.name} ({s.kind}), "
        f"seed {result.seed}",
        f"source timing: valve opening {s.valve_opening_s:.0f} s, pump pre-run "
        f"{s.pump_pre_run_s:.0f} s, overrun {s.pump_overrun_s:.0f} s, min on "
        f"{s.min_on_s:.0f} s, min off {s.min_off_s:.0f} s, at most {s.max_starts_per_hour} "
        "starts/h",
        "valves: " + ", ".join(f"{r.name} opens in {r.actuator_s:.0f} s" for r in estate.rooms),
    ]
    if remote:
        lines.append(f"not simulated (remote zones): {', '.join(remote)}")
    lines.append(
        f"{'zone':<12} {'plant':<11} {'CA alone':>8} {'CA shared':>9} {'kWh alone':>9} "
        f"{'kWh shared':>10} {'calls':>5} {'waited min':>10} {'s/call':>6}"
    )
    for room in result.rooms:
        cost = room.cost()
        lines.append(
            f"{room.name:<12} {room.plant:<11} {room.alone.overall.control_accuracy_k:>8.2f} "
            f"{room.overall.control_accuracy_k:>9.2f} {room.alone.overall.energy_kwh:>9.2f} "
            f"{room.overall.energy_kwh:>10.2f} {room.calls:>5} {room.waiting_s / 60:>10.0f} "
            f"{cost['mean_wait_per_call_s']:>6.0f}"
        )
    f = result.source
    reasons = ", ".join(f"{k} {v / 3600:.1f} h" for k, v in sorted(f.reasons_s.items()))
    lines.append(
        f"source: {f.starts} starts (at most {f.most_starts_in_an_hour} in an hour), on "
        f"{100 * f.on_fraction:.0f} %, pump {100 * f.pump_fraction:.0f} %, shortest on "
        f"{_s(f.shortest_on_s)} s, shortest off {_s(f.shortest_off_s)} s"
    )
    lines.append(f"source time by reason: {reasons}")
    lines.append(
        "scored phases of the standard protocol; CA = control accuracy (EN 15500) of the worse "
        "load phase, K; waited: the zone called with its valve open and the source did not fire"
    )
    return "\n".join(lines)
