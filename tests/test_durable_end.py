"""Issue 20: an abort on a full disk is durable before a restart can heat again.

The engine writes the run's end into its end mark (tuikiln/runlog.py, EndMark) before the
database; recovery (tuikiln/engine/recovery.py) ends a run whose end is marked, whatever
`on_restart` says, and the restarted engine never heats. The rules are tuikiln's own (the
modules' docstrings); no published source applies.

The real case: the run log on a tiny tmpfs filled to the last byte (root only; skipped with
the reason otherwise). The same path without root: an SQLite trigger that fails the run's end as
a full disk does (SQLite's own error words), as tests/test_runlog.py does.
"""

from __future__ import annotations

import contextlib
import os
import subprocess

import pytest

from tests.conftest import oven_settings
from tests.test_disk_trouble import PROFILE as DISK_TROUBLE_PROFILE
from tests.test_disk_trouble import tiny_disk  # noqa: F401 - a fixture (a 160 KiB tmpfs)
from tests.test_recovery import Sink, dead_pid
from tuikiln import events as ev
from tuikiln.drivers.fake import FirstOrderOven, ManualClock, ScriptedDevice
from tuikiln.engine import recovery
from tuikiln.engine import states as st
from tuikiln.engine.runner import RunEngine
from tuikiln.profile import parse_profile
from tuikiln.runlog import EndMark, RunLog

LONG_HOLD = DISK_TROUBLE_PROFILE  # a ramp to 500 °C, then a 5 h hold


def engine_on(log: RunLog, device: ScriptedDevice, sink: Sink, resume=None) -> RunEngine:
    profile = parse_profile(LONG_HOLD, "p.toml", max_c=1100.0)
    engine = RunEngine(device, profile, oven_settings(tick_s=2.0), runlog=log, sinks=[sink],
                       resume=resume)
    sink.engine = engine
    return engine


class AbortWhen(Sink):
    """Aborts the run (a local command) at the first reading `ready()` says yes to."""

    def __init__(self, ready) -> None:
        super().__init__()
        self.ready = ready
        self.answer: dict | None = None

    def reading(self, sample) -> None:
        if self.answer is None and self.ready(self):
            self.answer = self.engine.command("abort", "stop it now", "socket")


def in_hold(sink: Sink) -> bool:
    stepper = sink.engine.rules.stepper
    return stepper.index == 1 and stepper.state == st.HOLDING


async def restart_and_check(log: RunLog, model: FirstOrderOven, clock: ManualClock,
                            run_id: int) -> None:
    """A restart asked to carry on ("continue") ends the run aborted and never heats."""
    log._conn.execute("UPDATE runs SET pid = ? WHERE id = ?", (dead_pid(), run_id))
    # As after kill -9 in a hold: the controller still holds its last setpoint.
    model.setpoint_c, model.heating = 500.0, True
    clock.advance(60.0)
    info = recovery.find_unfinished(log, "Test oven")
    assert info is not None and info.id == run_id
    plan = recovery.plan_resume(log, info, "continue", now=clock.now())
    assert plan.policy == "end" and plan.end_outcome == st.ABORTED, plan
    device = ScriptedDevice(model=model, clock=clock)
    sink = Sink()
    outcome = await engine_on(log, device, sink, resume=plan).run()
    assert outcome == st.ABORTED
    assert not model.heating  # driven safe at once ...
    assert all(value <= 0.0 for _, value in device.setpoint_writes), device.setpoint_writes
    assert ev.SAFE_STATE in sink.kinds()
    assert log.run(run_id).outcome == st.ABORTED  # ... and the end is in the log now
    assert not EndMark(log.path, run_id).path.exists()


async def test_the_end_mark_is_removed_once_the_log_has_the_end(tmp_path):
    log = RunLog.in_folder(tmp_path)
    sink = AbortWhen(in_hold)
    device = ScriptedDevice(model=FirstOrderOven(tau_s=300.0), clock=ManualClock())
    engine = engine_on(log, device, sink)
    mark = EndMark(log.path, 1)
    assert await engine.run() == st.ABORTED
    assert log.run(engine.run_id).outcome == st.ABORTED
    assert not mark.path.exists() and log.end_mark(engine.run_id) is None


async def test_a_crash_leaves_a_mark_without_an_end_that_changes_nothing(tmp_path):
    log = RunLog.in_folder(tmp_path)
    recorder = log.start_run(kiln="k", profile="p", started=0.0)
    mark = EndMark(log.path, recorder.run_id)
    assert mark.path.stat().st_size > 0 and mark.path.stat().st_mode & 0o777 == 0o600
    assert log.end_mark(recorder.run_id) is None  # reserved, no end in it
    recorder.conn.close()  # the engine dies here
    recorder = log.resume_run(recorder.run_id)
    assert log.end_mark(recorder.run_id) is None
    assert recorder.end(st.COMPLETED, 5.0) and not mark.path.exists()
    recorder.close()


@pytest.fixture
def short_close(monkeypatch):
    """The end of a run waits for a refusing log (runlog.CLOSE_WAIT_S, 60 s) before it
    spills; these tests need not wait that long."""
    monkeypatch.setattr("tuikiln.runlog.CLOSE_WAIT_S", 1.0)



def refuse_the_end_once_holding(log: RunLog):
    """An AbortWhen condition: once the run holds, the log refuses to record a run's end
    (an SQLite trigger with SQLite's own words for a full disk, for every connection)."""

    def fail_the_end(sink: Sink) -> bool:
        if not in_hold(sink):
            return False
        log._conn.execute("CREATE TRIGGER full BEFORE UPDATE OF outcome ON runs "
                          "BEGIN SELECT RAISE(FAIL, 'database or disk is full'); END")
        return True

    return fail_the_end

async def test_an_end_the_database_refused_is_kept_and_the_restart_does_not_heat(
        tmp_path, short_close):
    clock = ManualClock(1_000_000.0)
    model = FirstOrderOven(tau_s=300.0)
    log = RunLog.in_folder(tmp_path)

    fail_the_end = refuse_the_end_once_holding(log)
    sink = AbortWhen(fail_the_end)
    engine = engine_on(log, ScriptedDevice(model=model, clock=clock), sink)
    assert await engine.run() == st.ABORTED
    assert log.run(engine.run_id).outcome is None  # the database did not take the end
    assert log.end_mark(engine.run_id)["outcome"] == st.ABORTED
    log._conn.execute("DROP TRIGGER full")  # room again
    await restart_and_check(log, model, clock, engine.run_id)


def fill_to_the_last_byte(folder) -> None:
    fd = os.open(folder / "filler", os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o600)
    try:
        for size in (65536, 4096, 1):  # big pieces, then the last partial page
            with contextlib.suppress(OSError):
                while os.write(fd, b"\0" * size):
                    pass
    finally:
        os.close(fd)


async def test_an_abort_on_a_really_full_disk_does_not_heat_again_on_restart(tiny_disk,  # noqa: F811
                                                                             short_close):
    clock = ManualClock(1_000_000.0)
    model = FirstOrderOven(tau_s=300.0)
    log = RunLog.in_folder(tiny_disk)

    def disk_full(sink: Sink) -> bool:
        if not in_hold(sink):
            return False
        if not (tiny_disk / "filler").exists():
            fill_to_the_last_byte(tiny_disk)
        # Wait for the log to say so: the samples since are kept in memory. The writer
        # thread commits on wall time, and this manual-clock run covers hours in a second,
        # so each reading waits for the writer's turn (as tests/test_disk_trouble.py does):
        # the writer meets the full disk long before the 5 h hold could end.
        recorder = sink.engine.recorder
        if recorder.trouble is None:
            recorder.flush()
        return recorder.trouble is not None

    sink = AbortWhen(disk_full)
    engine = engine_on(log, ScriptedDevice(model=model, clock=clock), sink)
    assert await engine.run() == st.ABORTED
    assert sink.answer is not None and sink.answer["ok"]
    assert any(e.kind == ev.ALARM_RAISED and e.detail.get("alarm") == "log-trouble"
               for e in sink.events)
    assert not model.heating  # the safe state reached the device first regardless
    # Whether the database still takes the one-page end on a full tmpfs varies from run to
    # run (SQLite may find room inside its WAL file; tmpfs counts free pages per CPU), so
    # both ways are checked: the end is in the database, or it is in the mark.
    logged = log.run(engine.run_id).outcome
    marked = log.end_mark(engine.run_id)
    assert logged == st.ABORTED or (marked is not None and marked["outcome"] == st.ABORTED)
    # The person makes room and the service starts the engine again. Room for certain: the
    # filler alone may free less than the restart needs, as SQLite may have grown its WAL
    # into the space first (then the restart refuses with one clear error, as
    # restart_on_a_log_that_refuses checks below).
    (tiny_disk / "filler").unlink()
    subprocess.run(["mount", "-o", "remount,size=2m", str(tiny_disk)], check=True)
    if logged is None:
        await restart_and_check(log, model, clock, engine.run_id)
    else:
        log._conn.execute("UPDATE runs SET pid = ? WHERE id = ?", (dead_pid(), engine.run_id))
        assert recovery.find_unfinished(log, "Test oven") is None  # nothing to carry on


async def restart_on_a_log_that_refuses(tmp_path, refuse) -> None:
    """kill -9 mid-hold (the controller left heating), then a restart whose run log cannot
    take the run (`refuse(folder)`): one clear error, and the oven driven safe first. (On a
    real full tmpfs the restart's one-page write often still fits in the WAL file, so the
    refusal is made certain with SQLite's own error words.)"""
    from tests.test_recovery import HOLD, crashed_run, engine_for, in_hold_for
    from tuikiln.engine.runner import CannotLog

    log, model, clock, _ = await crashed_run(tmp_path, HOLD, in_hold_for(60.0))
    assert model.heating
    refuse(tmp_path)
    info = recovery.find_unfinished(log, "Test oven")
    plan = recovery.plan_resume(log, info, "continue", now=clock.now())
    device = ScriptedDevice(model=model, clock=clock)
    with pytest.raises(CannotLog) as caught:
        await engine_for(HOLD, device, log, Sink(), resume=plan).run()
    assert caught.value.exit_code == 4
    words = str(caught.value)
    assert "full" in words and "driven safe" in words and "\n" not in words
    assert not model.heating and not any(value > 0.0 for _, value in device.setpoint_writes)


async def test_a_restart_the_log_cannot_take_drives_safe_and_says_so(tmp_path):
    def refuse(folder) -> None:
        RunLog.in_folder(folder)._conn.execute(
            "CREATE TRIGGER full BEFORE UPDATE OF pid ON runs "
            "BEGIN SELECT RAISE(FAIL, 'database or disk is full'); END")

    await restart_on_a_log_that_refuses(tmp_path, refuse)



async def test_runs_shows_an_end_kept_only_in_its_mark_without_writing(
        tmp_path, short_close, capsys):
    """`tuikiln runs` reads the end mark: the aborted run is "aborted", not "unfinished" (nor
    "running": this test's own process is the run's pid), and the log is left as it was."""
    import hashlib
    import json

    from tuikiln.cli import main

    clock = ManualClock(1_000_000.0)
    log = RunLog.in_folder(tmp_path)

    fail_the_end = refuse_the_end_once_holding(log)
    engine = engine_on(log, ScriptedDevice(model=FirstOrderOven(tau_s=300.0), clock=clock),
                       AbortWhen(fail_the_end))
    assert await engine.run() == st.ABORTED
    run_id = engine.run_id
    assert log.run(run_id).outcome is None  # only the mark has the end
    ended = log.end_mark(run_id)["ended"]
    log.close()

    def fingerprint() -> list[tuple[str, str]]:
        # The database and the mark; a WAL reader's -shm/-wal files are SQLite's own.
        return sorted((p.name, hashlib.sha256(p.read_bytes()).hexdigest())
                      for p in tmp_path.iterdir()
                      if p.is_file() and not p.name.endswith(("-shm", "-wal")))

    before = fingerprint()
    capsys.readouterr()
    assert main(["runs", "--data", str(tmp_path), "--json"]) == 0
    (row,) = json.loads(capsys.readouterr().out)
    assert row["outcome"] == st.ABORTED and row["ended"] == ended and row["end_in_mark"]
    assert main(["runs", "--data", str(tmp_path)]) == 0
    text = capsys.readouterr().out
    assert "aborted" in text and "unfinished" not in text and "end mark" in text
    assert fingerprint() == before  # a reader: not a byte written, the mark kept
    assert EndMark(tmp_path / log.path.name, run_id).path.exists()
