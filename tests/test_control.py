"""The control socket with a real Unix socket and a real engine on the scripted oven, and a
real background run driven from other processes through the command line."""

from __future__ import annotations

import asyncio
import json
import os
import stat
import subprocess
import sys

import pytest

from tests.waiting import eventually, time_passes, wait_until
from tuikiln import control
from tuikiln.drivers.fake import FirstOrderOven, ScriptedDevice
from tuikiln.engine import states as st
from tuikiln.engine.runner import KilnInfo, RunEngine, RunSettings
from tuikiln.limits import Limits
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog

PROFILE = """
name = "control test"
units = "C"
[[step]]
ramp = "60/h"
to = 200
[[step]]
hold = "1h"
"""


class SlowClock:
    """Simulated seconds, each taking a millisecond of real time so commands can come in."""

    def __init__(self) -> None:
        self.t = 0.0

    def now(self) -> float:
        return self.t

    async def sleep(self, seconds: float) -> None:
        await time_passes(0.001, "a simulated tick takes a real millisecond: commands come in")
        self.t += seconds


async def test_commands_status_and_subscribe_over_the_socket(tmp_path):
    oven = FirstOrderOven(tau_s=60.0)
    device = ScriptedDevice(model=oven)
    clock = SlowClock()
    device.clock = clock
    profile = parse_profile(PROFILE, "p.toml")
    engine = RunEngine(device, profile, RunSettings(KilnInfo("Socket oven"), Limits()),
                       runlog=RunLog.in_folder(tmp_path))
    server = control.ControlServer(engine, control.socket_path(tmp_path, "Socket oven"))
    await server.start()
    assert stat.S_IMODE(os.stat(server.path).st_mode) == 0o600
    task = asyncio.create_task(engine.run())
    try:
        path = str(server.path)

        async def running() -> dict | None:
            answer = await asyncio.to_thread(control.request, path, "status")
            return answer if answer["status"]["state"] == st.RUN_RUNNING else None

        answer = await eventually(running, what="the engine to be running")
        status = answer["status"]
        assert answer["ok"] and status["state"] == st.RUN_RUNNING
        for key in ("run", "kiln", "profile", "units", "state", "step", "step_count",
                    "step_kind", "step_state", "step_words", "chamber_c", "load_c", "core_c",
                    "setpoint_c", "target_c", "output_pct", "equalization",
                    "time_to_next_step_s", "time_to_operator_s", "time_to_end_s", "alarms",
                    "time", "started", "watch_only", "safe_state"):
            assert key in status

        def first_lines(n: int) -> list[dict]:
            got = []
            for line in control.subscribe(path, timeout=10.0):
                got.append(line)
                if len(got) >= n:
                    break
            return got

        listening = len(engine.listeners)
        subscription = asyncio.create_task(asyncio.to_thread(first_lines, 3))
        await eventually(lambda: len(engine.listeners) > listening,
                         what="the subscriber to be listening")
        paused = await asyncio.to_thread(control.request, path, "pause")
        assert paused["ok"] and paused["status"]["state"] == st.RUN_PAUSED
        lines = await asyncio.wait_for(subscription, 10.0)
        assert lines[0]["ok"] and "status" in lines[0]
        assert any("event" in line and line["event"]["kind"] == "command" for line in lines)
        refused = await asyncio.to_thread(control.request, path, "pause")
        assert not refused["ok"]
        note = await asyncio.to_thread(control.request, path, "note", "hello")
        assert note["ok"]
        unknown = await asyncio.to_thread(control.request, path, "setpoint", "900")
        assert not unknown["ok"]
        aborted = await asyncio.to_thread(control.request, path, "abort")
        assert aborted["ok"]
        assert await asyncio.wait_for(task, 10.0) == st.ABORTED
        assert device.stop_calls  # the device was driven safe
    finally:
        task.cancel()
        await server.close()


def test_one_run_per_kiln(tmp_path):
    with control.KilnLock(tmp_path, "Bench oven"):
        with pytest.raises(control.KilnBusy):
            control.KilnLock(tmp_path, "Bench oven").acquire()
        control.KilnLock(tmp_path, "Other oven").acquire()  # another kiln is fine
    control.KilnLock(tmp_path, "Bench oven").acquire()


def tuikiln(*args: str, data: str, **kw) -> subprocess.CompletedProcess:
    env = dict(os.environ, TUIKILN_DATA=data)
    return subprocess.run([sys.executable, "-m", "tuikiln", *args], capture_output=True,
                          text=True, env=env, timeout=60, **kw)


def test_background_run_survives_its_starter_and_obeys_abort(tmp_path, kiln_file):
    data = str(tmp_path / "data")
    kiln = kiln_file('name = "Background oven"\nunits = "C"\nmax = 1100\n[device]\n'
                     'kind = "sim"\n')
    profile = kiln_file(PROFILE, "p.toml")
    started = tuikiln("run", str(profile), "--kiln", str(kiln), "--speed", "60", data=data)
    assert started.returncode == 0, started.stderr
    assert "tuikiln status" in started.stdout
    # The starting process has exited; the run goes on in its own session.
    status = tuikiln("status", "--json", data=data)
    assert status.returncode == 0, status.stderr
    state = json.loads(status.stdout)
    assert state["kiln"] == "Background oven" and state["state"] == st.RUN_RUNNING
    busy = tuikiln("run", str(profile), "--kiln", str(kiln), "--headless", "--speed", "max",
                   data=data)
    assert busy.returncode == 4 and "already going on" in busy.stderr
    aborted = tuikiln("abort", data=data)
    assert aborted.returncode == 0, aborted.stderr
    wait_until(lambda: not control.active_runs(tmp_path / "data"), timeout=20,
               what="the aborted run to end")
    runs = json.loads(tuikiln("runs", "--json", data=data).stdout)
    assert runs[-1]["outcome"] == st.ABORTED
    events = RunLog.in_folder(tmp_path / "data").events(runs[-1]["id"])
    safe = [e for e in events if e["kind"] == "safe-state"]
    assert safe and safe[0]["detail"]["done"]
    assert tuikiln("status", data=data).returncode == 1  # nothing going on now
