"""Identify a zone's plant from its history: the simulator's RC model fitted to its data.

Offline only (``roomloop tune``): numpy and scipy come from the optional ``tune``
extra and are imported by this module alone, never by the daemon's path.

Model (the simulator's, :mod:`roomloop.plant.model`, with a linear emitter)::

    Ce dTe/dt = P u(t - L) - Ke (Te - Tr)
    Cr dTr/dt = Ke (Te - Tr) - H Tr - Km (Tr - Tm) + w(t)
    Cm dTm/dt = Km (Tr - Tm)
    tau dTs/dt = Tr - Ts                      (the sensor reads Ts)

``P`` is the zone's ``heater_w`` (or a nominal 1000 W: then every capacity and
conductance is on that scale, and the time constants are what counts). ``w(t)``
is the heat from outdoors and gains: ``H To(t) + g(t)`` when the outdoor temperature
is known, with ``g`` a slow piecewise-linear load (knots every ``KNOT_OUTDOOR_S``);
otherwise all of it is an unknown load: a slowly varying part (knots every ``KNOT_S``)
and a daily profile (``DAILY_HARMONICS`` harmonics of the day), since without the outdoor
temperature its daily swing is in the load too.
Reduced structures drop the mass (``no-mass``) or also the emitter (``room``).

The fit is a separable least-squares problem (variable projection): for given
physical parameters the model is linear in the load's knot values and the initial
state, which are solved exactly (``numpy.linalg.lstsq``); ``scipy.optimize.least_squares``
searches the physical parameters (in logarithms; the delay linearly) on what is left.
The data are averaged to a ``STEP_S`` grid first (a week at 10 s becomes 10 080
points). Responses are computed mode by mode with ``scipy.signal.lfilter``: the
model is discretised exactly (zero-order hold) through its eigen-decomposition.

Uncertainties come from the Jacobian at the optimum, scaled by the residual
variance and by the residuals' autocorrelation (an AR(1) effective sample size),
so correlated errors do not pass for a precise fit. Two more searches start from the
optimum with the emitter's capacity traded against the next node's (:func:`_trade_offs`):
one that ends about as good at other parameters widens their spread, since the curvature
at one point does not show a flat valley (a screed slab beside the building mass).
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

# The matrices here are small (10 000 x 15): BLAS threads only contend (ten times slower on
# a busy two-core board). Effective only when numpy is first imported here, as in 'tune'.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402
from scipy import linalg, optimize, signal  # noqa: E402

from roomloop.history.report import cover_s, tick_of  # noqa: E402
from roomloop.history.store import ZoneHistory  # noqa: E402
from roomloop.plant.spec import PlantSpec  # noqa: E402

STEP_S = 60.0
KNOT_S = 12 * 3600.0
KNOT_OUTDOOR_S = 24 * 3600.0
DAILY_HARMONICS = 2
NOMINAL_HEATER_W = 1000.0
MIN_HOURS = 24.0
MIN_SWITCHES = 10
STRUCTURES = ("full", "no-mass", "room")
PARAMS = {
    "full": ("Ce", "Ke", "Cr", "H", "Cm", "Km", "tau_s", "delay_s"),
    "no-mass": ("Ce", "Ke", "Cr", "H", "tau_s", "delay_s"),
    "room": ("Cr", "H", "tau_s", "delay_s"),
}
MAX_DELAY_S = 1800.0
CHI2_95_ONE_DOF = 3.84
"""The chi-square distribution's 95 % point for one degree of freedom (any statistics table)."""
DETERMINED = 0.5
REDUCED_RMS_MARGIN = 0.1
"""A reduced structure whose RMS residual is more than this much above the best fit's is too
simple for the room: its parameters' small uncertainty would come from a wrong model."""
PARAM_NAMES = {
    "Ce": "emitter capacity",
    "Ke": "emitter conductance",
    "Cr": "room capacity",
    "H": "loss to outdoors",
    "Cm": "mass capacity",
    "Km": "mass conductance",
    "tau_s": "sensor lag",
    "delay_s": "transport delay",
}
"""A parameter counts as determined when its relative standard uncertainty is below this."""
CONFOUNDED_WITHOUT_OUTDOOR = ("H",)
"""Without the outdoor temperature the loss to outdoors is not determined, whatever its
spread: the free load (a slow part and a daily profile) spans the room's steady response to
the program's daily set points, so a loss of any size is matched by a load. A structure
that leaves out a node then takes the node's part in ``H`` with a spread of a few per cent
(the underfloor plant's week: 102 W/K +- 3 % against a true 40; the spread is computed as
if the model were right, and says nothing of what the load absorbed)."""


class IdentificationRefused(Exception):
    """The data cannot support an identification; the message says why."""


@dataclass(frozen=True, slots=True)
class Series:
    """The history on the fit grid: relay on-fraction per step, mean reading (NaN: none)."""

    step_s: float
    t0: float
    u: Any
    y: Any
    outdoor: Any | None
    resolution_k: float
    tick_s: float = 0.0
    """The history's own tick: the readings averaged into a step sit at its start + (step
    - tick) / 2 on average, so the model's output is read there too (see ``_Problem``)."""


@dataclass
class Fit:
    structure: str
    params: dict[str, float]
    rel_sd: dict[str, float]
    """Relative standard uncertainty of each parameter (the delay's: absolute, in s)."""
    rms_k: float
    bic: float
    heater_w: float
    heater_known: bool
    outdoor: bool
    mode_time_constants_s: list[float]
    points: int
    coef: Any = None
    predicted: Any = None
    notes: list[str] = field(default_factory=list)
    confounded: tuple[str, ...] = ()
    """Parameters the data cannot determine whatever their stated spread: without the
    outdoor temperature, the loss to outdoors (see :data:`CONFOUNDED_WITHOUT_OUTDOOR`)."""

    @property
    def determined(self) -> bool:
        return not self.undetermined()

    @property
    def spread_determined(self) -> bool:
        """Every parameter's stated spread is small (the structures are chosen on this)."""
        return not self._wide_spread()

    def undetermined(self) -> list[str]:
        """The parameters these data do not determine: relative uncertainty of 50 % or more
        (the delay: more than itself or two minutes), or confounded by the setup."""
        wide = self._wide_spread()
        return wide + [name for name in self.confounded if name in self.params and name not in wide]

    def _wide_spread(self) -> list[str]:
        return [
            name for name, sd in self.rel_sd.items()
            if not (
                (sd < DETERMINED) if name != "delay_s" else (sd < max(120.0, self.params[name]))
            )
        ]

    def node_time_constants_s(self) -> dict[str, float]:
        p = self.params
        out: dict[str, float] = {}
        ke = p.get("Ke", 0.0)
        km = p.get("Km", 0.0)
        if "Ce" in p:
            out["emitter"] = p["Ce"] / ke
        out["room"] = p["Cr"] / (ke + km + p["H"])
        if "Cm" in p:
            out["mass"] = p["Cm"] / km
        out["building"] = (p["Cr"] + p.get("Cm", 0.0) + p.get("Ce", 0.0)) / p["H"]
        return out


# --------------------------------------------------------------------------- data


def prepare(history: ZoneHistory, *, step_s: float = STEP_S) -> Series:
    """Average the ticks onto the fit grid; a step with no reading (or in fail-safe) is NaN."""
    t = np.asarray(history.time, dtype=float)
    t0 = float(t[0])
    n = math.floor((t[-1] - t0) / step_s) + 1
    idx = np.minimum(((t - t0) // step_s).astype(int), n - 1)
    relay = np.asarray(history.relay, dtype=float)
    ticks = np.bincount(idx, minlength=n).astype(float)
    u = np.bincount(idx, weights=relay, minlength=n) / np.maximum(ticks, 1.0)
    temp = np.array([np.nan if v is None else v for v in history.temperature], dtype=float)
    fail = np.asarray(history.fail_safe, dtype=bool)
    good = np.isfinite(temp) & ~fail
    count = np.bincount(idx[good], minlength=n).astype(float)
    total = np.bincount(idx[good], weights=temp[good], minlength=n)
    y = np.where(count > 0, total / np.maximum(count, 1.0), np.nan)
    outdoor = None
    if history.outdoor is not None and any(v is not None for v in history.outdoor):
        o = np.array([np.nan if v is None else v for v in history.outdoor], dtype=float)
        ok = np.isfinite(o)
        oc = np.bincount(idx[ok], minlength=n).astype(float)
        ot = np.bincount(idx[ok], weights=o[ok], minlength=n)
        outdoor = np.where(oc > 0, ot / np.maximum(oc, 1.0), np.nan)
        # fill the gaps by interpolation (the outdoor temperature is slow)
        good_o = np.isfinite(outdoor)
        if good_o.sum() >= 2:
            outdoor = np.interp(np.arange(n), np.flatnonzero(good_o), outdoor[good_o])
        else:
            outdoor = None
    steps = np.diff(np.unique(np.round(temp[np.isfinite(temp)], 4)))
    resolution = float(np.min(steps)) if steps.size else 0.0
    tick = float(np.median(np.diff(t))) if t.size > 1 else step_s
    return Series(step_s, t0, u, y, outdoor, round(resolution, 4), min(tick, step_s))


def history_hours(history: ZoneHistory) -> tuple[float, float]:
    """(covered, spanned) hours of ``history``. Covered as ``roomloop report`` counts it
    (:func:`roomloop.history.report.cover_s`): each sample holds until the next, at most a
    few ticks, so a gap (the service stopped) is not counted; spanned: first to last."""
    if not history.time:
        return 0.0, 0.0
    covered = sum(cover_s(history, tick_of(history))) / 3600.0
    return covered, (history.time[-1] - history.time[0]) / 3600.0


def history_hours_text(history: ZoneHistory) -> str:
    """'N h of history', with the span when gaps leave it longer than the covered time."""
    covered, span = history_hours(history)
    text = f"{covered:.1f} h of history"
    if span + tick_of(history) / 3600.0 - covered >= 0.05:
        text += f" (over a span of {span:.1f} h: the gaps are not counted)"
    return text


def check_data(history: ZoneHistory) -> list[str]:
    """Why these data cannot support an identification (empty: they can)."""
    reasons: list[str] = []
    if len(history.time) < 2:
        return ["too little data: fewer than two ticks"]
    cover = cover_s(history, tick_of(history))
    hours = sum(cover) / 3600.0  # covered, as history_hours counts it
    normal = [
        k for k, t in enumerate(history.temperature)
        if t is not None and not history.fail_safe[k]
    ]
    normal_hours = sum(cover[k] for k in normal) / 3600.0
    if hours < MIN_HOURS:
        reasons.append(
            f"too little data: {history_hours_text(history)}, at least {MIN_HOURS:.0f} h "
            "needed (a week is better)"
        )
    elif normal_hours < MIN_HOURS:
        reasons.append(
            f"too little usable data: only {normal_hours:.1f} h with a reliable temperature "
            f"outside fail-safe (of {hours:.1f} h), at least {MIN_HOURS:.0f} h needed"
        )
    switches = sum(
        1 for a, b in zip(history.relay, history.relay[1:], strict=False) if a != b
    )
    if switches < MIN_SWITCHES:
        reasons.append(
            f"too little excitation: the relay switched {switches} time(s) "
            f"(at least {MIN_SWITCHES} needed; the heat must come and go to show the room's "
            "response)"
        )
    values = [history.temperature[k] for k in normal]
    if values:
        distinct = len({round(v, 3) for v in values if v is not None})
        most = max(
            (values.count(v) for v in set(values[:: max(1, len(values) // 2000)])), default=0
        )
        if distinct < 3 or most > 0.8 * len(values):
            reasons.append(
                "the temperature hardly ever changes (a stuck sensor?): "
                f"{distinct} distinct reading(s)"
            )
    return reasons


# --------------------------------------------------------------------------- model


def _matrices(structure: str, p: dict[str, float], heater_w: float) -> tuple[Any, Any, Any, int]:
    """Continuous A, input columns B (heat, room heat), and the sensor's output row."""
    if structure == "full":
        names = ["e", "r", "m", "s"]
    elif structure == "no-mass":
        names = ["e", "r", "s"]
    else:
        names = ["r", "s"]
    n = len(names)
    a = np.zeros((n, n))
    b_heat = np.zeros(n)
    b_room = np.zeros(n)
    i = {name: k for k, name in enumerate(names)}
    r = i["r"]
    cr = p["Cr"]
    h = p["H"]
    a[r, r] -= h / cr
    if "e" in i:
        e = i["e"]
        ce, ke = p["Ce"], p["Ke"]
        a[e, e] -= ke / ce
        a[e, r] += ke / ce
        a[r, r] -= ke / cr
        a[r, e] += ke / cr
        b_heat[e] = heater_w / ce
    else:
        b_heat[r] = heater_w / cr
    if "m" in i:
        m = i["m"]
        cm, km = p["Cm"], p["Km"]
        a[r, r] -= km / cr
        a[r, m] += km / cr
        a[m, m] -= km / cm
        a[m, r] += km / cm
    s = i["s"]
    tau = p["tau_s"]
    a[s, s] -= 1.0 / tau
    a[s, r] += 1.0 / tau
    b_room[r] = 1.0 / cr
    c = np.zeros(n)
    c[s] = 1.0
    return a, np.stack([b_heat, b_room], axis=1), c, n


class _Model:
    """The discretised model: responses to input sequences, mode by mode."""

    def __init__(self, structure: str, p: dict[str, float], heater_w: float, h: float) -> None:
        a, b, c, n = _matrices(structure, p, heater_w)
        lam, v = np.linalg.eig(a)
        if np.iscomplexobj(lam):
            lam = lam.real
            v = v.real
        vinv = np.linalg.inv(v)
        self.lam = lam
        self.h = h
        self.mu = np.exp(lam * h)
        gamma = np.where(np.abs(lam) > 1e-15, (self.mu - 1.0) / np.where(lam == 0, 1, lam), h)
        cv = c @ v
        bm = vinv @ b  # modal input gains per input column
        self.gain = cv[:, None] * gamma[:, None] * bm  # (modes, inputs)
        self.cv = cv
        self.n = n
        self.time_constants = sorted(float(-1.0 / x) for x in lam if x < 0)

    def response(self, s: Any, column: int) -> Any:
        out = np.zeros_like(s, dtype=float)
        for i in range(self.n):
            g = self.gain[i, column]
            if g != 0.0:
                out += g * signal.lfilter([0.0, 1.0], [1.0, -self.mu[i]], s)
        return out

    def responses(self, cols: Any, column: int) -> Any:
        """Responses to many input sequences at once (one per column of ``cols``)."""
        out = np.zeros_like(cols, dtype=float)
        for i in range(self.n):
            g = self.gain[i, column]
            if g != 0.0:
                out += g * signal.lfilter([0.0, 1.0], [1.0, -self.mu[i]], cols, axis=0)
        return out

    def free(self, length: int) -> Any:
        """The output's response to each mode's initial value (one column per mode)."""
        k = np.arange(length, dtype=float)[:, None]
        return self.cv[None, :] * np.exp(self.lam[None, :] * self.h * k)


def _delayed(u: Any, delay_s: float, h: float) -> Any:
    """``u`` delayed by ``delay_s`` on a grid of ``h`` (a fractional step interpolates)."""
    steps = delay_s / h
    n = math.floor(steps)
    f = steps - n
    out = np.zeros_like(u)
    if n < len(u):
        out[n:] += (1.0 - f) * u[: len(u) - n]
    if n + 1 < len(u):
        out[n + 1 :] += f * u[: len(u) - n - 1]
    return out


def _hats(length: int, h: float, knot_s: float) -> Any:
    """Piecewise-linear hat functions with knots every ``knot_s`` (one column per knot)."""
    t = np.arange(length) * h
    knots = np.arange(0.0, t[-1] + knot_s, knot_s)
    cols = np.maximum(0.0, 1.0 - np.abs(t[:, None] - knots[None, :]) / knot_s)
    return cols


def _load_basis(series: Series, use_outdoor: bool) -> tuple[Any, int]:
    """The load's columns and how many of them are knots (the rest: the daily harmonics).

    With the outdoor temperature the rest of the load (gains, sun) is slow: knots every
    ``KNOT_OUTDOOR_S``. Without it the load is the outdoor temperature's work too, which
    swings daily (night and day, the sun): a slow part (knots every ``KNOT_S``) plus a
    daily profile that repeats (``DAILY_HARMONICS`` sine and cosine pairs). The profile
    carries on into a prediction; the slow part is held at its last value.
    """
    length, h = len(series.u), series.step_s
    knots = _hats(length, h, KNOT_OUTDOOR_S if use_outdoor else KNOT_S)
    if use_outdoor or DAILY_HARMONICS == 0:
        return knots, knots.shape[1]
    phase = 2.0 * math.pi * (series.t0 + np.arange(length) * h) / 86400.0
    waves = [f(k * phase) for k in range(1, DAILY_HARMONICS + 1) for f in (np.cos, np.sin)]
    return np.concatenate([knots, np.stack(waves, axis=1)], axis=1), knots.shape[1]


@dataclass
class _Problem:
    series: Series
    structure: str
    heater_w: float
    use_outdoor: bool
    mask: Any
    hats: Any
    fit_until: int

    def unpack(self, x: Any) -> dict[str, float]:
        names = PARAMS[self.structure]
        p = {name: float(math.exp(v)) for name, v in zip(names[:-1], x[:-1], strict=True)}
        p["delay_s"] = float(x[-1])
        return p

    def design(self, p: dict[str, float], length: int) -> tuple[Any, Any]:
        """(fixed part of the output, linear columns) over ``length`` steps."""
        s = self.series
        model = _Model(self.structure, p, self.heater_w, s.step_s)
        u = _delayed(s.u[:length], p["delay_s"], s.step_s)
        fixed = model.response(u, 0)
        hats = self.hats[:length]
        if self.use_outdoor and s.outdoor is not None:
            fixed = fixed + model.response(p["H"] * s.outdoor[:length], 1)
        load = model.responses(hats, 1)
        cols = np.concatenate([load, model.free(length)], axis=1)
        w = (s.step_s - s.tick_s) / (2.0 * s.step_s)
        if w > 0:  # read the output where the step's readings sit on average
            fixed = (1.0 - w) * fixed + w * np.append(fixed[1:], fixed[-1])
            cols = (1.0 - w) * cols + w * np.vstack([cols[1:], cols[-1:]])
        return fixed, cols

    def solve(self, x: Any) -> tuple[Any, Any, Any]:
        p = self.unpack(x)
        n = self.fit_until
        fixed, cols = self.design(p, n)
        m = self.mask[:n]
        y = self.series.y[:n]
        target = y[m] - fixed[m]
        a = cols[m]
        scale = np.maximum(np.linalg.norm(a, axis=0), 1e-300)
        coef, *_ = linalg.lstsq(a / scale, target, lapack_driver="gelsy", check_finite=False)
        coef = coef / scale
        resid = target - a @ coef
        return resid, coef, fixed + cols @ coef

    def residual(self, x: Any) -> Any:
        try:
            resid, _, _ = self.solve(x)
        except (np.linalg.LinAlgError, ValueError, FloatingPointError):
            return np.full(int(self.mask[: self.fit_until].sum()), 1e3)
        if not np.all(np.isfinite(resid)):
            return np.full(resid.shape, 1e3)
        return resid


def _start(structure: str, heater_w: float, heating: str) -> dict[str, float]:
    """A start for the search: the heating type's built-in plant, scaled to the heater."""
    from roomloop.plant.loader import BUILTIN_PLANTS, load_plant

    spec = load_plant(heating if heating in BUILTIN_PLANTS else "hydronic")
    k = heater_w / spec.heater_w
    ke = spec.emitter_slope_w_per_k() / 1.5 if spec.emitter is not None else 100.0
    p = {
        "Ce": (spec.emitter.capacity_j_per_k if spec.emitter else 2e4) * k,
        "Ke": ke * k,
        "Cr": spec.room.capacity_j_per_k * k,
        "H": spec.room.loss_w_per_k * k,
        "Cm": (spec.mass.capacity_j_per_k if spec.mass else 2e6) * k,
        "Km": (spec.mass.conductance_w_per_k if spec.mass else 150.0) * k,
        "tau_s": max(30.0, spec.sensor.time_constant_s),
        "delay_s": spec.transport_delay_s,
    }
    if structure == "room":
        p["Cr"] = (spec.room.capacity_j_per_k + (spec.emitter.capacity_j_per_k
                   if spec.emitter else 0.0)) * k
    return {name: p[name] for name in PARAMS[structure]}


def _fit_structure(
    series: Series, structure: str, heater_w: float, heating: str, fit_until: int,
    *, heater_known: bool,
) -> Fit:
    use_outdoor = series.outdoor is not None
    mask = np.isfinite(series.y)
    hats, _ = _load_basis(series, use_outdoor)
    problem = _Problem(series, structure, heater_w, use_outdoor, mask, hats, fit_until)
    start = _start(structure, heater_w, heating)
    names = PARAMS[structure]
    x0 = np.array([math.log(start[n]) for n in names[:-1]] + [start["delay_s"]])
    lo = np.array([math.log(1.0)] * (len(names) - 1) + [0.0])
    hi = np.array([math.log(1e10)] * (len(names) - 1) + [MAX_DELAY_S])
    lo[names.index("tau_s")] = math.log(1.0)
    hi[names.index("tau_s")] = math.log(3600.0)
    x0 = np.clip(x0, lo + 1e-6, hi - 1e-6)

    def search(x_start: Any, evaluations: int) -> Any:
        return optimize.least_squares(
            problem.residual,
            np.clip(x_start, lo + 1e-6, hi - 1e-6),
            bounds=(lo, hi),
            method="trf",
            x_scale=np.array([1.0] * (len(names) - 1) + [60.0]),
            diff_step=np.array([1e-3] * (len(names) - 1) + [1e-2]),
            max_nfev=evaluations,
            ftol=1e-6,
            xtol=1e-6,
        )

    first = search(x0, (40 if use_outdoor else 15) * len(names))
    others = [search(first.x + shift, 15 * len(names)) for shift in _trade_offs(names)]
    result = min([first, *others], key=lambda r: float(r.fun @ r.fun))
    resid, coef, predicted = problem.solve(result.x)
    m = resid.size
    rss = float(resid @ resid)
    dof = max(1, m - len(names) - coef.size)
    s2 = rss / dof
    rho = float(np.corrcoef(resid[:-1], resid[1:])[0, 1]) if m > 3 else 0.0
    rho = min(max(rho, 0.0), 0.99)
    inflate = (1.0 + rho) / (1.0 - rho)
    jac = result.jac
    try:
        cov = np.linalg.pinv(jac.T @ jac) * s2 * inflate
        sd = np.sqrt(np.maximum(np.diag(cov), 0.0))
    except np.linalg.LinAlgError:
        sd = np.full(len(names), np.inf)
    for other in (first, *others):
        # A search from elsewhere that ends within the data's own uncertainty (chi-square,
        # one degree of freedom, 95 %) at other parameters: the data hardly tell the two
        # apart, whatever the curvature at the best says. Along a quadratic valley the
        # excess grows as (distance / sd)^2, so the distance over the root of the excess
        # is the spread (at most twice the distance: a search that stopped short of the
        # best on a flat floor has hardly any excess).
        if other is result:
            continue
        excess = (float(other.fun @ other.fun) - rss) / (s2 * inflate)
        if excess < CHI2_95_ONE_DOF:
            spread = np.abs(other.x - result.x) / math.sqrt(max(excess, 0.25))
            sd = np.maximum(sd, spread)
    params = problem.unpack(result.x)
    rel_sd = {name: float(sd[i]) for i, name in enumerate(names)}
    model = _Model(structure, params, heater_w, series.step_s)
    fit = Fit(
        structure=structure,
        params=params,
        rel_sd=rel_sd,
        rms_k=math.sqrt(rss / m),
        bic=m * math.log(rss / m) + (len(names) + coef.size) * math.log(m),
        heater_w=heater_w,
        heater_known=heater_known,
        outdoor=use_outdoor,
        mode_time_constants_s=model.time_constants,
        points=m,
        coef=coef,
        confounded=() if use_outdoor else CONFOUNDED_WITHOUT_OUTDOOR,
    )
    fit.predicted = predicted
    fit.notes.append(f"{result.nfev} evaluations")
    return fit


def _trade_offs(names: Sequence[str]) -> list[Any]:
    """Starts for second searches (shifts of the log parameters): the emitter's capacity and
    conductance doubled with the next node's halved, and the reverse. Two slow nodes (a
    screed slab and the building mass, 8.9 h and 5 h) trade capacity along a valley whose
    floor the curvature at one end does not show."""
    shifts: list[Any] = []
    if "Ce" not in names:
        return shifts
    partner = ("Cm", "Km") if "Cm" in names else ("Cr",)
    for sign in (1.0, -1.0):
        shift = np.zeros(len(names))
        for name in ("Ce", "Ke"):
            shift[names.index(name)] = sign * math.log(2.0)
        for name in partner:
            shift[names.index(name)] = -sign * math.log(2.0)
        shifts.append(shift)
    return shifts


def identify(
    history: ZoneHistory,
    *,
    heater_w: float | None,
    heating: str = "hydronic",
    structures: Sequence[str] = STRUCTURES,
    step_s: float = STEP_S,
) -> tuple[Fit, list[Fit], Series]:
    """Fit the structures richest first, stopping at the first whose parameters all have a
    small spread; the chosen fit, all fits tried, and the data. (A confounded parameter,
    the loss to outdoors without the outdoor temperature, is left out of this choice: no
    structure determines it; the chosen fit names it as not determined.)

    The chosen fit is the one with the lowest BIC whose spreads are all small, unless it fits
    more than ``REDUCED_RMS_MARGIN`` worse than the best fit tried (a reduced structure too simple
    for the room: without the outdoor temperature a single-node room fits the fast part
    "precisely" with a building time constant of an hour instead of a day). Else it is the
    best fit by BIC, with its undetermined parameters named in its notes.

    Raises :class:`IdentificationRefused` with the reasons when the data cannot support it.
    """
    reasons = check_data(history)
    if reasons:
        raise IdentificationRefused("; ".join(reasons))
    series = prepare(history, step_s=step_s)
    power = heater_w if heater_w else NOMINAL_HEATER_W
    fits: list[Fit] = []
    for structure in structures:  # richest first; stop at the first the data determine
        fit = _fit_structure(
            series, structure, power, heating, len(series.u), heater_known=heater_w is not None
        )
        fits.append(fit)
        if fit.spread_determined:
            break
    best = min(fits, key=lambda f: f.bic)
    usable = [f for f in fits if f.spread_determined and not _too_simple(f, best)]
    chosen = min(usable, key=lambda f: f.bic) if usable else best
    for f in fits:
        if f.spread_determined and _too_simple(f, best):
            chosen.notes.append(
                f"the {f.structure} structure's parameters look precise, but it fits clearly "
                f"worse (RMS {f.rms_k:.3f} K against {best.rms_k:.3f} K): a model too simple "
                "for this room, whose precision would mislead; not used"
            )
    if not chosen.determined:
        chosen.notes.append(
            "not determined by these data: "
            + ", ".join(PARAM_NAMES[name] for name in chosen.undetermined())
            + "; the figures built on them are indicative only"
        )
    if series.outdoor is None:
        chosen.notes.append(
            "without the outdoor temperature the loss to outdoors, and the building's time "
            "constant built on it, are not determined: the load fitted instead (a slow part "
            "and a daily profile) matches a loss of any size; give the site an outdoor_point, "
            "or an outdoor column in --history"
        )
    return chosen, fits, series


def _too_simple(fit: Fit, best: Fit) -> bool:
    """A reduced structure the data reject: its RMS clearly above the best fit's."""
    return fit is not best and fit.rms_k > (1.0 + REDUCED_RMS_MARGIN) * best.rms_k


def predict(fit: Fit, series: Series, fit_until: int) -> Any:
    """The fitted model's output over all of ``series``, its load held past ``fit_until``.

    The load's knot values and the initial state are those fitted on the first
    ``fit_until`` steps; knots beyond the fit keep the last fitted value.
    """
    use_outdoor = series.outdoor is not None
    hats, n_knots = _load_basis(series, use_outdoor)
    problem = _Problem(
        series, fit.structure, fit.heater_w, use_outdoor, np.isfinite(series.y), hats,
        fit_until,
    )
    coef = np.array(fit.coef, dtype=float)
    knots = coef[: hats.shape[1]].copy()
    used = np.flatnonzero(hats[:fit_until, :n_knots].sum(axis=0) > 0)
    if used.size:
        knots[used[-1] + 1 : n_knots] = knots[used[-1]]
    fixed, cols = problem.design(fit.params, len(series.u))
    full = np.concatenate([knots, coef[hats.shape[1] :]])
    return fixed + cols @ full


def fit_on(
    history: ZoneHistory, fit_until_s: float, *, heater_w: float | None, heating: str,
    structure: str = "full",
) -> tuple[Fit, Series, int]:
    """Fit one structure on the history before ``fit_until_s`` (seconds from its start)."""
    series = prepare(history)
    until = int(fit_until_s // series.step_s)
    power = heater_w if heater_w else NOMINAL_HEATER_W
    fit = _fit_structure(
        series, structure, power, heating, until, heater_known=heater_w is not None
    )
    return fit, series, until


# --------------------------------------------------------------------------- plant file


def to_plant_spec(fit: Fit, *, name: str, resolution_k: float, noise_k: float = 0.02) -> PlantSpec:
    """The identified plant as a :class:`PlantSpec` (what ``simulate --plant`` reads)."""
    p = fit.params
    data: dict[str, Any] = {
        "name": name,
        "heater_w": fit.heater_w,
        "transport_delay_s": round(p["delay_s"], 1),
        "emitter": None,
        "room": {"capacity_j_per_k": p["Cr"], "loss_w_per_k": p["H"]},
        "mass": None,
        "sensor": {
            "time_constant_s": round(p["tau_s"], 1),
            "resolution_k": resolution_k,
            "noise_k": noise_k,
        },
        "internal_gains_w": 0.0,
    }
    if "Ce" in p:
        data["emitter"] = {"capacity_j_per_k": p["Ce"], "conductance_w_per_k": p["Ke"]}
    if "Cm" in p:
        data["mass"] = {"capacity_j_per_k": p["Cm"], "conductance_w_per_k": p["Km"]}
    return PlantSpec.model_validate(data)


def unphysical(spec: PlantSpec) -> list[str]:
    """What makes an identified plant one that ``simulate --plant`` would refuse (the plant
    file's own checks, :meth:`PlantSpec.time_constant_problems`), in words for a fit: empty
    when the plant is physical."""
    from roomloop.plant.spec import MIN_NODE_TIME_CONSTANT_S, MIN_SENSOR_TIME_CONSTANT_S

    out: list[str] = []
    for path, _ in spec.time_constant_problems():
        node = path[0]
        tau = spec.node_time_constants_s()[path]
        if node == "sensor":
            out.append(
                f"a sensor lag of {tau:.3g} s is not physical (a lag is 0 or at least "
                f"{MIN_SENSOR_TIME_CONSTANT_S:g} s)"
            )
        else:
            out.append(
                f"the {node} node's time constant (capacity over its conductances) is "
                f"{tau:.3g} s, below the physical bound of {MIN_NODE_TIME_CONSTANT_S:g} s"
            )
    return out


def plant_yaml(spec: PlantSpec, fit: Fit, source: str) -> str:
    """The plant file's text, with a header saying where it came from and how well it fits."""
    lines = [
        f"# Identified by 'roomloop tune' from {source}",
        f"# structure {fit.structure}, RMS residual {fit.rms_k:.3f} K over {fit.points} points"
        + ("" if fit.heater_known else f"; heater_w unknown: nominal {fit.heater_w:.0f} W scale"),
        *(
            [
                "# not determined by these data: "
                + ", ".join(PARAM_NAMES[name] for name in fit.undetermined())
                + "; a simulation resting on them is indicative only"
            ]
            if not fit.determined
            else []
        ),
        f"name: {spec.name}",
        f"heater_w: {spec.heater_w:.6g}",
        f"transport_delay_s: {spec.transport_delay_s:.6g}",
    ]

    def sd(key: str) -> str:
        v = fit.rel_sd.get(key)
        if v is None:
            return ""
        return f"  # +- {v:.0f} s" if key == "delay_s" else f"  # +- {100 * v:.0f} %"

    lines[-1] += sd("delay_s")
    if spec.emitter is None:
        lines.append("emitter: null")
    else:
        lines += [
            "emitter:",
            f"  capacity_j_per_k: {spec.emitter.capacity_j_per_k:.6g}{sd('Ce')}",
            f"  conductance_w_per_k: {spec.emitter.conductance_w_per_k:.6g}{sd('Ke')}",
        ]
    lines += [
        "room:",
        f"  capacity_j_per_k: {spec.room.capacity_j_per_k:.6g}{sd('Cr')}",
        f"  loss_w_per_k: {spec.room.loss_w_per_k:.6g}{sd('H')}",
    ]
    if spec.mass is None:
        lines.append("mass: null")
    else:
        lines += [
            "mass:",
            f"  capacity_j_per_k: {spec.mass.capacity_j_per_k:.6g}{sd('Cm')}",
            f"  conductance_w_per_k: {spec.mass.conductance_w_per_k:.6g}{sd('Km')}",
        ]
    lines += [
        "sensor:",
        f"  time_constant_s: {spec.sensor.time_constant_s:.6g}{sd('tau_s')}",
        f"  resolution_k: {spec.sensor.resolution_k:.6g}",
        f"  noise_k: {spec.sensor.noise_k:.6g}",
        "internal_gains_w: 0",
    ]
    return "\n".join(lines) + "\n"
