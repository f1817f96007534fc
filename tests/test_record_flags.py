"""Sensor faults are logged as a flag (issue 17, part 4), so a what-if over the run log sees
what the engine saw: a thermocouple fault, not a lost link."""

from __future__ import annotations

from pathlib import Path

from tests.conftest import oven_settings
from tuikiln.analysis.loading import from_log
from tuikiln.analysis.whatif import compare_alarms
from tuikiln.drivers.fake import ManualClock, ScriptedDevice
from tuikiln.engine import states as st
from tuikiln.engine.runner import RunEngine
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog

PROFILE = """
name = "Ramp"
units = "C"
about = "Invented for a test."

[[step]]
ramp = "600/h"
to = 300

[[step]]
hold = "10m"
"""


async def test_a_sensor_fault_replays_as_a_sensor_fault(tmp_path: Path) -> None:
    # The device answers, but without a temperature (an open thermocouple) from poll 30 on.
    readings = [20.0 + i for i in range(30)] + [None] * 600
    device = ScriptedDevice(readings, clock=ManualClock())
    profile = parse_profile(PROFILE, "p.toml", max_c=1100.0)
    log = RunLog.in_folder(tmp_path)
    engine = RunEngine(device, profile, oven_settings(), runlog=log)
    await engine.run()
    reader = RunLog.in_folder(tmp_path)
    run_id = engine.run_id
    assert run_id is not None
    samples = reader.samples(run_id)
    events = reader.events(run_id)
    info = reader.run(run_id)
    assert info is not None
    flags = samples["flags"]
    assert (flags & st.FLAG_SENSOR_FAULT).any()
    assert not (flags & st.FLAG_NO_READING).any()  # the device never went silent
    logged = {(e.get("detail") or {}).get("alarm") for e in events} - {None}
    assert "sensor-bad" in logged
    loaded = from_log(samples, events, started=info.started, profile=profile,
                      outcome=info.status, units="C")
    again = loaded.replay(rerun=True)  # what-if with the same thresholds
    changes = compare_alarms(events, again.events)
    assert changes and all(c.change == "fires in both" for c in changes), [
        (c.code, c.change) for c in changes]
