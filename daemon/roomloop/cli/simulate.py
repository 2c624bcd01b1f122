"""``roomloop simulate``: one zone's controller against a plant model on the standard protocol.

The zone comes from a site file (``-c SITE --zone NAME``: its comfort and economy set
points, tuning, limits and point checks; the protocol's schedule replaces its program), from
a heating type's defaults (``--heating TYPE``) or from a cooling type's (``--cooling TYPE``,
a cooling-only zone); the plant is a built-in name or a plant file, by default the built-in
plant of the zone's heating type (cooling type in a cooling run). ``--mode cool`` runs the
protocol's cooling variant on the zone's cooling call (the zone's cooling set points). The
figures are printed as a table, and optionally written as JSON and drawn as a PNG.
The output paths (and matplotlib, for ``--plot``) are checked before the run.
Exit codes: 0 ok; 1 the JSON or the plot could not be written after all; 2 a bad
plant file, an unknown plant or zone, a bad site file, an output path that cannot
be written (no such folder, not writable, a plot not named .png), --plot without
matplotlib, a mode the zone or the plant cannot run (a cooling run of a zone without a
cooling call or on a plant without ``cooler_w``, a heating run of a cooling-only zone).
"""

from __future__ import annotations

import argparse
import json
import sys

from roomloop.cli.outputs import MATPLOTLIB_MISSING, matplotlib_available, output_path_problem
from roomloop.cli.refusal import Refused
from roomloop.config.checks import temperature_text
from roomloop.config.loader import load_site
from roomloop.core.settings import SettingsError, ZoneSettings
from roomloop.plant.controllers import cooling_zone_settings, make_controller
from roomloop.plant.figures import PhaseFigures
from roomloop.plant.loader import COOLING_PLANTS, PLANT_FOR_COOLING, PLANT_FOR_HEATING, load_plant
from roomloop.plant.protocol import (
    Mode,
    ProtocolResult,
    default_setpoints,
    protocol_settings,
    run_protocol,
)
from roomloop.plant.spec import PlantSpec

EXIT_OK = 0
EXIT_RUNTIME = 1
EXIT_USAGE = 2


def _fail(message: str, code: int) -> int:
    print(f"roomloop simulate: {message}", file=sys.stderr)
    return code


def _zone_settings(args: argparse.Namespace) -> tuple[ZoneSettings, str]:
    """The zone's settings and the units its set points are shown in."""
    if args.config is not None:
        site = load_site(args.config)
        return ZoneSettings.from_site(site, args.zone), site.site.units
    if args.cooling is not None:
        return cooling_zone_settings(args.cooling), "C"
    return ZoneSettings.for_heating_type(args.heating), "C"


def _mode(args: argparse.Namespace) -> Mode:
    """The run's mode as the options give it (a site's zone that only cools changes the
    default to ``cool`` later); a mode the zone of ``--heating`` or ``--cooling`` cannot
    run is refused."""
    if args.mode is None:
        return "cool" if args.cooling is not None else "heat"
    mode: Mode = args.mode
    if mode == "heat" and args.cooling is not None:
        raise Refused(
            f"--cooling {args.cooling} is a cooling-only zone: it has no heating call to "
            "simulate (--mode heat needs --heating TYPE or a site's zone with a heating output)",
            EXIT_USAGE,
        )
    if mode == "cool" and args.heating is not None:
        raise Refused(
            f"--heating {args.heating} has no cooling call: for --mode cool give --cooling "
            "TYPE (direct-expansion, chilled-water) or -c SITE --zone NAME of a zone that cools",
            EXIT_USAGE,
        )
    return mode


def _cannot_cool(plant: str) -> str:
    return (
        f"plant {plant} has no cooler_w: it only heats, and --mode cool needs a plant that "
        f"cools (built-in: {', '.join(COOLING_PLANTS)}, or a plant file with cooler_w)"
    )


def _check_outputs(args: argparse.Namespace) -> None:
    """Refuse before the run what would only fail after it."""
    if args.json:
        problem = output_path_problem("--json", args.json)
        if problem:
            raise Refused(problem, EXIT_USAGE)
    if args.plot:
        problem = output_path_problem("--plot", args.plot, ".png")
        if problem:
            raise Refused(problem, EXIT_USAGE)
        if not matplotlib_available():
            raise Refused(MATPLOTLIB_MISSING, EXIT_USAGE)


def main(args: argparse.Namespace) -> int:
    try:
        return _simulate(args)
    except Refused as refused:
        return _fail(refused.message, refused.code)


def _simulate(args: argparse.Namespace) -> int:
    """Check the options, make the zone and the plant, run the protocol, write the outputs."""
    mode = _checked_options(args)
    try:
        zone, units = _zone_settings(args)
    except SettingsError as exc:
        raise Refused(str(exc), EXIT_USAGE) from None
    from_site = args.config is not None
    mode = _zone_mode(args, zone, mode)
    plant = _plant(args, zone, mode)
    comfort_c, economy_c = _protocol_setpoints(zone, mode, from_site=from_site)
    try:
        settings = protocol_settings(zone, comfort_c=comfort_c, economy_c=economy_c, mode=mode)
    except SettingsError as exc:
        raise Refused(str(exc), EXIT_USAGE) from None
    controller = make_controller(args.controller, settings, mode)
    result = run_protocol(
        controller,
        plant,
        seed=args.seed,
        sensor_names=[p.name for p in settings.inputs],
        controller_name=args.controller,
        comfort_c=comfort_c,
        economy_c=economy_c,
        mode=mode,
    )
    print(format_summary(result, settings, from_site=from_site, units=units))
    if args.json:
        _write_json(result, args.json)
    if args.plot:
        _write_plot(result, args.plot)
    return EXIT_OK


def _checked_options(args: argparse.Namespace) -> Mode:
    """The mode the options ask for, once they agree with each other and the output paths
    can be written (the zone may still change the mode: ``_zone_mode``)."""
    if args.config is not None and not args.zone:
        raise Refused("-c SITE needs --zone NAME (the zone to simulate)", EXIT_USAGE)
    if args.config is None and args.zone:
        raise Refused("--zone goes with -c SITE; with --heating there is no site", EXIT_USAGE)
    mode = _mode(args)
    _check_outputs(args)
    return mode


def _zone_mode(args: argparse.Namespace, zone: ZoneSettings, mode: Mode) -> Mode:
    """The mode the zone runs in: a cooling run needs a zone that cools."""
    cs = zone.cooling
    if args.mode is None and cs is not None and not cs.heating:
        mode = "cool"  # a site's zone that only cools runs the cooling variant by default
    if mode == "cool" and cs is None:
        raise Refused(
            f"zone {zone.name} has no cooling output: --mode cool needs a zone that cools",
            EXIT_USAGE,
        )
    return mode


def _plant(args: argparse.Namespace, zone: ZoneSettings, mode: Mode) -> PlantSpec:
    """``--plant``, or the built-in plant of the zone's heating type (its cooling type in a
    cooling run); a cooling run needs a plant that cools."""
    cs = zone.cooling
    default_plant = (
        PLANT_FOR_COOLING[cs.type] if mode == "cool" and cs is not None
        else PLANT_FOR_HEATING[zone.heating]
    )
    # ConfigError (a bad plant file, an unknown name): the CLI front prints it, exit 2
    plant = load_plant(args.plant or default_plant)
    if mode == "cool" and not plant.can_cool:
        raise Refused(_cannot_cool(plant.name), EXIT_USAGE)
    return plant


def _protocol_setpoints(zone: ZoneSettings, mode: Mode, *, from_site: bool) -> tuple[float, float]:
    """The (comfort, economy) set points of the run: the protocol's own, but a site's zone
    runs the protocol at its own comfort and economy set points."""
    if not from_site:
        return default_setpoints(mode)
    cs = zone.cooling
    return (
        (cs.comfort_c, cs.economy_c) if mode == "cool" and cs is not None
        else (zone.comfort_c, zone.economy_c)
    )


def _write_json(result: ProtocolResult, path: str) -> None:
    """The figures as JSON (the path was checked before the run; a failure now is a
    runtime error)."""
    try:
        with open(path, "w", encoding="utf-8") as out:
            json.dump(result.to_dict(), out, indent=2)
            out.write("\n")
    except (OSError, ValueError) as exc:
        raise Refused(f"cannot write {path}: {_reason(exc)}", EXIT_RUNTIME) from None


def _write_plot(result: ProtocolResult, path: str) -> None:
    """The plot (matplotlib imported only now; the path was checked before the run)."""
    from roomloop.plant.plot import PlotUnavailable, write_plot

    try:
        write_plot(result, path)
    except PlotUnavailable:
        raise Refused(MATPLOTLIB_MISSING, EXIT_RUNTIME) from None
    except (OSError, ValueError) as exc:
        raise Refused(f"cannot write {path}: {_reason(exc)}", EXIT_RUNTIME) from None


def _reason(exc: OSError | ValueError) -> str:
    if isinstance(exc, OSError) and exc.strerror:
        return exc.strerror.lower() if exc.strerror[:1].isupper() else exc.strerror
    return str(exc) or type(exc).__name__


def _seconds(value: float | None) -> str:
    return "-" if value is None else f"{value:.0f}"


def _row(name: str, f: PhaseFigures) -> str:
    return (
        f"{name:<10} {f.setpoint_deviation_k:>+7.2f} {f.control_variation_k:>7.2f} "
        f"{f.control_accuracy_k:>7.2f} {f.cycles_per_hour:>6.1f} {100 * f.on_fraction:>5.0f} "
        f"{_seconds(f.shortest_on_s):>8} {_seconds(f.shortest_off_s):>9} {f.energy_kwh:>7.2f}"
    )


def _zone_text(settings: ZoneSettings, from_site: bool, mode: Mode = "heat") -> str:
    cs = settings.cooling
    kind = cs.type if mode == "cool" and cs is not None else settings.heating
    if from_site:
        return f"zone {settings.name} ({kind})"
    article = "an" if kind[:1] in "aeiou" else "a"
    if mode == "cool":
        return f"{article} {kind} cooling zone with the cooling type's defaults"
    return f"{article} {kind} zone with the heating type's defaults"


def _setpoints_text(
    result: ProtocolResult, settings: ZoneSettings, from_site: bool, units: str
) -> str:
    """Exactly what the run took from the zone, and what the protocol set itself."""
    comfort = temperature_text(result.comfort_c, units)
    economy = temperature_text(result.economy_c, units)
    cooling = result.mode == "cool"
    call = "cooling " if cooling else ""
    if not from_site:
        return (
            f"set points: the protocol's own, {call}comfort {comfort} and economy {economy} "
            f"(the {'cooling' if cooling else 'heating'} type's tuning)"
        )
    step = "set-up" if cooling else "set-back"
    return (
        f"taken from zone {settings.name}: {call}comfort {comfort} and economy {economy} set "
        "points, tuning, limits, point checks, fail-safe\n"
        "not taken: its weekly program, mode and other levels (the protocol's schedule runs "
        f"instead: comfort, a 6 h {step} to economy, the step back)"
    )


def _settle_text(settle_s: float | None) -> str:
    if settle_s is None:
        return "never within 0.5 K of the set point in the phase"
    return f"within 0.5 K of the set point after {settle_s / 60:.0f} min"


def format_summary(
    result: ProtocolResult, settings: ZoneSettings, *, from_site: bool, units: str = "C"
) -> str:
    """A readable table of the run's figures (temperatures of the true room air)."""
    cooling = result.mode == "cool"
    lines = [
        f"controller {result.controller} on plant {result.plant}, "
        f"{_zone_text(settings, from_site, result.mode)}, seed {result.seed}"
        + (", cooling run (the cooling call; loads are gains the cooler removes)" if cooling
           else ""),
        _setpoints_text(result, settings, from_site, units),
        f"{'phase':<10} {'CSD K':>7} {'CV K':>7} {'CA K':>7} {'cyc/h':>6} {'on %':>5} "
        f"{'min on s':>8} {'min off s':>9} {'kWh':>7}",
    ]
    for name, figures in result.phases.items():
        lines.append(_row(name, figures))
    recovery = result.phases["recovery"]
    o = result.overall
    past = " (below the set point)" if cooling else ""
    lines.append(
        f"recovery: overshoot{past} {recovery.overshoot_k:+.2f} K, "
        f"{_settle_text(recovery.settle_s)}"
    )
    lines.append(
        f"overall: control accuracy {o.control_accuracy_k:.2f} K (worse load phase), "
        f"overshoot {o.overshoot_k:+.2f} K, {o.cycles_per_hour:.1f} cycles/h (higher load phase), "
        f"{o.energy_kwh:.2f} kWh"
    )
    lines.append(
        "CSD = mean(T) - S, CV = (max T - min T) / 2, CA = |CSD| + CV (EN 15500); "
        "min on s / min off s: the shortest complete run in the phase"
    )
    return "\n".join(lines)
