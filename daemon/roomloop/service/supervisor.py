"""Supervision: restart a failed task with backoff, cancel within a bound, feed the watchdog.

Every long-running task of the service runs under :meth:`Supervisor.supervise`: if
it fails (or ends, which a loop never should) it is logged and started again after
a pause from the one backoff policy; a task that ran for a minute starts again at
the shortest pause. :func:`cancel_and_wait` is the stop's bounded cancel, and
:func:`watchdog_loop` feeds systemd's watchdog only while every zone loop beats.
"""

from __future__ import annotations

import asyncio
from collections.abc import Awaitable, Callable, Sequence

import structlog

from roomloop.backoff import Backoff
from roomloop.clock import Clock, wait_tasks
from roomloop.service.notify import Progress, notify

log = structlog.get_logger("roomloop.service")

RESTART = Backoff(0.5, 30.0)
"""Pauses before a failed task starts again (clock seconds)."""
HEALTHY_RUN_S = 60.0
"""A task that ran this long before failing starts again at the shortest pause."""


class Supervisor:
    """Restarts failed tasks; counts the restarts; tells ``on_failure`` which task failed."""

    def __init__(
        self,
        clock: Clock,
        *,
        on_failure: Callable[[str], None] | None = None,
        backoff: Backoff = RESTART,
    ) -> None:
        self.clock = clock
        self.backoff = backoff
        self.on_failure = on_failure
        self.restarts: dict[str, int] = {}
        """Restarts per task name (tests and status)."""

    async def supervise(self, name: str, body: Callable[[], Awaitable[None]]) -> None:
        """Run ``body``; if it fails or ends, log it and start it again after a growing pause."""
        delay = self.backoff.first()
        while True:
            started = self.clock.monotonic()
            try:
                await body()
            except asyncio.CancelledError:
                raise
            except Exception as exc:
                log.exception(
                    "service.task_failed", task=name, error=str(exc) or type(exc).__name__
                )
            else:
                log.error("service.task_ended", task=name)
            if self.on_failure is not None:
                self.on_failure(name)
            if self.clock.monotonic() - started > HEALTHY_RUN_S:
                delay = self.backoff.first()
            self.restarts[name] = self.restarts.get(name, 0) + 1
            log.info("service.task_restarting", task=name, in_s=delay)
            await self.clock.sleep(delay)
            delay = self.backoff.after(delay)


async def cancel_and_wait(
    clock: Clock, tasks: Sequence[asyncio.Task[None]], within_s: float
) -> None:
    """Cancel ``tasks`` and wait for them, cancelling again any that swallowed the request.

    A library's own ``wait_for`` can lose a cancellation that arrives just as its reply
    does (seen with pymodbus on Python 3.11), which left a poll task running and the
    stop waiting forever. Here the wait is bounded and the request repeated; whatever
    still runs after ``within_s`` is named in the log, and the stop goes on regardless.
    """
    deadline = clock.monotonic() + within_s
    pending = {task for task in tasks if not task.done()}
    while pending:
        for task in pending:
            task.cancel()
        left = deadline - clock.monotonic()
        if left <= 0:
            log.error(
                "service.tasks_not_stopping",
                tasks=sorted(task.get_name() for task in pending),
                within_s=within_s,
            )
            return
        _, pending = await wait_tasks(clock, pending, min(0.25, left))


async def watchdog_loop(progress: Progress, clock: Clock, interval_s: float) -> None:
    """WATCHDOG=1 every ``interval_s`` while no zone loop is stuck; a stuck one is logged."""
    while True:
        stuck = progress.stuck()
        if stuck:
            log.error("service.loops_stuck", loops=stuck)
        else:
            notify("WATCHDOG=1")
        await clock.sleep(interval_s)
