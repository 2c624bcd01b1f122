"""Time for the service: one protocol, three clocks (real, paced, virtual) and helpers on it.

The service, the demo and the Modbus and broker adapters never read ``time.time()``
or call ``asyncio.sleep`` themselves: every time read, sleep, timer and timeout
goes through a :class:`Clock`, so the very same code runs

* on the :class:`RealClock` (``roomloop run``);
* on a :class:`PacedClock`, ``speed`` times faster than the wall clock (the demo's
  live view, and the ``roomloop run`` subprocess tests, which share one timeline
  with a plant in another process); waits on real peers stay on the real clock
  (:attr:`Clock.io`), since a device answers in real time however fast control runs;
* on a :class:`VirtualClock`, which stands still while anything runs and jumps to
  its next timer as soon as the event loop is idle: an hour of control costs only
  the CPU it needs, and a run is exact (the same decisions at the same instants).

The virtual clock follows trio's autojump mock clock. The loop must be an
:class:`AutojumpLoop` (``asyncio.Runner(loop_factory=AutojumpLoop)``, or the test
suite's loop factory): it watches the loop's ``select``. When nothing is ready to
run and no I/O event arrived for ``autojump_threshold_s`` of real time, the clock
jumps to its earliest timer and fires it. Real I/O still happens in real time: a
peer in the same process (the tests' pymodbus servers, the demo's plant server)
answers before the loop ever looks idle, because loopback data is readable at
once; a peer in another process (mosquitto) gets the threshold to answer. A peer
slower than that sees virtual time move on, exactly as a slow peer does on the
real clock, so a request may time out on the clock. While a bounded wait on a peer
is open (``timeout(clock.io, ...)``: every request, publish and stop budget), the
loop must be idle for the longer :data:`PEER_WAIT_THRESHOLD_S` before a jump, so
mosquitto's answers arrive first even on a busy machine; otherwise
:data:`AUTOJUMP_THRESHOLD_S` (0.5 ms) is enough. Work handed to a thread
(``asyncio.to_thread``: the state file's write; name look-ups) holds the clock
still until it ends, since its end is not a timer the clock could jump to.
"""

from __future__ import annotations

import asyncio
import contextlib
import heapq
import itertools
import math
import selectors
import time
from collections.abc import AsyncIterator, Callable, Iterator
from typing import Any, Protocol, TypeVar

_T = TypeVar("_T")


class TimerHandle(Protocol):
    """What :meth:`Clock.call_later` returns: a pending call that can be cancelled."""

    def cancel(self) -> None: ...


class Clock(Protocol):
    """Where the service gets its time from: POSIX seconds, sleeping and timers in them."""

    @property
    def kind(self) -> str:
        """How this clock runs, for the log (``real``, ``paced 60x``, ``virtual``)."""
        ...

    @property
    def io(self) -> Clock:
        """The clock that bounds and paces waits on real peers (request timeouts, retries,
        reconnects, the stop's budgets): this clock itself, except a paced clock's, which
        is the real clock (a peer answers in real time, however fast the control runs)."""
        ...

    def now(self) -> float:
        """The current time, POSIX seconds."""
        ...

    def monotonic(self) -> float:
        """Seconds on a steady scale of this clock (durations: backoff, rates, ages)."""
        ...

    async def sleep(self, seconds: float) -> None:
        """Sleep for ``seconds`` of this clock's time."""
        ...

    def call_later(self, seconds: float, callback: Callable[[], None]) -> TimerHandle:
        """Call ``callback`` (on the loop) after ``seconds`` of this clock's time."""
        ...


class RealClock:
    """The wall clock."""

    kind = "real"

    @property
    def io(self) -> Clock:
        return self

    def now(self) -> float:
        return time.time()

    def monotonic(self) -> float:
        return time.monotonic()

    async def sleep(self, seconds: float) -> None:
        await asyncio.sleep(max(0.0, seconds))

    def call_later(self, seconds: float, callback: Callable[[], None]) -> TimerHandle:
        return asyncio.get_running_loop().call_later(max(0.0, seconds), callback)


class PacedClock:
    """A clock running ``speed`` times faster than real time (the demo's live view).

    Its time is ``start + (real time - origin) * speed``: at the real instant
    ``origin`` (POSIX seconds, default: now) it reads ``start`` (default:
    ``origin``). Two processes given the same ``origin`` share one timeline, so a
    service restarted in a test continues where it left off. Real time advances on
    the monotonic clock, so this clock advances while the loop is busy, as the real
    clock does.
    """

    def __init__(
        self, speed: float, start: float | None = None, origin: float | None = None
    ) -> None:
        if not speed > 0 or math.isinf(speed):
            raise ValueError("a clock speed must be positive and finite")
        self.speed = float(speed)
        wall, mono = time.time(), time.monotonic()
        self._origin = wall if origin is None else float(origin)
        self._start = self._origin if start is None else float(start)
        # real time now, expressed on the monotonic clock
        self._mono_origin = mono - (wall - self._origin)

    @property
    def kind(self) -> str:
        return f"paced {self.speed:g}x"

    @property
    def io(self) -> Clock:
        return _REAL

    def now(self) -> float:
        return self._start + (time.monotonic() - self._mono_origin) * self.speed

    def monotonic(self) -> float:
        return self.now()

    async def sleep(self, seconds: float) -> None:
        await asyncio.sleep(max(0.0, seconds) / self.speed)

    def call_later(self, seconds: float, callback: Callable[[], None]) -> TimerHandle:
        return asyncio.get_running_loop().call_later(max(0.0, seconds) / self.speed, callback)


_REAL = RealClock()

SimulatedClock = PacedClock
"""The paced clock's round-1 name (kept for callers not yet renamed)."""


AUTOJUMP_THRESHOLD_S = 0.0005
"""Real seconds the loop must sit idle before the virtual clock jumps.

Each jump costs this much wall time. A peer in the same process answers before the
loop ever looks idle (loopback data is readable at once), so this only needs to
cover the loop's own wake-ups."""
PEER_WAIT_THRESHOLD_S = 0.05
"""Real seconds the loop must sit idle before a jump while a wait on a peer is open.

A bounded wait on a real peer (``timeout(clock.io, ...)``: a Modbus request, a
publish and its acknowledgement) holds the clock this long, so a peer in another
process (mosquitto) answers before virtual time moves on, even on a busy machine;
a peer slower than that meets virtual time as a slow peer meets real time.
"""


class _Timer:
    """One pending call of the virtual clock."""

    __slots__ = ("callback", "cancelled")

    def __init__(self, callback: Callable[[], None]) -> None:
        self.callback = callback
        self.cancelled = False

    def cancel(self) -> None:
        self.cancelled = True


class VirtualClock:
    """A clock that stands still while the loop works and jumps to its next timer when idle.

    Needs an :class:`AutojumpLoop` (see the module docstring); attaches itself to the
    running loop at construction, or at its first timer when made outside one.
    """

    kind = "virtual"

    @property
    def io(self) -> Clock:
        return self._peer_view

    def __init__(
        self,
        start: float | None = None,
        *,
        autojump_threshold_s: float = AUTOJUMP_THRESHOLD_S,
        peer_wait_threshold_s: float = PEER_WAIT_THRESHOLD_S,
        jump_during_threads: bool = False,
    ) -> None:
        if not 0 <= autojump_threshold_s <= peer_wait_threshold_s:
            raise ValueError("the autojump thresholds must be 0 <= idle <= peer wait")
        self._now = time.time() if start is None else float(start)
        self.autojump_threshold_s = float(autojump_threshold_s)
        self.peer_wait_threshold_s = float(peer_wait_threshold_s)
        self.peer_waits = 0
        """Bounded waits on real peers open now (``timeout(clock.io, ...)``)."""
        self._peer_view = _PeerWaits(self)
        self.jump_during_threads = jump_during_threads
        """False: no jump while a thread of the loop's executor works (a state file's write,
        a name look-up), since its end is not a timer. True: virtual time moves on meanwhile,
        as it would past a disk slower than the control loop."""
        self._timers: list[tuple[float, int, _Timer]] = []
        self._seq = itertools.count()
        self._loop: AutojumpLoop | None = None
        self.jumps = 0
        """How many times the clock jumped (the benchmark prints it)."""
        try:
            loop = asyncio.get_running_loop()
        except RuntimeError:  # made outside a loop: attached at its first timer
            return
        self._attach(loop)

    def _attach(self, loop: asyncio.AbstractEventLoop) -> None:
        if not isinstance(loop, AutojumpLoop):
            raise RuntimeError(
                "a VirtualClock needs an AutojumpLoop "
                "(asyncio.Runner(loop_factory=roomloop.service.clock.AutojumpLoop))"
            )
        loop.attach(self)
        self._loop = loop

    def now(self) -> float:
        return self._now

    def monotonic(self) -> float:
        return self._now

    def threshold_s(self) -> float:
        """How long the loop must be idle before the next jump (longer while a peer is awaited)."""
        return self.peer_wait_threshold_s if self.peer_waits else self.autojump_threshold_s

    def call_later(self, seconds: float, callback: Callable[[], None]) -> TimerHandle:
        if self._loop is None:
            self._attach(asyncio.get_running_loop())
        timer = _Timer(callback)
        heapq.heappush(self._timers, (self._now + max(0.0, seconds), next(self._seq), timer))
        return timer

    async def sleep(self, seconds: float) -> None:
        if seconds <= 0:
            await asyncio.sleep(0)
            return
        done = asyncio.get_running_loop().create_future()

        def wake() -> None:
            if not done.done():
                done.set_result(None)

        timer = self.call_later(seconds, wake)
        try:
            await done
        finally:
            timer.cancel()

    def advance(self, seconds: float) -> None:
        """Move the clock on by ``seconds`` at once, firing every timer due by then."""
        self._fire_until(self._now + max(0.0, seconds))

    # ------------------------------------------------------------------ the autojump

    def next_deadline(self) -> float | None:
        """The earliest pending timer's time, or None (cancelled timers are dropped)."""
        while self._timers and self._timers[0][2].cancelled:
            heapq.heappop(self._timers)
        return self._timers[0][0] if self._timers else None

    def jump(self) -> None:
        """The loop is idle: jump to the earliest timer and fire every timer due then."""
        deadline = self.next_deadline()
        if deadline is not None:
            self.jumps += 1
            self._fire_until(deadline)

    def _fire_until(self, when: float) -> None:
        self._now = max(self._now, when)
        while self._timers and self._timers[0][0] <= self._now:
            _, _, timer = heapq.heappop(self._timers)
            if not timer.cancelled:
                timer.cancelled = True
                timer.callback()


class _PeerWaits:
    """A virtual clock's ``io``: the same time and timers, and its bounded waits (the
    :func:`timeout` helper) count as waits on a peer, which hold the autojump longer."""

    kind = "virtual"

    def __init__(self, clock: VirtualClock) -> None:
        self._clock = clock

    @property
    def io(self) -> Clock:
        return self

    def now(self) -> float:
        return self._clock.now()

    def monotonic(self) -> float:
        return self._clock.monotonic()

    async def sleep(self, seconds: float) -> None:
        await self._clock.sleep(seconds)

    def call_later(self, seconds: float, callback: Callable[[], None]) -> TimerHandle:
        return self._clock.call_later(seconds, callback)

    @contextlib.contextmanager
    def waiting_on_peer(self) -> Iterator[None]:
        self._clock.peer_waits += 1
        try:
            yield
        finally:
            self._clock.peer_waits -= 1


class _IdleSelector(selectors.BaseSelector):
    """The loop's selector, noticing when the loop has been idle for the clock's threshold."""

    def __init__(self, inner: selectors.BaseSelector) -> None:
        self._inner = inner
        self.clock: VirtualClock | None = None
        self.threads = 0
        """Executor jobs in flight (``asyncio.to_thread``, ``getaddrinfo``)."""

    def register(self, fileobj: Any, events: int, data: Any = None) -> selectors.SelectorKey:
        return self._inner.register(fileobj, events, data)

    def unregister(self, fileobj: Any) -> selectors.SelectorKey:
        return self._inner.unregister(fileobj)

    def modify(self, fileobj: Any, events: int, data: Any = None) -> selectors.SelectorKey:
        return self._inner.modify(fileobj, events, data)

    def get_key(self, fileobj: Any) -> selectors.SelectorKey:
        return self._inner.get_key(fileobj)

    def get_map(self) -> Any:
        return self._inner.get_map()

    def close(self) -> None:
        self._inner.close()

    def select(self, timeout: float | None = None) -> list[tuple[selectors.SelectorKey, int]]:
        clock = self.clock
        # timeout 0: callbacks are ready; no virtual timer: nothing to jump to.
        if (
            clock is None
            or (timeout is not None and timeout <= 0)
            or (self.threads and not clock.jump_during_threads)
            or clock.next_deadline() is None
        ):
            return self._inner.select(timeout)
        threshold = clock.threshold_s()
        if timeout is not None and timeout <= threshold:
            return self._inner.select(timeout)  # a real timer is due first
        events = self._inner.select(threshold)
        if not events:
            clock.jump()  # idle for the threshold: the callbacks it schedules run next
        return events


class AutojumpLoop(asyncio.SelectorEventLoop):
    """An ordinary selector event loop that lets an attached :class:`VirtualClock` autojump."""

    def __init__(self) -> None:
        self._autojump = _IdleSelector(selectors.DefaultSelector())
        super().__init__(self._autojump)

    def attach(self, clock: VirtualClock) -> None:
        """Make ``clock`` the loop's virtual clock (one at a time: the latest wins)."""
        self._autojump.clock = clock

    def run_in_executor(  # type: ignore[override]  # same call, simpler annotation
        self, executor: Any, func: Callable[..., _T], *args: Any
    ) -> asyncio.Future[_T]:
        """asyncio's, counting the jobs in flight: the clock waits for a thread's answer as
        for a peer's (the thread's end wakes the loop like any I/O)."""
        future = super().run_in_executor(executor, func, *args)
        idle = self._autojump
        idle.threads += 1

        def finished(_: asyncio.Future[_T]) -> None:
            idle.threads -= 1

        future.add_done_callback(finished)
        return future


# ---------------------------------------------------------------------- helpers on any clock


@contextlib.asynccontextmanager
async def timeout(clock: Clock, seconds: float | None) -> AsyncIterator[None]:
    """Like ``asyncio.timeout``, in ``clock`` seconds: ``TimeoutError`` when they run out.

    asyncio's own timeout does the cancelling (and tells our cancellation from anyone
    else's); the clock only says when, by moving its deadline to now.
    """
    if seconds is None:
        yield
        return
    loop = asyncio.get_running_loop()
    waiting = getattr(clock, "waiting_on_peer", None)
    with waiting() if waiting is not None else contextlib.nullcontext():
        async with asyncio.timeout(None) as scope:
            handle = clock.call_later(seconds, lambda: scope.reschedule(loop.time()))
            try:
                yield
            finally:
                handle.cancel()


async def wait_for(clock: Clock, awaitable: Any, seconds: float) -> Any:
    """``asyncio.wait_for`` in ``clock`` seconds."""
    async with timeout(clock, seconds):
        return await awaitable


async def sleep_until(clock: Clock, when: float) -> None:
    """Sleep until the clock reads ``when`` (POSIX seconds)."""
    while True:
        left = when - clock.now()
        if left <= 0:
            return
        await clock.sleep(left)


async def sleep_or_wake(clock: Clock, seconds: float, wake: asyncio.Event) -> bool:
    """Sleep ``seconds`` of clock time or until ``wake`` is set; True if woken."""
    if wake.is_set():
        return True
    with contextlib.suppress(TimeoutError):
        async with timeout(clock, seconds):
            await wake.wait()
    return wake.is_set()


async def wait_tasks(
    clock: Clock, tasks: Any, seconds: float
) -> tuple[set[asyncio.Task[Any]], set[asyncio.Task[Any]]]:
    """``asyncio.wait(tasks, timeout=seconds)`` in clock seconds: (done, pending)."""
    tasks = set(tasks)
    if tasks:
        with contextlib.suppress(TimeoutError):
            async with timeout(clock, seconds):
                await asyncio.wait(tasks)
    done = {t for t in tasks if t.done()}
    return done, tasks - done
