"""Waiting on a condition instead of sleeping a fixed time.

`wait_until(check)` and `await eventually(check)` call `check` until it returns something
true and give that back; after `timeout` seconds they fail the test saying what was awaited.
The poll interval is short so a test waits only as long as the thing it waits for takes
(`every` makes it longer for a check that costs, such as opening a database).
`await writable(fd)` waits for room in a pipe or pty (the loop tells, no polling).

A pause that is not a wait but part of what a test does (pacing a fake device, a ticker
that measures the event loop, real time passing so a timeout can fire) is
`let_time_pass(seconds, why)` or `await time_passes(seconds, why)`: the only fixed sleeps in
tests/ outside tests/bench/, each with its reason (tests/test_house.py checks there are no
others).
"""

from __future__ import annotations

import asyncio
import time
from collections.abc import Awaitable, Callable
from typing import TypeVar

T = TypeVar("T")

POLL_S = 0.01


def wait_until(check: Callable[[], T], timeout: float = 10.0, what: str = "the condition",
               every: float = POLL_S) -> T:
    """`check()` once it is true (blocking); AssertionError after `timeout` seconds."""
    deadline = time.monotonic() + timeout
    while True:
        result = check()
        if result:
            return result
        if time.monotonic() > deadline:
            raise AssertionError(f"waited {timeout:g} s for {what}")
        time.sleep(every)


def alive(pid: int) -> bool:
    """The process runs (a zombie, dead but not yet reaped, counts as gone)."""
    try:
        with open(f"/proc/{pid}/stat") as handle:
            return handle.read().rsplit(")", 1)[1].split()[0] != "Z"
    except FileNotFoundError:
        return False


async def eventually(check: Callable[[], T | Awaitable[T]], timeout: float = 10.0,
                     what: str = "the condition", every: float = POLL_S) -> T:
    """`check()` once it is true, awaiting it if it is a coroutine; the loop keeps running."""
    deadline = time.monotonic() + timeout
    while True:
        result = check()
        if asyncio.iscoroutine(result) or isinstance(result, asyncio.Future):
            result = await result
        if result:
            return result  # type: ignore[return-value]
        if time.monotonic() > deadline:
            raise AssertionError(f"waited {timeout:g} s for {what}")
        await asyncio.sleep(every)


async def writable(fd: int, timeout: float = 10.0, what: str = "room to write") -> None:
    """Returns once a write to `fd` (non-blocking) would take bytes; the loop runs meanwhile."""
    loop = asyncio.get_running_loop()
    ready = loop.create_future()
    loop.add_writer(fd, lambda: ready.done() or ready.set_result(None))
    try:
        await asyncio.wait_for(ready, timeout)
    except TimeoutError:
        raise AssertionError(f"waited {timeout:g} s for {what}") from None
    finally:
        loop.remove_writer(fd)


def _reason(seconds: float, why: str) -> None:
    if seconds < 0 or not why.strip():
        raise ValueError("a fixed pause needs a length of 0 s or more and a reason")


def let_time_pass(seconds: float, why: str) -> None:
    """Real time passes on purpose (blocking): part of what the test does, not a wait."""
    _reason(seconds, why)
    time.sleep(seconds)


async def time_passes(seconds: float, why: str) -> None:
    """Real time passes on purpose while the loop runs (0: other tasks get their turn)."""
    _reason(seconds, why)
    await asyncio.sleep(seconds)
