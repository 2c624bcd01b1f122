"""The plant simulation: a three-node RC network, a transport delay and a sensor.

Nodes (temperatures in C): emitter ``Te``, room air ``Tr``, building mass ``Tm``,
and the sensor's lagged view of the room ``Ts``::

    Ce dTe/dt = q(t - delay) - Phi(Te - Tr)
    Cr dTr/dt = Phi(Te - Tr) + gains - L (Tr - To) - Km (Tr - Tm)
    Cm dTm/dt = Km (Tr - Tm)
    tau_s dTs/dt = Tr - Ts

``Phi`` is linear (``K dT``) or the EN 442 law ``Phi_n (dT / 50) ** n``. The heat
input ``q`` is ``heater_w`` while the heating call is on, ``-cooler_w`` while the cooling
call is on (a plant with ``cooler_w``), 0 otherwise; ``gains`` are the plant's
``internal_gains_w`` plus the ``extra_gains_w`` a protocol sets (the solar and internal
gains a cooler must remove). ``q`` is piecewise constant: the calls are held over a tick
and their effect arrives ``transport_delay_s`` later, so every change of ``q`` is split out exactly
and the smooth pieces in between are integrated with classical Runge-Kutta
(RK4), sub-stepped so that ``h * lambda_max <= 0.5`` for the stiffest node
(Gershgorin bound on the Jacobian). That keeps RK4 far inside its stability
region and its error far below the sensor's resolution at any tick length (the
test against scipy's solve_ivp shows it). Pure Python: no numpy on the runtime path.
"""

from __future__ import annotations

import math
import random
from collections import deque
from collections.abc import Callable

from roomloop.plant.spec import PlantSpec

_Nodes = tuple[float, float, float, float]
"""Emitter, room, mass and sensor: temperatures or their derivatives."""

STABILITY_FACTOR = 0.5
"""Largest h * lambda_max of a Runge-Kutta sub-step (RK4 is stable up to about 2.8)."""
MIN_SUBSTEP_S = 0.05
"""Smallest sub-step the model takes: at most 20 RK4 steps per simulated second."""


class PlantSimulation:
    """One plant in time: advance it tick by tick with the relay state, read its sensor."""

    def __init__(
        self,
        spec: PlantSpec,
        *,
        outdoor_c: float,
        room_c: float = 20.0,
        emitter_c: float | None = None,
        mass_c: float | None = None,
        seed: int = 1,
        start_s: float = 0.0,
    ) -> None:
        self.spec = spec
        self.outdoor_c = outdoor_c
        self.time_s = start_s
        self.room_c = room_c
        self.emitter_c = room_c if emitter_c is None else emitter_c
        self.mass_c = room_c if mass_c is None else mass_c
        self.sensor_state_c = room_c
        self._rng = random.Random(seed)
        self.extra_gains_w = 0.0
        """Gains beyond ``internal_gains_w`` (W), set by a protocol (as ``outdoor_c``)."""
        self._commanded: tuple[bool, bool] = (False, False)
        self._heat_on = False
        self._cool_on = False
        self._pending: deque[tuple[float, bool, bool]] = deque()
        self._h_max = _max_substep_s(spec)
        emitter = spec.emitter
        self._has_emitter = emitter is not None
        self._ce = emitter.capacity_j_per_k if emitter is not None else 1.0
        self._linear = emitter is None or emitter.is_linear
        self._ke = (
            emitter.conductance_w_per_k
            if emitter is not None and emitter.conductance_w_per_k is not None
            else 0.0
        )
        self._phi_n = (
            emitter.rated_output_w if emitter is not None and emitter.rated_output_w else 0.0
        )
        self._n = emitter.exponent if emitter is not None and emitter.exponent else 1.0
        mass = spec.mass
        self._has_mass = mass is not None
        self._cm = mass.capacity_j_per_k if mass is not None else 1.0
        self._km = mass.conductance_w_per_k if mass is not None else 0.0
        self._tau_s = spec.sensor.time_constant_s

    @classmethod
    def at_steady_state(
        cls,
        spec: PlantSpec,
        *,
        load: float,
        room_c: float = 20.0,
        seed: int = 1,
        start_s: float = 0.0,
    ) -> PlantSimulation:
        """Every node at the steady state of ``room_c`` with the heater covering ``load``.

        DESIGN.md: the emitter sits at its mean temperature for that output.
        """
        excess = spec.emitter_excess_for_output_k(load * spec.heater_w) if spec.emitter else 0.0
        return cls(
            spec,
            outdoor_c=spec.outdoor_for_load_c(load, room_c),
            room_c=room_c,
            emitter_c=room_c + excess,
            mass_c=room_c,
            seed=seed,
            start_s=start_s,
        )

    @classmethod
    def at_cooling_steady_state(
        cls,
        spec: PlantSpec,
        *,
        load: float,
        room_c: float,
        outdoor_c: float,
        seed: int = 1,
        start_s: float = 0.0,
    ) -> PlantSimulation:
        """Every node at the steady state of ``room_c`` with the cooler removing ``load`` of its
        capacity: the extra gains set so (:meth:`PlantSpec.cooling_gains_for_load_w`), the
        emitter below the room by the excess its law needs for that output."""
        if spec.cooler_w is None:
            raise ValueError(f"plant {spec.name!r} has no cooler_w: it cannot cool")
        excess = spec.emitter_excess_for_output_k(load * spec.cooler_w) if spec.emitter else 0.0
        sim = cls(
            spec,
            outdoor_c=outdoor_c,
            room_c=room_c,
            emitter_c=room_c - excess,
            mass_c=room_c,
            seed=seed,
            start_s=start_s,
        )
        sim.extra_gains_w = spec.cooling_gains_for_load_w(load, room_c, outdoor_c)
        return sim

    # ------------------------------------------------------------------ reading

    def read_sensor(self) -> float:
        """The sensor's reading: lagged room air, plus seeded noise, rounded to the resolution."""
        sensor = self.spec.sensor
        value = self.sensor_state_c if self._tau_s > 0 else self.room_c
        if sensor.noise_k > 0:
            value += self._rng.gauss(0.0, sensor.noise_k)
        if sensor.resolution_k > 0:
            value = round(round(value / sensor.resolution_k) * sensor.resolution_k, 6)
        return value

    @property
    def heat_input_w(self) -> float:
        """Heat reaching the emitter now (the calls' state one transport delay ago): the
        heater's output while heating, minus the cooler's capacity while cooling."""
        return self._input_w()

    def _input_w(self) -> float:
        q = self.spec.heater_w if self._heat_on else 0.0
        if self._cool_on:
            cooler = self.spec.cooler_w
            if cooler is None:
                raise ValueError(f"plant {self.spec.name!r} has no cooler_w: it cannot cool")
            q -= cooler
        return q

    # ------------------------------------------------------------------ time

    def advance(self, dt_s: float, relay_on: bool, cooling_on: bool = False) -> None:
        """Hold the heating call at ``relay_on`` and the cooling call at ``cooling_on`` for
        ``dt_s`` seconds; heat (or cooling) follows after the delay.

        A cooling call on a plant without ``cooler_w`` is a ``ValueError``.
        """
        if dt_s < 0:
            raise ValueError("time runs forward only")
        if cooling_on and self.spec.cooler_w is None:
            raise ValueError(f"plant {self.spec.name!r} has no cooler_w: it cannot cool")
        calls = (relay_on, cooling_on)
        if calls != self._commanded:
            self._commanded = calls
            self._pending.append((self.time_s + self.spec.transport_delay_s, *calls))
        end = self.time_s + dt_s
        while self._pending and self._pending[0][0] <= end:
            when, heat_on, cool_on = self._pending.popleft()
            if when > self.time_s:
                self._integrate(when - self.time_s)
                self.time_s = when
            self._heat_on = heat_on
            self._cool_on = cool_on
        if end > self.time_s:
            self._integrate(end - self.time_s)
        self.time_s = end

    def _integrate(self, duration: float) -> None:
        """RK4 over ``duration`` with the heat input constant; enough sub-steps for stability."""
        steps = max(1, math.ceil(duration / self._h_max - 1e-9))
        h = duration / steps
        deriv = self._derivative()
        inv_tau_s = 1.0 / self._tau_s if self._tau_s > 0 else 0.0
        te, tr, tm, ts = self.emitter_c, self.room_c, self.mass_c, self.sensor_state_c
        half = 0.5 * h
        sixth = h / 6.0
        for _ in range(steps):
            a1, b1, c1, d1 = deriv(te, tr, tm, ts)
            a2, b2, c2, d2 = deriv(te + half * a1, tr + half * b1, tm + half * c1, ts + half * d1)
            a3, b3, c3, d3 = deriv(te + half * a2, tr + half * b2, tm + half * c2, ts + half * d2)
            a4, b4, c4, d4 = deriv(te + h * a3, tr + h * b3, tm + h * c3, ts + h * d3)
            te += sixth * (a1 + 2.0 * a2 + 2.0 * a3 + a4)
            tr += sixth * (b1 + 2.0 * b2 + 2.0 * b3 + b4)
            tm += sixth * (c1 + 2.0 * c2 + 2.0 * c3 + c4)
            ts += sixth * (d1 + 2.0 * d2 + 2.0 * d3 + d4)
        if not self._has_emitter:
            te = tr
        if not self._has_mass:
            tm = tr
        if inv_tau_s == 0.0:
            ts = tr
        self.emitter_c, self.room_c, self.mass_c, self.sensor_state_c = te, tr, tm, ts

    def _derivative(self) -> Callable[[float, float, float, float], _Nodes]:
        """The nodes' time derivatives at the heat input of now, with the plant's constants
        bound into the closure (what keeps the RK4 loop cheap)."""
        q = self._input_w()
        gains = self.spec.internal_gains_w + self.extra_gains_w
        to = self.outdoor_c
        loss = self.spec.room.loss_w_per_k
        inv_cr = 1.0 / self.spec.room.capacity_j_per_k
        inv_ce = 1.0 / self._ce
        inv_cm = 1.0 / self._cm
        km = self._km
        ke = self._ke
        linear = self._linear
        phi_n = self._phi_n
        n = self._n
        has_emitter = self._has_emitter
        inv_tau_s = 1.0 / self._tau_s if self._tau_s > 0 else 0.0
        direct = 0.0 if has_emitter else q

        def deriv(te: float, tr: float, tm: float, ts: float) -> _Nodes:
            if has_emitter:
                dt_e = te - tr
                if linear:
                    phi = ke * dt_e
                elif dt_e >= 0.0:
                    phi = phi_n * (dt_e * 0.02) ** n
                else:
                    phi = -phi_n * (-dt_e * 0.02) ** n
                d_te = (q - phi) * inv_ce
            else:
                phi = direct
                d_te = 0.0
            d_tr = (phi + gains - loss * (tr - to) - km * (tr - tm)) * inv_cr
            d_tm = km * (tr - tm) * inv_cm
            d_ts = (tr - ts) * inv_tau_s
            return d_te, d_tr, d_tm, d_ts

        return deriv


def _max_substep_s(spec: PlantSpec) -> float:
    """Largest RK4 step with ``h * lambda_max <= STABILITY_FACTOR`` for this plant.

    ``lambda_max`` is bounded by Gershgorin's theorem: twice the largest row sum of the
    conductances over the capacity, i.e. twice the inverse of the fastest node's time
    constant (an EN 442 emitter linearised at its steepest point in use, see
    :meth:`PlantSpec.emitter_slope_w_per_k`).

    Last guard: a spec so stiff that the step would fall below ``MIN_SUBSTEP_S`` (the
    plant file loader refuses such files first) is refused here, so the number of
    sub-steps per simulated second stays bounded.
    """
    fastest = min(spec.node_time_constants_s().values())
    h = STABILITY_FACTOR * fastest / 2.0
    if h < MIN_SUBSTEP_S:
        raise ValueError(
            f"plant {spec.name!r}: a node time constant of {fastest:.3g} s is too short to "
            f"simulate (stable step {h:.3g} s < {MIN_SUBSTEP_S:g} s)"
        )
    return h
