"""The engine on the in-process simulator (drivers/simdevice.py) at full speed, with the
simulator's own faults (simulator/config.py). Each alarm meets the fault that should raise
it; clean runs with realistic noise (0.3 °C, the simulator's default) raise nothing.

Fault-to-alarm expectations are tuikiln's own design (tuikiln/engine/alarms.py).
"""

from __future__ import annotations

import numpy as np
import pytest

from tests.conftest import oven_settings
from tuikiln import events as ev
from tuikiln.drivers.factory import open_device
from tuikiln.engine import states as st
from tuikiln.engine.host import settings_for
from tuikiln.engine.runner import KilnInfo, RunEngine
from tuikiln.kiln import parse_kiln
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog

SHORT = """
name = "short"
units = "C"
[[step]]
ramp = "max"
to = 300
[[step]]
hold = "5m"
start = "equalized"
[[step]]
cool = "300/h"
to = 220
[[step]]
cool = "free"
to = 150
"""

LONG_RAMP = """
name = "long ramp"
units = "C"
[[step]]
ramp = "600/h"
to = 700
[[step]]
hold = "20m"
[[step]]
cool = "free"
to = 300
"""


class Watcher:
    """A sink that remembers events and can abort the run when an alarm shows."""

    def __init__(self, abort_on: str | None = None) -> None:
        self.events: list = []
        self.abort_on = abort_on
        self.engine: RunEngine | None = None

    def event(self, event) -> None:
        self.events.append(event)
        if (self.abort_on and event.kind == ev.ALARM_RAISED
                and event.detail.get("alarm") == self.abort_on and self.engine is not None):
            self.engine.command("abort", "test saw the alarm")

    def state(self, state) -> None:
        pass

    def reading(self, sample) -> None:
        pass

    def raised(self) -> list[str]:
        return [e.detail["alarm"] for e in self.events if e.kind == ev.ALARM_RAISED]

    def cleared(self) -> list[str]:
        return [e.detail["alarm"] for e in self.events if e.kind == ev.ALARM_CLEARED]


async def simulate(tmp_path, profile_text: str, *, seed: int = 1, faults: str = "",
                   abort_on: str | None = None, max_c: float = 1100.0):
    kiln = parse_kiln(f'name = "Test oven"\nunits = "C"\nmax = {max_c}\n[device]\n'
                      f'kind = "sim"\nseed = {seed}\n{faults}', str(tmp_path / "kiln.toml"))
    profile = parse_profile(profile_text, "p.toml", max_c=kiln.max_c)
    device = open_device(kiln.device, kiln.base_dir, speed=0.0)
    watcher = Watcher(abort_on)
    log = RunLog.in_folder(tmp_path)
    async with device:
        engine = RunEngine(device, profile, settings_for(kiln, profile, auto_continue=True),
                           runlog=log, sinks=[watcher])
        watcher.engine = engine
        outcome = await engine.run()
    return outcome, watcher, engine, device, log


@pytest.mark.parametrize("seed", range(10))
async def test_clean_runs_raise_no_alarm(tmp_path, seed):
    outcome, watcher, engine, _, log = await simulate(tmp_path, SHORT, seed=seed)
    assert outcome == st.COMPLETED
    assert watcher.raised() == []
    assert ev.EQUALIZED in [e.kind for e in watcher.events]
    # The log holds every sample (one per tick, plus the last) and every event.
    assert log.sample_count(engine.run_id) == engine.ticks + 1
    assert len(log.events(engine.run_id)) == len(watcher.events)


async def test_open_heater_is_falling_behind(tmp_path):
    faults = '[[device.fault]]\nat = "10m"\nkind = "element-open"\n'
    outcome, watcher, *_ = await simulate(tmp_path, LONG_RAMP, faults=faults,
                                          abort_on="lagging")
    assert "lagging" in watcher.raised()
    assert "no-rise" in watcher.raised()
    assert outcome == st.ABORTED
    assert "heat-stuck-on" not in watcher.raised()


async def test_welded_relay_is_heat_stuck_on_and_ends_safe(tmp_path):
    faults = '[[device.fault]]\nat = "30m"\nkind = "relay-welded"\n'
    outcome, watcher, engine, device, log = await simulate(tmp_path, LONG_RAMP, faults=faults)
    assert outcome == st.STOPPED_BY_ALARM
    assert "heat-stuck-on" in watcher.raised()
    safe = [e for e in watcher.events if e.kind == ev.SAFE_STATE]
    assert safe and safe[0].detail["done"]
    # The controller was told to stop: setpoint down, output disabled.
    assert not device.kiln.controller.running
    assert device.kiln.controller.setpoint_c == 0.0
    assert log.run(engine.run_id).outcome == st.STOPPED_BY_ALARM


async def test_open_thermocouple_is_a_sensor_fault_and_ends_safe(tmp_path):
    faults = '[[device.fault]]\nat = "15m"\nkind = "tc-open"\n'
    outcome, watcher, engine, device, _ = await simulate(tmp_path, LONG_RAMP, faults=faults)
    assert outcome == st.STOPPED_BY_ALARM
    assert watcher.raised()[0] == "sensor-bad"
    assert any(e.kind == ev.SAFE_STATE for e in watcher.events)
    assert not device.kiln.controller.running
    # It stopped within seconds of the fault, not minutes.
    assert engine.clock.now() - engine.started < 15 * 60 + 30


async def test_dropped_link_is_reported_and_the_run_recovers(tmp_path):
    faults = '[[device.fault]]\nat = "10m"\nkind = "link-drop"\nfor = "60s"\n'
    outcome, watcher, *_ = await simulate(tmp_path, SHORT, faults=faults)
    assert outcome == st.COMPLETED
    assert "no-link" in watcher.raised() and "no-link" in watcher.cleared()
    assert "no-link-too-long" not in watcher.raised()


async def test_long_lost_link_ends_the_run(tmp_path):
    faults = '[[device.fault]]\nat = "10m"\nkind = "link-drop"\nfor = "10m"\n'
    outcome, watcher, *_ = await simulate(tmp_path, SHORT, faults=faults)
    assert outcome == st.STOPPED_BY_ALARM
    assert "no-link-too-long" in watcher.raised()
    safe = [e for e in watcher.events if e.kind == ev.SAFE_STATE]
    assert safe  # it says what it could and could not do


async def test_line_noise_alone_raises_nothing(tmp_path):
    faults = '[[device.fault]]\nat = "5m"\nkind = "line-noise"\nshare = 0.3\nfor = "20m"\n'
    outcome, watcher, *_ = await simulate(tmp_path, SHORT, faults=faults)
    assert outcome == st.COMPLETED
    assert watcher.raised() == []


async def test_watch_only_follows_the_plan_without_writing(tmp_path):
    from tuikiln.drivers.base import Capabilities

    kiln = parse_kiln('name = "Watched"\nunits = "C"\nmax = 1100\n[device]\nkind = "sim"\n',
                      str(tmp_path / "kiln.toml"))
    profile = parse_profile(SHORT, "p.toml")
    device = open_device(kiln.device, kiln.base_dir, speed=0.0)
    device.capabilities = Capabilities(can_write_setpoint=False, can_stop_heating=False,
                                       has_output=True)
    device.kiln.set_setpoint(300.0)  # a person set the controller by hand
    device.kiln.set_running(True)
    watcher = Watcher()
    async with device:
        engine = RunEngine(device, profile, oven_settings(kiln=KilnInfo("Watched", "C", 1100.0)),
                           sinks=[watcher])
        engine.command("abort")  # only to end the test quickly; the first tick acts on it
        await engine.run()
    assert engine.watch_only and engine.status()["watch_only"] is True
    safe = [e for e in watcher.events if e.kind == ev.SAFE_STATE][0]
    assert not safe.detail["done"] and "cannot turn" in safe.detail["words"]
    assert device.kiln.controller.setpoint_c == 300.0  # nothing was written


def test_a_profile_hotter_than_the_kiln_is_refused(tmp_path, kiln_file):
    from tuikiln.cli import main

    kiln = kiln_file('name = "Small"\nunits = "C"\nmax = 900\n[device]\nkind = "sim"\n')
    profile = kiln_file('units = "C"\n[[step]]\nramp = "max"\nto = 1000\n', "hot.toml")
    code = main(["run", str(profile), "--kiln", str(kiln), "--headless", "--speed", "max",
                 "--data", str(tmp_path / "data")])
    assert code == 1
    assert not (tmp_path / "data" / "runs.sqlite").exists()


async def test_an_engine_failure_drives_safe_and_is_logged(tmp_path):
    from tuikiln.drivers.fake import FirstOrderOven, ScriptedDevice

    device = ScriptedDevice(model=FirstOrderOven(), errors={50: RuntimeError("a bug")})
    profile = parse_profile(LONG_RAMP, "p.toml")
    log = RunLog.in_folder(tmp_path)
    engine = RunEngine(device, profile, oven_settings(kiln=KilnInfo("k")), runlog=log)
    with pytest.raises(RuntimeError):
        await engine.run()
    assert device.stop_calls  # heat off before the error went on up
    run = log.run(engine.run_id)
    assert run.outcome == st.ENGINE_FAILED
    assert "safe-state" in [e["kind"] for e in log.events(run.id)]


async def test_a_stop_request_from_a_signal_ends_safe(tmp_path):
    from tuikiln.drivers.fake import FirstOrderOven, ScriptedDevice

    device = ScriptedDevice(model=FirstOrderOven())
    engine = RunEngine(device, parse_profile(LONG_RAMP, "p.toml"),
                       oven_settings(kiln=KilnInfo("k")))
    engine.request_stop(st.STOPPED_BY_SIGNAL, "stopped by SIGTERM")
    assert await engine.run() == st.STOPPED_BY_SIGNAL
    assert device.stop_calls


TEMPER_AFTER_HARDEN = """
name = "harden then temper"
units = "C"
[[step]]
ramp = "max"
to = 800
[[step]]
hold = "10m"
[[step]]
cool = "free"
to = 205
[[step]]
hold = "1h"
"""


async def test_a_door_opened_during_the_cool_is_no_stuck_relay(tmp_path):
    # Opening the door while the oven coasts down to a temper shows the thermocouple cold
    # air (a dip), then the reading jumps back to the real, hotter chamber when it shuts.
    # That is a disturbed hold, not a relay stuck closed: the run must go on.
    faults = '[[device.fault]]\nat = "1h50m"\nkind = "door-open"\nfor = "4m"\n'
    outcome, watcher, *_ = await simulate(tmp_path, TEMPER_AFTER_HARDEN, faults=faults)
    assert "heat-stuck-on" not in watcher.raised()
    assert outcome == st.COMPLETED


async def test_a_relay_stuck_during_a_temper_is_caught(tmp_path):
    faults = '[[device.fault]]\nat = "3h"\nkind = "relay-welded"\n'
    outcome, watcher, *_ = await simulate(tmp_path, TEMPER_AFTER_HARDEN, faults=faults)
    assert "heat-stuck-on" in watcher.raised()
    assert outcome == st.STOPPED_BY_ALARM


async def test_a_target_the_oven_cannot_reach_is_reported(tmp_path):
    # The simulated oven tops out near 1155 °C (simulator/config.py); asked for 1190 °C it
    # heats flat out and never gets there: the person hears of it after reach_within.
    too_hot = 'units = "C"\n[[step]]\nramp = "max"\nto = 1190\n[[step]]\nhold = "10m"\n'
    outcome, watcher, *_ = await simulate(tmp_path, too_hot, abort_on="never-reached",
                                          max_c=1250.0)
    assert "never-reached" in watcher.raised()
    assert outcome == st.ABORTED


async def test_starting_at_a_hold_heats_to_the_hold_first(tmp_path):
    # `tuikiln run --at-step 2` on ramp-then-hold: the hold is at the ramp's target, so the
    # oven must heat there; holding "at whatever the oven is now" would never temper.
    from tuikiln.drivers.factory import open_device as open_sim

    profile = parse_profile('units = "C"\n[[step]]\nramp = "100/h"\nto = 205\n'
                            '[[step]]\nhold = "20m"\n', "p.toml")
    kiln = parse_kiln('name = "Test oven"\n[device]\nkind = "sim"\n', str(tmp_path / "k.toml"))
    device = open_sim(kiln.device, kiln.base_dir, speed=0.0)
    async with device:
        engine = RunEngine(device, profile, settings_for(kiln, profile, start_index=1),
                           runlog=RunLog.in_folder(tmp_path))
        assert await engine.run() == st.COMPLETED
    samples = RunLog.in_folder(tmp_path).samples(engine.run_id)
    assert np.nanmax(samples["setpoint_c"]) == pytest.approx(205.0, abs=0.1)
    holding = samples["state"] == st.STATE_CODE[st.HOLDING]
    assert holding.any() and samples["chamber_c"][holding].min() > 195.0
