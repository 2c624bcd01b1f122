"""The clocks of roomloop/clock.py: the virtual clock's autojump, timeouts on any clock.

The async tests run on the suite's AutojumpLoop (tests/conftest.py).
"""

from __future__ import annotations

import asyncio
import threading
import time

import pytest

from roomloop.clock import (
    AutojumpLoop,
    PacedClock,
    RealClock,
    VirtualClock,
    sleep_or_wake,
    sleep_until,
    timeout,
    wait_for,
    wait_tasks,
)


async def test_the_virtual_clock_jumps_to_each_timer_and_fires_them_in_order() -> None:
    clock = VirtualClock(start=1000.0)
    seen: list[tuple[str, float]] = []

    async def loop(name: str, every_s: float, times: int) -> None:
        for _ in range(times):
            await clock.sleep(every_s)
            seen.append((name, clock.now()))

    await asyncio.gather(loop("tick", 10.0, 6), loop("poll", 15.0, 4))
    # Exact instants, no matter how long the loop took in real time.
    assert [t for name, t in seen if name == "tick"] == [1010.0 + 10 * i for i in range(6)]
    assert [t for name, t in seen if name == "poll"] == [1015.0 + 15 * i for i in range(4)]
    assert clock.now() == 1060.0
    assert clock.jumps == 8  # 10, 15, 20, 30 (both), 40, 45, 50, 60 (both)


async def test_timeouts_and_waits_count_in_clock_seconds() -> None:
    clock = VirtualClock(start=0.0)
    with pytest.raises(TimeoutError):
        async with timeout(clock, 3.0):
            await clock.sleep(100.0)
    assert clock.now() == 3.0
    assert await wait_for(clock, asyncio.sleep(0, result="done"), 1.0) == "done"
    wake = asyncio.Event()
    clock.call_later(2.0, wake.set)
    assert await sleep_or_wake(clock, 60.0, wake) is True
    assert clock.now() == 5.0
    assert await sleep_or_wake(clock, 4.0, asyncio.Event()) is False
    assert clock.now() == 9.0
    await sleep_until(clock, 30.0)
    assert clock.now() == 30.0
    task = asyncio.create_task(clock.sleep(50.0))
    done, pending = await wait_tasks(clock, [task], 20.0)
    assert (done, pending) == (set(), {task}) and clock.now() == 50.0
    task.cancel()


async def test_the_virtual_clock_stands_still_while_a_thread_works() -> None:
    clock = VirtualClock(start=0.0)
    release = threading.Event()
    ticker = asyncio.create_task(clock.sleep(1.0))  # a timer the clock could jump to
    work = asyncio.create_task(asyncio.to_thread(release.wait, 5.0))
    await asyncio.sleep(0.05)  # real time: the loop is idle, the thread holds the clock
    assert clock.now() == 0.0 and not ticker.done()
    release.set()
    assert await work is True
    await ticker
    assert clock.now() == 1.0


async def test_the_virtual_clock_waits_for_a_loopback_round_trip_in_the_same_loop() -> None:
    """A peer in the same process answers before the loop looks idle: no time passes."""
    clock = VirtualClock(start=0.0)

    async def echo(reader: asyncio.StreamReader, writer: asyncio.StreamWriter) -> None:
        writer.write(await reader.readline())
        await writer.drain()
        writer.close()

    server = await asyncio.start_server(echo, "127.0.0.1", 0)
    port = server.sockets[0].getsockname()[1]
    background = asyncio.create_task(clock.sleep(3600.0))  # a far timer to jump to
    try:
        for _ in range(20):
            reader, writer = await asyncio.open_connection("127.0.0.1", port)
            writer.write(b"ping\n")
            assert await reader.readline() == b"ping\n"
            writer.close()
        assert clock.now() == 0.0
    finally:
        background.cancel()
        server.close()
        await server.wait_closed()


def test_a_virtual_clock_needs_the_autojump_loop() -> None:
    async def make() -> None:
        VirtualClock()

    loop = asyncio.new_event_loop()
    try:
        with pytest.raises(RuntimeError, match="AutojumpLoop"):
            loop.run_until_complete(make())
    finally:
        loop.close()
    with asyncio.Runner(loop_factory=AutojumpLoop) as runner:
        runner.run(make())


async def test_a_paced_clock_runs_faster_but_waits_on_peers_in_real_time() -> None:
    clock = PacedClock(600.0, start=0.0)
    assert isinstance(clock.io, RealClock)
    started = time.monotonic()
    await clock.sleep(60.0)  # 0.1 s real
    real = time.monotonic() - started
    assert 0.09 <= real < 2.0
    assert clock.now() == pytest.approx(real * 600.0, rel=0.2)
    with pytest.raises(ValueError, match="positive"):
        PacedClock(0.0)


async def test_a_wait_on_a_peer_holds_the_clock_longer_than_a_control_wait() -> None:
    """A bounded wait on ``clock.io`` gives a slow peer (here: 10 ms of real time) the
    longer threshold to answer; the same wait on the control clock is overtaken."""
    clock = VirtualClock(start=0.0)
    loop = asyncio.get_running_loop()

    def answer_in_10_ms() -> asyncio.Future[str]:
        future: asyncio.Future[str] = loop.create_future()
        loop.call_later(0.01, future.set_result, "answer")  # the peer, in real time
        return future

    assert await wait_for(clock.io, answer_in_10_ms(), 1.0) == "answer"
    assert clock.now() == 0.0
    with pytest.raises(TimeoutError):
        await wait_for(clock, answer_in_10_ms(), 1.0)
    assert clock.now() == 1.0
