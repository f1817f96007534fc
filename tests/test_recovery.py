"""Restart recovery in process: a run "dies" (its engine stops writing, no end is logged), a
new engine finds it in the real SQLite log and carries on, holds safe or ends it per
`on_restart` (tuikiln/engine/recovery.py). The oven is drivers/fake.py's first-order model
on a manual clock, so hours pass in milliseconds. The kill -9 trials against a served
simulator are in test_recovery_crash.py.

The rules checked here are tuikiln's own design (recovery.py's docstring); no published
source applies.
"""

from __future__ import annotations

import re
import subprocess

import pytest

from tests.conftest import oven_settings
from tuikiln import events as ev
from tuikiln.drivers.fake import FirstOrderOven, ManualClock, ScriptedDevice
from tuikiln.engine import recovery
from tuikiln.engine import states as st
from tuikiln.engine.runner import RunEngine
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog

HOLD = """
name = "hold"
units = "C"
[[step]]
ramp = "max"
to = 300
[[step]]
hold = "30m"
[[step]]
cool = "free"
to = 100
"""

RAMP = """
name = "ramp"
units = "C"
[[step]]
ramp = "300/h"
to = 600
[[step]]
hold = "10m"
"""


class _Crash(BaseException):
    """Stands for kill -9: nothing after it reaches the log."""


class Sink:
    def __init__(self, crash_when=None) -> None:
        self.events: list = []
        self.engine: RunEngine | None = None
        self.crash_when = crash_when
        self.on_event = None

    def event(self, event) -> None:
        self.events.append(event)
        if self.on_event is not None:
            self.on_event(event)

    def state(self, state) -> None:
        pass

    def reading(self, sample) -> None:
        engine = self.engine
        if self.crash_when is not None and engine is not None and self.crash_when(engine):
            engine.recorder.flush(force=True)
            engine.recorder.conn.close()
            engine.recorder = None  # the dead process writes nothing more
            engine.runlog = None
            raise _Crash

    def kinds(self) -> list[str]:
        return [e.kind for e in self.events]


def dead_pid() -> int:
    proc = subprocess.Popen(["true"])
    proc.wait()
    return proc.pid


def engine_for(profile_text: str, device: ScriptedDevice, log: RunLog, sink: Sink,
               resume=None) -> RunEngine:
    profile = parse_profile(profile_text, "p.toml", max_c=1100.0)
    engine = RunEngine(device, profile, oven_settings(tick_s=2.0), runlog=log, sinks=[sink],
                       resume=resume)
    sink.engine = engine
    return engine


async def crashed_run(tmp_path, profile_text: str, crash_when):
    """A run whose engine died mid-way; returns the log, the oven model and its clock."""
    clock = ManualClock(1_000_000.0)
    model = FirstOrderOven(tau_s=300.0)
    device = ScriptedDevice(model=model, clock=clock)
    log = RunLog.in_folder(tmp_path)
    sink = Sink(crash_when)
    engine = engine_for(profile_text, device, log, sink)
    with pytest.raises(_Crash):
        await engine.run()
    # The dying engine drove its device safe on the way out; a real kill -9 leaves the
    # controller holding its setpoint: put it back as it was.
    model.setpoint_c, model.heating = device.setpoint_writes[-1][1], True
    log._conn.execute("UPDATE runs SET pid = ? WHERE id = ?", (dead_pid(), engine.run_id))
    return log, model, clock, engine


async def resume_run(tmp_path, log, model, clock, profile_text, policy, *, now_shift=0.0,
                     on_event=None):
    clock.advance(now_shift)
    info = recovery.find_unfinished(log, "Test oven")
    assert info is not None
    plan = recovery.plan_resume(log, info, policy, now=clock.now())
    device = ScriptedDevice(model=model, clock=clock)
    sink = Sink()
    sink.on_event = on_event
    engine = engine_for(profile_text, device, log, sink, resume=plan)
    outcome = await engine.run()
    return outcome, engine, device, sink, plan


def in_hold_for(seconds: float):
    def when(engine: RunEngine) -> bool:
        s = engine.rules.stepper
        return s.index == 1 and s.state == st.HOLDING and s.hold_clock_s >= seconds
    return when


async def test_continue_keeps_the_hold_clock_and_appends_to_the_same_run(tmp_path):
    log, model, clock, first = await crashed_run(tmp_path, HOLD, in_hold_for(600.0))
    crashed_at = clock.now()
    point = log.resume_point(first.run_id)
    assert point["index"] == 1 and point["state"] == st.HOLDING
    assert point["hold_clock_s"] >= 600.0 - 2.0  # the last committed tick
    outcome, engine, device, sink, plan = await resume_run(
        tmp_path, log, model, clock, HOLD, "continue", now_shift=120.0)
    assert outcome == st.COMPLETED and engine.run_id == first.run_id
    assert [r.id for r in log.runs()] == [first.run_id]
    assert log.run(first.run_id).outcome == st.COMPLETED
    gap = next(e for e in sink.events if e.kind == ev.GAP)
    assert gap.detail["seconds"] == pytest.approx(120.0, abs=3.0)
    assert gap.detail["before_c"] == pytest.approx(300.0, abs=15.0)
    assert gap.detail["policy"] == "continue"
    hold_end = next(e for e in sink.events if e.kind == ev.STEP_END and e.detail["index"] == 1)
    # The clock ran on from the logged value: the time away is not credited to it.
    assert hold_end.detail["hold_clock_s"] >= 1800.0
    assert hold_end.time - crashed_at >= 1800.0 - point["hold_clock_s"] + 120.0 - 4.0
    assert ev.RUN_START not in sink.kinds()  # one run: its start is logged once
    samples = log.samples(first.run_id)
    assert (samples["t"][1:] > samples["t"][:-1]).all()
    assert device.setpoint_writes[0][1] == pytest.approx(300.0)


async def test_a_hold_that_fell_out_of_band_while_away_is_a_slipped_hold(tmp_path):
    log, model, clock, _ = await crashed_run(tmp_path, HOLD, in_hold_for(300.0))
    model.heating = False  # a power cut: the oven cools while everything is down
    clock.advance(900.0)
    model.heating = True
    outcome, engine, device, sink, plan = await resume_run(
        tmp_path, log, model, clock, HOLD, "continue")
    assert outcome == st.COMPLETED
    gap = next(e for e in sink.events if e.kind == ev.GAP)
    assert gap.detail["after_c"] < gap.detail["before_c"] - 50.0
    raised = [e.detail["alarm"] for e in sink.events if e.kind == ev.ALARM_RAISED]
    assert "hold-slipped" in raised  # out of band since the engine went away > hold_grace
    hold_end = next(e for e in sink.events if e.kind == ev.STEP_END and e.detail["index"] == 1)
    assert hold_end.detail["out_of_band_s"] >= 900.0
    assert hold_end.detail["hold_clock_s"] >= 1800.0


async def test_a_ramp_resumes_from_the_temperature_now(tmp_path):
    def mid_ramp(engine: RunEngine) -> bool:
        s = engine.rules.stepper
        return s.index == 0 and s.setpoint_c is not None and s.setpoint_c >= 300.0
    log, model, clock, _ = await crashed_run(tmp_path, RAMP, mid_ramp)
    model.heating = False
    clock.advance(600.0)
    model.heating = True
    now_c = model.temperature_c
    outcome, engine, device, sink, _ = await resume_run(tmp_path, log, model, clock, RAMP,
                                                        "continue")
    assert outcome == st.COMPLETED
    # The first setpoint written after the restart is where the oven is, not the old one.
    assert device.setpoint_writes[0][1] == pytest.approx(now_c, abs=3.0)
    assert now_c < 290.0


async def test_hold_drives_safe_and_waits_for_a_person(tmp_path):
    log, model, clock, _ = await crashed_run(tmp_path, HOLD, in_hold_for(600.0))
    box: dict = {}
    held_ticks = []

    class Resumer(Sink):
        def reading(self, sample) -> None:
            engine = self.engine
            if engine.held_for_restart:
                held_ticks.append(sample["time"])
                if len(held_ticks) == 30:
                    box["answer"] = engine.command("resume", None, "test")

    clock.advance(60.0)
    info = recovery.find_unfinished(log, "Test oven")
    plan = recovery.plan_resume(log, info, "hold", now=clock.now())
    device = ScriptedDevice(model=model, clock=clock)
    sink = Resumer()
    engine = engine_for(HOLD, device, log, sink, resume=plan)
    outcome = await engine.run()
    assert outcome == st.COMPLETED
    assert box["answer"]["ok"], box
    assert device.stop_calls and device.stop_calls[0] == held_ticks[0]
    # No setpoint went to the oven while it was held safe.
    assert all(t >= held_ticks[-1] for t, _ in device.setpoint_writes)
    assert ev.SAFE_STATE in sink.kinds() and ev.OPERATOR_NEEDED in sink.kinds()
    hold_end = next(e for e in sink.events if e.kind == ev.STEP_END and e.detail["index"] == 1)
    assert hold_end.detail["hold_clock_s"] >= 1800.0


async def test_hold_refuses_step_commands_until_resumed(tmp_path):
    log, model, clock, _ = await crashed_run(tmp_path, HOLD, in_hold_for(60.0))
    answers = []

    class Poker(Sink):
        def reading(self, sample) -> None:
            engine = self.engine
            if engine.held_for_restart and not answers:
                answers.append(engine.command("skip", None, "test"))
                answers.append(engine.command("abort", None, "test"))

    info = recovery.find_unfinished(log, "Test oven")
    plan = recovery.plan_resume(log, info, "hold", now=clock.now())
    device = ScriptedDevice(model=model, clock=clock)
    engine = engine_for(HOLD, device, log, Poker(), resume=plan)
    outcome = await engine.run()
    assert not answers[0]["ok"] and "resume" in answers[0]["message"]
    assert answers[1]["ok"] and outcome == st.ABORTED


async def test_end_drives_safe_and_ends_the_run(tmp_path):
    log, model, clock, first = await crashed_run(tmp_path, HOLD, in_hold_for(60.0))
    outcome, engine, device, sink, _ = await resume_run(tmp_path, log, model, clock, HOLD,
                                                        "end", now_shift=30.0)
    assert outcome == st.ENDED_AFTER_RESTART
    assert device.stop_calls and not device.setpoint_writes
    assert log.run(first.run_id).outcome == st.ENDED_AFTER_RESTART
    assert recovery.find_unfinished(log, "Test oven") is None


async def test_finding_and_guards(tmp_path):
    log, model, clock, first = await crashed_run(tmp_path, HOLD, in_hold_for(60.0))
    info = recovery.find_unfinished(log, "Test oven")
    assert info is not None and info.id == first.run_id
    assert recovery.find_unfinished(log, "Another oven") is None
    since = log.last_sample(first.run_id)["t"]
    plan = recovery.plan_resume(log, info, "continue", now=since + 13 * 3600)
    assert plan.policy == "hold" and "12 h" in plan.why
    plan = recovery.plan_resume(log, info, "hold", now=since + 8 * 86400)
    assert plan.policy == "end"
    plan = recovery.plan_resume(log, info, "continue", now=since + 60)
    assert plan.policy == "continue" and plan.away_s == pytest.approx(60.0)
    # A run whose engine is alive is not unfinished.
    import os

    log._conn.execute("UPDATE runs SET pid = ? WHERE id = ?", (os.getpid(), first.run_id))
    assert recovery.find_unfinished(log, "Test oven") is None


def test_resume_with_nothing_to_resume_exits_0(tmp_path, capsys):
    from tuikiln.cli import main

    code = main(["--data", str(tmp_path), "run", "--resume", "--headless"])
    assert code == 0
    assert "Nothing to resume" in capsys.readouterr().out
    code = main(["--data", str(tmp_path), "run", "--headless"])
    assert code == 1
    assert "say which profile" in capsys.readouterr().err


def test_service_unit_is_filled_with_this_machines_paths(tmp_path, capsys):
    # Keys as systemd.service(5) and systemd.unit(5) name them.
    from tuikiln.cli import main

    assert main(["--data", str(tmp_path), "service"]) == 0
    unit = capsys.readouterr().out
    lines = dict(line.split("=", 1) for line in unit.splitlines()
                 if "=" in line and not line.startswith("#"))
    exec_start = lines["ExecStart"]
    assert exec_start.split()[0].endswith("tuikiln") or "-m tuikiln" in exec_start
    assert f"--data {tmp_path.resolve()}" in exec_start
    assert exec_start.endswith("run --resume --headless")
    assert lines["Restart"] == "on-failure" and lines["RestartSec"] == "5"
    assert lines["KillSignal"] == "SIGTERM" and lines["After"] == "network-online.target"
    assert lines["WantedBy"] == "default.target" and "User" not in lines
    assert not re.findall(r"@[A-Z_]+@", unit)  # every template word filled in
    assert main(["--data", str(tmp_path), "service", "--system"]) == 0
    system = capsys.readouterr().out
    assert "WantedBy=multi-user.target" in system and "\nUser=" in system


async def test_a_service_stop_suspends_safe_and_the_run_is_taken_up_again(tmp_path):
    # SIGTERM under a service manager: heat off, the run left unfinished (no end logged).
    clock = ManualClock(1_000_000.0)
    model = FirstOrderOven(tau_s=300.0)
    device = ScriptedDevice(model=model, clock=clock)
    log = RunLog.in_folder(tmp_path)

    class Stopper(Sink):
        def reading(self, sample) -> None:
            if in_hold_for(120.0)(self.engine):
                self.engine.request_suspend("the service is stopping (SIGTERM)")

    first = engine_for(HOLD, device, log, Stopper())
    assert await first.run() == "suspended"
    assert device.stop_calls and model.heating is False
    assert log.run(first.run_id).outcome is None
    log._conn.execute("UPDATE runs SET pid = ? WHERE id = ?", (dead_pid(), first.run_id))
    outcome, engine, *_ = await resume_run(tmp_path, log, model, clock, HOLD, "continue",
                                           now_shift=60.0)
    assert outcome == st.COMPLETED and engine.run_id == first.run_id
