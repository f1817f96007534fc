"""The run log on real SQLite files: round trip, NULLs, live reading, failing writes."""

from __future__ import annotations

import math
import sqlite3

import numpy as np

from tuikiln.events import Event
from tuikiln.runlog import BLOCK_ROWS, RunLog


def fill(recorder, n: int, t0: float = 0.0) -> None:
    for i in range(n):
        recorder.sample(t0 + i, 20.0 + i * 0.5, None if i % 3 == 0 else 19.0 + i * 0.5,
                        18.0, 100.0, 50.0, i // 100, i % 5, i % 2)


def test_samples_round_trip_with_nulls_as_nan(run_log: RunLog) -> None:
    log = run_log
    rec = log.start_run(kiln="k", profile="p", started=0.0, profile_text="units='C'",
                        load={"material": "AISI O1"})
    n = BLOCK_ROWS * 2 + 77  # several full blocks and a growing one
    fill(rec, n)
    rec.end("completed", float(n))
    rec.close()
    s = log.samples(rec.run_id)
    assert len(s["t"]) == n
    assert np.array_equal(s["t"], np.arange(n, dtype=float))
    assert math.isnan(s["load_c"][0]) and s["load_c"][1] == np.float32(19.5)
    assert s["step"][-1] == (n - 1) // 100 and s["state"][7] == 2 and s["flags"][3] == 1
    # Counted over the blocks and the rows after them (each sample is kept once).
    assert log.sample_count(rec.run_id) == n
    info = log.run(rec.run_id)
    assert info.outcome == "completed" and info.load == {"material": "AISI O1"}
    assert [r.id for r in log.runs()] == [rec.run_id]


def test_since_t_and_events_after_id(run_log: RunLog) -> None:
    log = run_log
    rec = log.start_run(kiln="k", profile="p", started=0.0)
    fill(rec, 3000)
    rec.event(Event(1.0, "note", "one", detail={"text": "one"}))
    rec.event(Event(2.0, "note", "two"))
    rec.flush()
    s = log.samples(rec.run_id, since_t=2500.0)
    assert s["t"][0] == 2501.0 and len(s["t"]) == 499
    events = log.events(rec.run_id)
    assert [e["message"] for e in events] == ["one", "two"]
    assert events[0]["detail"] == {"text": "one"}
    assert [e["message"] for e in log.events(rec.run_id, after_id=events[0]["id"])] == ["two"]


def test_a_reader_sees_committed_samples_while_the_run_goes_on(tmp_path):
    path = tmp_path / "runs.sqlite"
    log = RunLog(path)
    rec = log.start_run(kiln="k", profile="p", started=0.0)
    fill(rec, 10)
    rec.flush()
    reader = RunLog(path)  # another connection, as a screen in another process would have
    assert len(reader.samples(rec.run_id)["t"]) == 10
    assert reader.run(rec.run_id).outcome is None
    assert reader.run(rec.run_id).status == "running"  # our pid is alive
    fill(rec, 5, t0=10.0)
    rec.flush()
    assert len(reader.samples(rec.run_id)["t"]) == 15
    assert sqlite3.connect(path).execute("PRAGMA journal_mode").fetchone()[0] == "wal"


def test_failing_writes_keep_the_samples_and_retry(run_log: RunLog) -> None:
    log = run_log
    rec = log.start_run(kiln="k", profile="p", started=0.0)
    # A real SQLite error on every insert, as a full disk would give.
    rec.conn.execute("CREATE TEMP TRIGGER full BEFORE INSERT ON samples "
                     "BEGIN SELECT RAISE(FAIL, 'database or disk is full'); END")
    fill(rec, 100)
    assert not rec.flush()
    assert rec.trouble and "full" in rec.trouble
    assert rec.pending == 100
    rec.conn.execute("DROP TRIGGER full")
    assert rec.flush(force=True)
    assert rec.trouble is None and log.sample_count(rec.run_id) == 100
    assert len(log.samples(rec.run_id)["t"]) == 100
