"""Faults the engine survives: a device loop that stalls (the watchdog), and a controller that
reboots mid-run (the engine arms it again). The rules are tuikiln's own design
(tuikiln/engine/runner.py's docstring); no published source applies."""

from __future__ import annotations

import asyncio

import pytest

from tests.conftest import oven_settings
from tests.waiting import eventually
from tuikiln import events as ev
from tuikiln.drivers.factory import open_device
from tuikiln.drivers.fake import FirstOrderOven, ManualClock, ScriptedDevice
from tuikiln.engine import states as st
from tuikiln.engine.host import settings_for
from tuikiln.engine.runner import RunEngine
from tuikiln.engine.safety import SafetyWiring
from tuikiln.kiln import parse_kiln
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog

PROFILE = """
name = "hot hold"
units = "C"
[[step]]
ramp = "max"
to = 1000
[[step]]
hold = "2h"
"""


class HangingDevice(ScriptedDevice):
    """A read that never returns from poll `hang_at` on (a driver whose timeout failed)."""

    def __init__(self, hang_at: int, *, stop_hangs: bool = False, **kw) -> None:
        super().__init__(**kw)
        self.hang_at = hang_at
        self.stop_hangs = stop_hangs

    async def read(self):
        if self.polls >= self.hang_at:
            self.polls += 1
            await asyncio.Event().wait()  # forever
        return await super().read()

    async def stop_heating(self) -> None:
        if self.stop_hangs:
            await asyncio.Event().wait()
        await super().stop_heating()


class Events:
    def __init__(self) -> None:
        self.events: list = []

    def event(self, event) -> None:
        self.events.append(event)

    def state(self, state) -> None:
        pass

    def reading(self, sample) -> None:
        pass


def engine_on(device, tmp_path, **kw) -> tuple[RunEngine, Events]:
    profile = parse_profile(PROFILE, "p.toml", max_c=1100.0)
    sink = Events()
    engine = RunEngine(device, profile, oven_settings(), runlog=RunLog.in_folder(tmp_path),
                       sinks=[sink], safety=SafetyWiring(**kw))
    return engine, sink


async def test_a_hanging_read_is_stopped_by_the_watchdog_and_the_heat_cut(tmp_path):
    device = HangingDevice(200, model=FirstOrderOven(tau_s=300.0), clock=ManualClock())
    engine, sink = engine_on(device, tmp_path, watchdog_s=0.3)
    outcome = await asyncio.wait_for(engine.run(), 10.0)
    assert outcome == st.ENGINE_FAILED
    assert device.stop_calls, "the heat was not stopped"
    assert device.model.heating is False
    safe = next(e for e in sink.events if e.kind == ev.SAFE_STATE)
    assert safe.detail["done"] and "stalled" in safe.message
    log = RunLog.in_folder(tmp_path)
    assert log.run(engine.run_id).outcome == st.ENGINE_FAILED


async def test_when_the_device_hangs_for_good_a_second_connection_stops_the_heat(tmp_path):
    model = FirstOrderOven(tau_s=300.0)
    clock = ManualClock()
    device = HangingDevice(50, stop_hangs=True, model=model, clock=clock)
    spare = ScriptedDevice(model=model, clock=clock, description="second connection")
    engine, sink = engine_on(device, tmp_path, watchdog_s=0.3, second_connection=lambda: spare,
                             path_timeout_s=0.3)
    outcome = await asyncio.wait_for(engine.run(), 10.0)
    assert outcome == st.ENGINE_FAILED
    assert not device.stop_calls and spare.stop_calls and spare.closed
    safe = next(e for e in sink.events if e.kind == ev.SAFE_STATE)
    assert safe.detail["done"] and "second connection" in safe.message


async def test_a_slow_but_working_loop_does_not_trip_the_watchdog(tmp_path):
    device = ScriptedDevice(model=FirstOrderOven(tau_s=60.0), clock=ManualClock())
    profile = parse_profile(PROFILE.replace('"2h"', '"2m"'), "p.toml", max_c=1100.0)
    engine = RunEngine(device, profile, oven_settings(), safety=SafetyWiring(watchdog_s=0.3))
    assert await asyncio.wait_for(engine.run(), 20.0) == st.COMPLETED


async def test_a_controller_reboot_mid_hold_is_armed_again_and_the_run_completes(tmp_path):
    # The simulator's "controller-reboot" fault (simulator/config.py): silent and heater off,
    # then back with setpoint 0 and stopped (keep_settings = false, the default).
    kiln = parse_kiln('name = "Test oven"\nunits = "C"\nmax = 1100\n[device]\nkind = "sim"\n'
                      '[[device.fault]]\nat = "60m"\nkind = "controller-reboot"\nfor = "20s"\n',
                      str(tmp_path / "kiln.toml"))
    profile = parse_profile('name = "t"\nunits = "C"\n[[step]]\nramp = "max"\nto = 400\n'
                            '[[step]]\nhold = "90m"\n', "p.toml", max_c=1100.0)
    device = open_device(kiln.device, kiln.base_dir, speed=0.0)
    sink = Events()
    async with device:
        engine = RunEngine(device, profile, settings_for(kiln, profile),
                           runlog=RunLog.in_folder(tmp_path), sinks=[sink])
        outcome = await engine.run()
    assert outcome == st.COMPLETED
    assert engine.rearms >= 1
    rearmed = [e for e in sink.events if e.kind == ev.DEVICE and "rebooted" in e.message]
    assert rearmed
    raised = [e.detail["alarm"] for e in sink.events if e.kind == ev.ALARM_RAISED]
    assert not any(code in raised for code in ("heat-stuck-on", "sensor-bad", "no-rise"))
    hold_end = next(e for e in sink.events if e.kind == ev.STEP_END and e.detail["index"] == 1)
    assert hold_end.detail["hold_clock_s"] >= 90 * 60
    # After the re-arm the controller was running at the hold's setpoint again.
    after = [e for e in sink.events if e.time > rearmed[0].time and e.kind == ev.STEP_STATE]
    assert after == [] or after[0].detail["state"] in (st.HOLDING, st.SLIPPED)


async def test_a_served_controller_that_reboots_comes_back_stopped_and_is_armed_again(tmp_path):
    # Over Modbus the driver writes "run" once; the rebooted controller (setpoint 0, stopped)
    # must be told both again. `sim serve` is its own process, as a real controller would be.
    from tests.crash_trials import TrialSim

    sim = TrialSim(120.0, "--fault", "controller-reboot@6m+60s")
    try:
        kiln = parse_kiln(f'name = "Served"\nunits = "C"\nmax = 1100\n[device]\nkind = "modbus"\n'
                          f'port = "tcp://127.0.0.1:{sim.port}"\nmap = "sim"\ntimeout = 0.5\n',
                          str(tmp_path / "kiln.toml"))
        profile = parse_profile('name = "t"\nunits = "C"\n[[step]]\nramp = "max"\nto = 80\n'
                                '[[step]]\nhold = "6s"\n', "p.toml", max_c=1100.0)
        device = open_device(kiln.device, kiln.base_dir)
        sink = Events()
        async with device:
            engine = RunEngine(device, profile, settings_for(kiln, profile),
                               runlog=RunLog.in_folder(tmp_path), sinks=[sink])
            outcome = await asyncio.wait_for(engine.run(), 40.0)
        regs = sim.registers()
    finally:
        sim.stop()
    assert outcome == st.COMPLETED
    assert engine.rearms >= 1, [e.message for e in sink.events]
    assert regs[4] == 0  # and the end turned it off again


async def test_a_controller_reboot_mid_ramp_is_re_armed_at_once_and_the_run_log_says_so(
        tmp_path, capsys):
    # The in-process simulator's driver writes "run" with every setpoint, so the ramp's next
    # regular write alone would restore the rebooted controller (setpoint 0, stopped: the
    # simulator's defaults) -- and the run log would never say it had lost its setpoint.
    # The first reading after the silence must arm it again and say so in the log.
    kiln = parse_kiln('name = "Test oven"\nunits = "C"\nmax = 1100\n[device]\nkind = "sim"\n'
                      '[[device.fault]]\nat = "60m"\nkind = "controller-reboot"\nfor = "20s"\n',
                      str(tmp_path / "kiln.toml"))
    profile = parse_profile('name = "t"\nunits = "C"\n[[step]]\nramp = "300/h"\nto = 400\n',
                            "p.toml", max_c=1100.0)
    device = open_device(kiln.device, kiln.base_dir, speed=0.0)
    async with device:
        engine = RunEngine(device, profile, settings_for(kiln, profile),
                           runlog=RunLog.in_folder(tmp_path))
        outcome = await engine.run()
    assert outcome == st.COMPLETED
    log = RunLog.in_folder(tmp_path)
    samples = log.samples(engine.run_id)
    t = samples["t"] - engine.started
    silent = t[(samples["flags"] & st.FLAG_NO_READING) != 0]
    assert len(silent) and 3600.0 <= silent[0] and silent[-1] <= 3600.0 + 25.0, silent
    back = silent[-1] + 1.0  # the first answered reading
    rearmed = [e for e in log.events(engine.run_id)
               if e["kind"] == ev.DEVICE and e["detail"].get("words") == "controller re-armed"]
    assert [e["time"] - engine.started for e in rearmed] == [back], rearmed
    # The controller's own output is on again within 5 s of its first answer (the ramp's
    # setpoint is above the chamber, which cooled a little while the heater was off).
    heating = (t >= back) & (samples["output_pct"] > 0.0)
    assert heating.any() and t[heating][0] - back <= 5.0
    assert engine.rearms == 1
    # The record says so too: the replay of the run remarks on the ramp it happened in.
    import json

    from tuikiln.analysis.replay import REMARKS, clock
    from tuikiln.cli import main

    capsys.readouterr()
    assert main(["replay", "last", "--json", "--data", str(tmp_path)]) == 0
    ramp = json.loads(capsys.readouterr().out)["steps"][0]
    assert ramp["verdict"] == REMARKS, ramp["reasons"]
    assert f"the controller was armed again at {clock(back)}" in " ".join(ramp["reasons"])
    assert main(["replay", "last", "--data", str(tmp_path)]) == 0
    assert "armed again" in capsys.readouterr().out

class Record(Events):
    """Events and samples as the engine tells its sinks."""

    def __init__(self) -> None:
        super().__init__()
        self.samples: list[dict] = []

    def reading(self, sample) -> None:
        self.samples.append(sample)


@pytest.mark.parametrize("layout", ["whole-degree-coil", "fahrenheit-float"])
async def test_a_controller_on_a_pty_rebooting_mid_ramp_heats_again_and_the_log_says_so(
        tmp_path, layout: str) -> None:
    # `sim serve` on a real pty in its own process, read through the layout's shipped map:
    # a run coil (whole-degree-coil) or a mode register (fahrenheit-float), both written
    # "run" once by the driver, both stopped after a power cycle (simulator defaults).
    from tests.simserve import ServedSim

    with ServedSim("--pty", "--speed", "1", "--layout", layout, "--seed", "1",
                   "--fault", "controller-reboot@15s+3s") as sim:
        kiln = parse_kiln(f'name = "Served"\nunits = "C"\nmax = 1100\n[device]\n'
                          f'kind = "modbus"\nport = "{sim.where}"\nmap = "{layout}"\n'
                          'poll = 1\ntimeout = 0.5\n', str(tmp_path / "kiln.toml"))
        profile = parse_profile('name = "t"\nunits = "C"\n[[step]]\nramp = "1200/h"\n'
                                'to = 200\n', "p.toml", max_c=1100.0)
        device = open_device(kiln.device, kiln.base_dir)
        record = Record()

        def heating_again() -> float | None:
            """Seconds from the controller's first answer after the silence to its output
            on again (None: not yet)."""
            s = record.samples
            silent = [i for i, x in enumerate(s) if x["chamber_c"] is None]
            if not silent or silent[-1] + 1 >= len(s):
                return None
            back = s[silent[-1] + 1]["time"]
            on = [x["time"] for x in s[silent[-1] + 1:] if (x["output_pct"] or 0.0) > 0.0]
            return on[0] - back + 1e-9 if on else None

        async with device:
            engine = RunEngine(device, profile, settings_for(kiln, profile),
                               runlog=RunLog.in_folder(tmp_path), sinks=[record])
            run = asyncio.create_task(engine.run())
            took = await eventually(heating_again, 60.0, "heat again after the reboot")
            engine.request_stop(st.ABORTED, "the test has seen enough")
            await asyncio.wait_for(run, 30.0)
    assert took <= 5.0
    assert engine.rearms == 1
    log = RunLog.in_folder(tmp_path)
    rearmed = [e for e in log.events(engine.run_id)
               if e["kind"] == ev.DEVICE and e["detail"].get("words") == "controller re-armed"]
    assert len(rearmed) == 1, [e["message"] for e in log.events(engine.run_id)]
