"""The journal's zone events: each transition logged once, nothing on a quiet step.

The controller is the real one (core), stepped through the situations a site meets;
the events are compared with what happened.
"""

from __future__ import annotations

import dataclasses

from roomloop.core.controller import ZoneController
from roomloop.core.settings import ZoneSettings
from roomloop.core.state import ZoneState
from roomloop.core.types import PointSample, ZoneInputs, ZoneOutputs
from roomloop.service.events import ZoneEvent, zone_events

T0 = 1_800_000_000.0


class Zone:
    """A real controller stepped like the service steps it, collecting the events."""

    def __init__(self, **overrides: object) -> None:
        settings = ZoneSettings.for_heating_type("electric")
        self.settings = dataclasses.replace(settings, **overrides)  # type: ignore[arg-type]
        self.controller = ZoneController(self.settings)
        self.state: ZoneState = self.controller.initial_state(T0)
        self.outputs: ZoneOutputs | None = None
        self.now = T0
        self.name = self.settings.inputs[0].name

    def step(
        self, value: float | None, level: str = "comfort", dt: float = 10.0
    ) -> list[ZoneEvent]:
        self.now += dt
        sample = PointSample(self.name, value, self.now if value is not None else None,
                             "ok" if value is not None else "comm-failure")
        before, previous = self.state, self.outputs
        inputs = ZoneInputs(samples=(sample,), scheduled_level=level)  # type: ignore[arg-type]
        self.state, self.outputs = self.controller.step(before, inputs, self.now)
        return zone_events(
            "studio", now=self.now, before=before, after=self.state,
            previous=previous, outputs=self.outputs,
        )


def names(events: list[ZoneEvent]) -> list[str]:
    return [e.event for e in events]


def test_a_quiet_zone_logs_nothing() -> None:
    zone = Zone()
    zone.step(20.0)
    assert all(zone.step(20.0 + 0.01 * k) == [] for k in range(100))


def test_a_silent_sensor_logs_unreliable_then_fail_safe_then_both_recoveries() -> None:
    zone = Zone(sensor_timeout_s=60.0, fail_safe_recovery_s=30.0)
    zone.step(19.0)
    seen: list[ZoneEvent] = []
    for _ in range(20):
        seen += zone.step(None)
    assert names(seen) == ["zone.point_unreliable", "zone.fail_safe_engaged"]
    assert seen[0].level == "warning" and seen[0].fields["reliability"] == "comm-failure"
    engaged = seen[1]
    assert engaged.level == "warning" and engaged.fields["policy"] == zone.settings.fail_safe_policy
    assert "no reliable temperature" in str(engaged.fields["reason"])
    seen = []
    for _ in range(10):
        seen += zone.step(19.5)
    assert names(seen) == ["zone.point_recovered", "zone.fail_safe_ended"]
    assert seen[0].fields["was"] == "comm-failure"


def test_a_hold_that_expires_and_a_program_switch_are_logged_once() -> None:
    zone = Zone()
    zone.step(20.0)
    zone.state = dataclasses.replace(
        zone.state, mode="hold", hold_setpoint=22.0, hold_until=zone.now + 25.0
    )
    assert zone.step(20.0) == []
    assert zone.step(20.0) == []
    expired = zone.step(20.0)
    assert names(expired) == ["zone.hold_expired"] and expired[0].fields["mode"] == "auto"
    assert zone.step(20.0) == []
    switched = zone.step(20.0, level="economy")
    assert names(switched) == ["zone.program_switched"]
    assert switched[0].fields == {
        "zone": "studio", "level_from": "comfort", "level_to": "economy", "applies": True
    }
    assert zone.step(20.0, level="economy") == []


def test_a_fresh_start_in_standby_is_no_program_switch_but_the_next_change_is() -> None:
    zone = Zone()  # no state file: the initial state's level is the default, comfort
    assert zone.state.scheduled_level == "comfort"
    first = zone.step(20.0, level="standby")
    assert "zone.program_switched" not in names(first), first
    assert zone.state.scheduled_level == "standby"
    switched = zone.step(20.0, level="comfort")
    assert names(switched) == ["zone.program_switched"]
    assert switched[0].fields["level_from"] == "standby"


def test_a_zone_that_ran_before_a_restart_logs_the_program_moving_on_at_its_first_step() -> None:
    ran = Zone()
    ran.step(20.0)
    ran.step(20.0)  # it ran at comfort
    restarted = Zone()
    restarted.state, restarted.now = ran.state, ran.now + 600.0  # the saved state, resumed
    switched = restarted.step(20.0, level="standby")
    assert names(switched) == ["zone.program_switched"]
    assert (switched[0].fields["level_from"], switched[0].fields["level_to"]) == (
        "comfort", "standby"
    )


def test_frost_protection_runs_are_logged_at_start_and_end() -> None:
    zone = Zone()
    protection = zone.settings.protection_c
    zone.step(protection + 1.0)
    zone.state = dataclasses.replace(zone.state, mode="off")
    seen: list[ZoneEvent] = []
    # a slow cooling below the protection set point and a slow warming past it
    for k in range(100):
        seen += zone.step(protection + 1.0 - 0.02 * k)
    assert names(seen) == ["zone.protection_running"] and seen[0].level == "warning"
    seen = []
    for k in range(200):
        seen += zone.step(protection - 1.0 + 0.02 * k)
    assert names(seen) == ["zone.protection_ended"]
