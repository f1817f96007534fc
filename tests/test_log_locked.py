"""Issue 20: a run log another program holds locked neither stalls the engine nor loses a
sample. The engine's log writes run in a thread of their own (tuikiln/logqueue.py); the
samples queue in memory (bounded, with a warning near the bound), the oldest past the bound
spill to a file beside the log, and everything is written, in order, once the lock goes.

A real second sqlite3 connection holds `BEGIN EXCLUSIVE` on the real file while the real
engine runs drivers/fake.py's first-order oven on a manual clock. The rules checked are
tuikiln's own (tuikiln/runlog.py's docstring); no published source applies.
"""

from __future__ import annotations

import asyncio
import sqlite3
import time

import numpy as np
import pytest

from tests.conftest import oven_settings
from tests.test_recovery import Sink
from tests.waiting import eventually, wait_until
from tuikiln import events as ev
from tuikiln.drivers.fake import FirstOrderOven, ManualClock, ScriptedDevice
from tuikiln.engine import states as st
from tuikiln.engine.runner import RunEngine
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog

LONG_HOLD = """
name = "long hold"
units = "C"
[[step]]
ramp = "300/h"
to = 500
[[step]]
hold = "200h"
"""  # long: the run must still be going when the writer's first try (250 ms) has failed
LOCKED_TICKS = 1500  # readings taken while the other program holds the lock (at least)
SPILL_WAIT_S = 30.0  # wall time the spilled case waits for the writer's first spill, at most


class Locker(Sink):
    """Takes the write lock at the 50th reading, counts what the engine does while it is
    held, lowers the queue bound so that the spill is reached, and aborts the run (a local
    command) while the lock is still held (once the writer has said it cannot write), so
    the run's end must wait for it too. With a bound below LOCKED_TICKS it also waits for
    the first spill: the writer spills only after a failed try (one a second of wall time),
    and a loaded machine may take the LOCKED_TICKS readings before a try has found more
    than the bound queued; SPILL_WAIT_S is a safety margin, the spill is checked after."""

    def __init__(self, db_path, device: ScriptedDevice, bound: int) -> None:
        super().__init__()
        self.holder = sqlite3.connect(db_path, isolation_level=None)
        self.device = device
        self.bound = bound
        self.readings = 0
        self.locked_at: int | None = None
        self.writes_before = 0
        self.ticks_locked = 0
        self.logged_when_aborted = -1
        self.aborted = False
        self.locked_wall = 0.0

    def reading(self, sample) -> None:
        self.readings += 1
        engine = self.engine
        if self.readings == 50:
            engine.recorder.queue_bound = self.bound
            self.holder.execute("BEGIN EXCLUSIVE")  # another program writing, for a long time
            self.locked_at = self.readings
            self.locked_wall = time.monotonic()
            self.writes_before = len(self.device.setpoint_writes)
        elif self.locked_at is not None and self.holder.in_transaction:
            self.ticks_locked += 1
            troubled = (ev.ALARM_RAISED, "log-trouble") in [
                (e.kind, e.detail.get("alarm")) for e in self.events]
            spill_seen = (self.bound >= LOCKED_TICKS or engine.recorder.spilled > 0
                          or time.monotonic() > self.locked_wall + SPILL_WAIT_S)
            if self.ticks_locked >= LOCKED_TICKS and troubled and spill_seen and not self.aborted:
                self.aborted = True
                self.logged_when_aborted = engine.runlog.sample_count(engine.run_id)
                engine.command("abort", "test over", "socket")

    def release(self) -> None:
        self.holder.rollback()
        self.holder.close()


@pytest.mark.parametrize("bound", [1_000_000, 400], ids=["in memory", "spilled"])
async def test_a_locked_log_keeps_the_engine_going_and_loses_no_sample(tmp_path, bound):
    log = RunLog.in_folder(tmp_path)
    device = ScriptedDevice(model=FirstOrderOven(tau_s=300.0), clock=ManualClock(1e6))
    sink = Locker(log.path, device, bound)
    profile = parse_profile(LONG_HOLD, "p.toml", max_c=1100.0)
    engine = RunEngine(device, profile, oven_settings(tick_s=2.0), runlog=log, sinks=[sink])
    sink.engine = engine

    def end_waits_for_the_lock() -> bool:  # the run has ended; its writer still retries
        rec = engine.recorder
        return engine.outcome is not None and rec is not None and rec.trouble is not None

    async def release_when_the_end_waits() -> None:
        await eventually(end_waits_for_the_lock, 60, "the run's end to wait for the lock")
        sink.release()

    releaser = asyncio.create_task(release_when_the_end_waits())
    try:
        outcome = await engine.run()
    finally:
        if not releaser.done():
            releaser.cancel()
            sink.release()
    assert outcome == st.ABORTED
    # While the lock was held the engine kept reading, deciding and commanding the oven ...
    assert sink.ticks_locked >= LOCKED_TICKS
    assert len(device.setpoint_writes) - sink.writes_before >= 10  # a 300/h ramp moves it
    kinds = [(e.kind, e.detail.get("alarm")) for e in sink.events]
    assert (ev.ALARM_RAISED, "log-trouble") in kinds  # ... and its alarms were evaluated
    assert sink.logged_when_aborted <= 50  # nothing got past the lock meanwhile
    if bound < LOCKED_TICKS:
        warning = next(e for e in sink.events if e.kind == ev.LOG_QUEUE)
        assert warning.detail["bound"] == bound and warning.detail["queued"] >= 0.8 * bound
        assert engine.recorder.spilled > 0
    else:
        assert not any(e.kind == ev.LOG_QUEUE for e in sink.events)
    # Once the lock went, everything was written: every tick's sample, in order, and every
    # event, the run's end included.
    reader = RunLog.in_folder(tmp_path)
    samples = reader.samples(engine.run_id)
    assert reader.sample_count(engine.run_id) == len(samples["t"]) == engine.ticks + 1
    assert np.all(np.diff(samples["t"]) > 0)
    assert len(reader.events(engine.run_id)) == len(sink.events)
    assert reader.run(engine.run_id).outcome == st.ABORTED
    assert not engine.recorder.spill.exists() and not engine.recorder.mark.path.exists()


def test_samples_and_events_left_in_spills_are_written_by_the_next_engine(tmp_path, caplog):
    log = RunLog.in_folder(tmp_path)
    recorder = log.start_run(kiln="k", profile="p", started=0.0)
    recorder.write_in_background()
    holder = sqlite3.connect(log.path, isolation_level=None)
    holder.execute("BEGIN EXCLUSIVE")
    for i in range(300):
        recorder.sample(float(i), 100.0 + i, None, None, 100.0, 10.0, 0, 1, 0)
    # The alarm and the note of a run's last moments: the record a person is shown.
    recorder.event(ev.Event(298.0, ev.ALARM_RAISED, "Too hot: 530 °C", ev.Severity.CRITICAL,
                            {"alarm": "too-hot"}))
    recorder.event(ev.Event(299.0, ev.NOTE, "Note: door opened", detail={"text": "door"}))
    with caplog.at_level("WARNING", logger="tuikiln.runlog"):
        assert not recorder.close(wait_s=0.5)  # still locked: the queues go to the spills
    assert recorder.spill.exists() and recorder.event_spill.exists()
    said = caplog.text
    assert "still refused at the end of run 1" in said and recorder.spill.path.name in said
    assert recorder.event_spill.path.name in said and "next run" in said
    holder.rollback()
    holder.close()
    assert log.sample_count(recorder.run_id) == 0 and log.events(recorder.run_id) == []
    later = log.start_run(kiln="k", profile="p", started=400.0)  # the next run's engine
    assert not recorder.spill.exists() and not recorder.event_spill.exists()
    chamber = log.samples(recorder.run_id)["chamber_c"]
    assert len(chamber) == 300 and np.array_equal(chamber, 100.0 + np.arange(300))
    events = log.events(recorder.run_id)
    assert [(e["kind"], e["severity"], e["message"]) for e in events] == [
        ("alarm-raised", "critical", "Too hot: 530 °C"), ("note", "info", "Note: door opened")]
    assert events[0]["detail"] == {"alarm": "too-hot"} and events[1]["time"] == 299.0
    assert log.events(later.run_id) == []  # the next run's own record stays its own
    later.close()


def test_samples_in_the_writers_hands_still_count_as_queued(tmp_path):
    # Each try at a locked log takes the queue out of memory for the busy timeout (250 ms);
    # the engine's warning near the bound reads `queued` meanwhile, and read 0 there.
    log = RunLog.in_folder(tmp_path)
    recorder = log.start_run(kiln="k", profile="p", started=0.0)
    holder = sqlite3.connect(log.path, isolation_level=None)
    holder.execute("BEGIN EXCLUSIVE")
    recorder.write_in_background()
    try:
        for i in range(300):
            recorder.sample(float(i), 100.0 + i, None, None, 100.0, 10.0, 0, 1, 0)
        seen: list[int] = []
        tries: set[float] = set()

        def two_more_tries_failed() -> bool:
            seen.append(recorder.queued)
            if recorder.trouble is not None:
                tries.add(recorder._retry_at)  # a new value at each failed try
            return len(tries) >= 3

        wait_until(two_more_tries_failed, 30, "three failed tries at the locked log")
        assert min(seen) == max(seen) == 300, (min(seen), max(seen))
    finally:
        holder.rollback()
        holder.close()
    assert recorder.close(wait_s=10)
    assert log.sample_count(recorder.run_id) == 300
