"""Benchmark: the whole engine (rules, alarms, equalization, run log) on the in-process
simulator, following a 24 h profile as fast as it goes.

    .venv/bin/python tests/bench/engine_speed.py [--quick]

Target: at least 10,000 simulated seconds per wall second, so a day's run replays or tests
in under ten seconds. `run(quick)` returns {figure: {value, unit, target, ok}}.
"""

from __future__ import annotations

import asyncio
import sys
import tempfile
import time
from pathlib import Path

from drivers.factory import open_device
from tuikiln.engine.runner import KilnInfo, RunEngine
from tuikiln.limits import Limits
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog

DAY = """
name = "24 h bench"
units = "C"
[load]
material = "AISI D2"
thickness = "6 mm"
[[step]]
ramp = "300/h"
to = 650
[[step]]
hold = "1h"
start = "equalized"
[[step]]
ramp = "200/h"
to = 1010
[[step]]
hold = "{hold}"
start = "equalized"
[[step]]
cool = "100/h"
to = 500
[[step]]
hold = "2h"
[[step]]
cool = "free"
to = 200
"""
TARGET_SIM_S_PER_WALL_S = 10_000.0


async def _one(quick: bool) -> dict[str, float]:
    text = DAY.format(hold="30m" if quick else "14h")
    profile = parse_profile(text, "bench.toml")
    device = open_device({"kind": "sim", "seed": 3}, ".", speed=0.0)
    with tempfile.TemporaryDirectory() as folder:
        log = RunLog.in_folder(Path(folder))
        async with device:
            engine = RunEngine(device, profile, kiln=KilnInfo("bench", "C", 1200.0),
                               limits=Limits(), runlog=log)
            wall = time.perf_counter()
            outcome = await engine.run()
            wall = time.perf_counter() - wall
        simulated = engine.clock.now() - engine.started
        samples = log.sample_count(engine.run_id)
    return {"wall_s": wall, "simulated_s": simulated, "samples": samples,
            "completed": float(outcome == "completed")}


def run(quick: bool = False) -> dict[str, dict]:
    got = asyncio.run(_one(quick))
    speed = got["simulated_s"] / got["wall_s"]
    return {
        "simulated_s_per_wall_s": {"value": round(speed), "unit": "sim s / wall s",
                                   "target": TARGET_SIM_S_PER_WALL_S,
                                   "ok": speed >= TARGET_SIM_S_PER_WALL_S},
        "simulated_hours": {"value": round(got["simulated_s"] / 3600, 1), "unit": "h",
                            "target": None, "ok": bool(got["completed"])},
        "wall_s": {"value": round(got["wall_s"], 2), "unit": "s", "target": None, "ok": True},
        "samples_logged": {"value": int(got["samples"]), "unit": "rows", "target": None,
                           "ok": got["samples"] >= got["simulated_s"]},
    }


if __name__ == "__main__":
    results = run(quick="--quick" in sys.argv)
    for name, figure in results.items():
        target = "" if figure["target"] is None else f" (target >= {figure['target']:g})"
        print(f"{name:24} {figure['value']:>12} {figure['unit']}{target}"
              f"  {'ok' if figure['ok'] else 'BELOW TARGET'}")
