"""An engine run inside this process, for the demo: the simulator, the engine, its log.

A real run lives in its own `tuikiln run --headless` process so that it outlives the screen;
the demo's simulated run is throwaway (a temporary data folder), so it runs in the screen's
own event loop and ends with it. The screen still reads it the ordinary way: the run log,
plus a `Control` that calls the engine directly instead of through the socket.
"""

from __future__ import annotations

import asyncio
from pathlib import Path
from typing import Any

from tuikiln.drivers.factory import open_device
from tuikiln.engine.host import host_engine, settings_for
from tuikiln.engine.runner import RunEngine
from tuikiln.engine.status import Status
from tuikiln.kiln import Kiln
from tuikiln.profile import Profile


class EngineControl:
    """`Control` for an engine in the same event loop."""

    def __init__(self, engine: RunEngine) -> None:
        self.engine = engine

    async def status(self) -> Status | None:
        return self.engine.status()

    async def command(self, name: str, arg: str | None = None) -> tuple[bool, str]:
        reply = self.engine.command(name, arg, source="screen")
        return bool(reply.get("ok")), str(reply.get("message", ""))

    def close(self) -> None:
        """Nothing to close: the engine is not the screen's to stop."""


def build_engine(kiln: Kiln, profile: Profile, data_dir: Path, speed: float | None, *,
                 alerts: bool = False, tick_s: float = 1.0) -> RunEngine:
    """An engine in this process, wired as `tuikiln run` wires its own (tuikiln.engine.host);
    with `alerts`, the kiln file's MQTT, hooks and channels (no terminal lines: the screen is
    the terminal). Start and stop `engine.sinks`."""
    device = open_device(kiln.device, kiln.base_dir, speed=speed)
    shown = "max" if speed is None else f"{speed:g}"
    settings = settings_for(kiln, profile, tick_s=tick_s, speed=shown)
    return host_engine(kiln, profile, device, data_dir, settings, terminal=None, alerts=alerts)


async def run_engine(engine: RunEngine) -> str:
    """Connect the device and run; the device is closed whatever happens."""
    async with engine.device:
        return await engine.run()


async def wait_for_run_id(engine: RunEngine, task: asyncio.Task[Any]) -> int:
    while engine.run_id is None:
        if task.done():
            task.result()  # raises the engine's failure
            raise RuntimeError("the engine ended before its run began")
        await asyncio.sleep(0.01)
    return engine.run_id
