"""Waiting on a condition instead of sleeping a fixed time.

`wait_until(check)` and `await eventually(check)` call `check` until it returns something
true and give that back; after `timeout` seconds they fail the test saying what was awaited.
The poll interval is short so a test waits only as long as the thing it waits for takes.
"""

from __future__ import annotations

import asyncio
import time
from collections.abc import Awaitable, Callable
from typing import TypeVar

T = TypeVar("T")

POLL_S = 0.01


def wait_until(check: Callable[[], T], timeout: float = 10.0, what: str = "the condition") -> T:
    """`check()` once it is true (blocking); AssertionError after `timeout` seconds."""
    deadline = time.monotonic() + timeout
    while True:
        result = check()
        if result:
            return result
        if time.monotonic() > deadline:
            raise AssertionError(f"waited {timeout:g} s for {what}")
        time.sleep(POLL_S)


def alive(pid: int) -> bool:
    """The process runs (a zombie, dead but not yet reaped, counts as gone)."""
    try:
        with open(f"/proc/{pid}/stat") as handle:
            return handle.read().rsplit(")", 1)[1].split()[0] != "Z"
    except FileNotFoundError:
        return False


async def eventually(check: Callable[[], T | Awaitable[T]], timeout: float = 10.0,
                     what: str = "the condition") -> T:
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
        await asyncio.sleep(POLL_S)
