"""Benchmark: a run log another process holds locked for 40 s, against a real-time engine.

    .venv/bin/python tests/bench/log_lock.py [--quick] [--json]

A second process opens the run log and holds `BEGIN EXCLUSIVE` for 40 s (10 s with --quick)
while the engine runs drivers/fake.py's first-order oven in real time at 10 ticks a second.
Two cases: the lock comes and goes in the middle of the run; the run ends (an abort) while
the lock is held, so its end must wait for the lock too. Figures: samples lost (ticks that
never reached the log), the longest stall of the event loop (a 10 ms heartbeat's worst
lateness) and ticks taken while the lock was held. Targets: 0 lost, stall <= 100 ms.
"""

from __future__ import annotations

import asyncio
import json
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

from tuikiln.drivers.fake import FirstOrderOven, ScriptedDevice
from tuikiln.engine.runner import KilnInfo, RunEngine, RunSettings
from tuikiln.limits import Limits
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog

TICK_S = 0.1
TARGET_STALL_S = 0.100
PROFILE = """
name = "bench hold"
units = "C"
[[step]]
ramp = "max"
to = 400
[[step]]
hold = "10h"
"""
HOLDER = """
import sqlite3, sys, time
conn = sqlite3.connect(sys.argv[1], isolation_level=None, timeout=30)
conn.execute("BEGIN EXCLUSIVE")
print("locked", flush=True)
time.sleep(float(sys.argv[2]))
conn.rollback()
"""


class RealTimeClock:
    """Wall time that also moves the oven model (drivers/fake.py's models follow a clock)."""

    def __init__(self) -> None:
        self._listeners: list[Callable[[float], None]] = []
        self._last = time.time()

    def now(self) -> float:
        return time.time()

    def on_advance(self, listener: Callable[[float], None]) -> None:
        self._listeners.append(listener)

    async def sleep(self, seconds: float) -> None:
        await asyncio.sleep(max(0.0, seconds))
        now = time.time()
        for listener in self._listeners:
            listener(now - self._last)
        self._last = now


async def heartbeat(worst: list[float], stop: asyncio.Event) -> None:
    while not stop.is_set():
        start = time.perf_counter()
        await asyncio.sleep(0.01)
        worst[0] = max(worst[0], time.perf_counter() - start - 0.01)


async def one_case(folder: Path, lock_s: float, end_inside: bool) -> dict[str, float]:
    log = RunLog.in_folder(folder)
    device = ScriptedDevice(model=FirstOrderOven(tau_s=60.0), clock=RealTimeClock())  # type: ignore[arg-type]
    engine = RunEngine(device, parse_profile(PROFILE, "bench.toml", max_c=1100.0),
                       RunSettings(KilnInfo("Bench oven", "C", 1100.0), Limits(), tick_s=TICK_S),
                       runlog=log)
    worst = [0.0]
    stop = asyncio.Event()
    beat = asyncio.create_task(heartbeat(worst, stop))
    running = asyncio.create_task(engine.run())
    await asyncio.sleep(2.0)  # the run under way, the log written
    holder = await asyncio.create_subprocess_exec(
        sys.executable, "-c", HOLDER, str(log.path), str(lock_s),
        stdout=asyncio.subprocess.PIPE)
    assert holder.stdout is not None
    await holder.stdout.readline()  # "locked"
    ticks_at_lock = engine.ticks
    await asyncio.sleep(lock_s / 4 if end_inside else lock_s)
    ticks_locked = engine.ticks - ticks_at_lock
    if end_inside:
        engine.command("abort", "bench over", "socket")
    else:
        await holder.wait()
        await asyncio.sleep(2.0)
        engine.command("abort", "bench over", "socket")
    await running
    await holder.wait()
    stop.set()
    await beat
    taken = engine.ticks + 1  # every tick logs one sample, the last one too
    logged = log.sample_count(engine.run_id or 0)
    log.close()
    return {"lost": taken - logged, "stall_s": worst[0], "ticks_locked": ticks_locked}


def run(quick: bool = False) -> dict[str, dict]:
    lock_s = 10.0 if quick else 40.0
    out: dict[str, dict] = {}
    for name, end_inside in (("mid_run", False), ("end_in_lock", True)):
        with tempfile.TemporaryDirectory() as folder:
            figures = asyncio.run(one_case(Path(folder), lock_s, end_inside))
        out[f"{name}_samples_lost"] = {"value": figures["lost"], "unit": "samples",
                                       "target": 0, "ok": figures["lost"] == 0}
        out[f"{name}_loop_stall_ms"] = {
            "value": round(figures["stall_s"] * 1000, 1), "unit": "ms",
            "target": TARGET_STALL_S * 1000, "ok": figures["stall_s"] <= TARGET_STALL_S}
        out[f"{name}_ticks_while_locked"] = {"value": figures["ticks_locked"], "unit": "ticks",
                                             "target": None, "ok": True}
    out["lock_s"] = {"value": lock_s, "unit": "s", "target": None, "ok": True}
    return out


if __name__ == "__main__":
    result = run(quick="--quick" in sys.argv)
    if "--json" in sys.argv:
        print(json.dumps(result, indent=2))
    else:
        for name, figure in result.items():
            target = "" if figure["target"] is None else f" (target {figure['target']:g})"
            print(f"{name:30} {figure['value']:>10} {figure['unit']}{target}  "
                  f"{'ok' if figure['ok'] else 'MISSED'}")
