"""The run log's disk fills up mid-run: the run goes on, the readings are kept in memory, the
log-trouble alarm is raised, and everything is written once there is room again.

A real full disk: the SQLite file lives on a tiny tmpfs mounted for the test (root only;
skipped with the reason otherwise), grown again with `mount -o remount` once the alarm shows.
"""

from __future__ import annotations

import os
import subprocess

import pytest

from tests.conftest import oven_settings
from tests.waiting import wait_until
from tuikiln import events as ev
from tuikiln.drivers.fake import FirstOrderOven, ManualClock, ScriptedDevice
from tuikiln.engine import states as st
from tuikiln.engine.runner import RunEngine
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog

PROFILE = """
name = "long hold"
units = "C"
[[step]]
ramp = "max"
to = 500
[[step]]
hold = "5h"
"""


@pytest.fixture
def tiny_disk(tmp_path):
    folder = tmp_path / "tiny"
    folder.mkdir()
    if os.geteuid() != 0:
        pytest.skip("mounting a tiny tmpfs needs root")
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=160k", "tmpfs", str(folder)],
                          capture_output=True, text=True)
    if done.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {done.stderr.strip()}")
    try:
        yield folder
    finally:
        subprocess.run(["umount", "-l", str(folder)], capture_output=True)


class Grower:
    """Gives the disk room again a while after the log-trouble alarm shows."""

    def __init__(self, folder) -> None:
        self.engine = None  # set by the test once the engine exists
        self.folder = folder
        self.events: list = []
        self.raised_at: float | None = None
        self.grown = False
        self.ticks_in_trouble = 0
        self.ticks = 0

    def event(self, event) -> None:
        self.events.append(event)
        if event.kind == ev.ALARM_RAISED and event.detail["alarm"] == "log-trouble":
            self.raised_at = event.time

    def state(self, state) -> None:
        pass

    def reading(self, sample) -> None:
        self.ticks += 1
        if self.raised_at is None and self.ticks % 50 == 0:
            # The writer thread commits on wall time, and this run on a manual clock covers
            # hours in a second: left alone it could end before the writer ever met the full
            # disk. A flush every 50 ticks paces the run to the writer (it waits for its turn).
            self.engine.recorder.flush()
        if self.raised_at is not None and not self.grown:
            self.ticks_in_trouble += 1
            if self.ticks_in_trouble >= 600:  # ten minutes of readings held in memory
                subprocess.run(["mount", "-o", "remount,size=50m", str(self.folder)],
                               check=True)
                self.grown = True
                # The log is written from its own thread, retrying about once a second of wall
                # time, while this run on a manual clock covers hours in a second: hold this
                # tick until the writer has caught up, so the run is still going when the
                # engine sees the log is fine again (on a loaded machine it could end first).
                recorder = self.engine.recorder
                wait_until(lambda: recorder.trouble is None, 30.0, "the log writer to recover")


async def test_a_full_disk_keeps_the_run_going_and_writes_everything_later(tiny_disk):
    import tuikiln.runlog as runlog

    old = runlog.RETRY_AFTER_S
    runlog.RETRY_AFTER_S = 0.0  # retry at every commit (the test runs hours in a second)
    try:
        device = ScriptedDevice(model=FirstOrderOven(tau_s=300.0), clock=ManualClock())
        profile = parse_profile(PROFILE, "p.toml", max_c=1100.0)
        sink = Grower(tiny_disk)
        log = RunLog.in_folder(tiny_disk)
        engine = RunEngine(device, profile, oven_settings(), runlog=log, sinks=[sink])
        sink.engine = engine
        outcome = await engine.run()
    finally:
        runlog.RETRY_AFTER_S = old
    assert outcome == st.COMPLETED
    assert sink.raised_at is not None and sink.grown
    kinds = [(e.kind, e.detail.get("alarm")) for e in sink.events]
    assert (ev.ALARM_CLEARED, "log-trouble") in kinds
    # Nothing was lost: every tick's sample and every event reached the file in the end.
    reader = RunLog.in_folder(tiny_disk)
    assert reader.sample_count(engine.run_id) == engine.ticks + 1
    assert len(reader.samples(engine.run_id)["t"]) == engine.ticks + 1
    assert len(reader.events(engine.run_id)) == len(sink.events)
    assert reader.run(engine.run_id).outcome == st.COMPLETED
    trouble = next(e for e in sink.events if e.kind == ev.ALARM_RAISED)
    assert "full" in trouble.message
