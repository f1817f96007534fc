"""Issue 21: the run log writes each sample once and keeps it once.

A sample is a row of `samples` until its run has BLOCK_ROWS rows past its last block; the
commit that crosses that line packs them into one block and deletes the rows. A block is
never rewritten. Readers get blocks then rows in one read transaction, so a sealing commit
can never hide or double a sample. Logs written before (every sample a row, and the same
samples again in blocks that grew) read the same. The rules are tuikiln's own (the module
docstring of tuikiln/runlog.py); no published source applies.
"""

from __future__ import annotations

import hashlib
import sqlite3
import threading

import numpy as np

from tests.test_runlog import fill
from tuikiln.runlog import BLOCK_ROWS, RunLog, _pack_block


def blocks(path) -> dict[int, str]:
    """Every block's id and a digest of its bytes, read with plain sqlite3."""
    with sqlite3.connect(path) as conn:
        return {row[0]: hashlib.sha256(row[1]).hexdigest()
                for row in conn.execute("SELECT id, data FROM sample_blocks")}


def stored(path, run_id: int) -> tuple[int, int]:
    """(rows in `samples`, samples in blocks) for the run, read with plain sqlite3."""
    with sqlite3.connect(path) as conn:
        rows = conn.execute("SELECT COUNT(*) FROM samples WHERE run_id = ?",
                            (run_id,)).fetchone()[0]
        packed = conn.execute("SELECT COALESCE(SUM(n), 0) FROM sample_blocks WHERE run_id = ?",
                              (run_id,)).fetchone()[0]
    return rows, packed


def test_each_sample_is_kept_once_and_no_block_is_rewritten(run_log: RunLog) -> None:
    rec = run_log.start_run(kiln="k", profile="p", started=0.0)
    seen: dict[int, str] = {}
    n = 0
    for size in (1, 7, 300, BLOCK_ROWS - 1, 2, BLOCK_ROWS * 2 + 5, 1, 1, 600):
        fill(rec, size, t0=float(n))
        n += size
        assert rec.flush()
        now = blocks(run_log.path)
        for block_id, digest in seen.items():
            assert now[block_id] == digest, f"block {block_id} was rewritten"
        seen = now
        rows, packed = stored(run_log.path, rec.run_id)
        assert rows + packed == n  # each sample once, nowhere twice
        assert rows < BLOCK_ROWS  # the rest is packed
        assert run_log.sample_count(rec.run_id) == n
    s = run_log.samples(rec.run_id)
    assert np.array_equal(s["t"], np.arange(n, dtype=float))
    assert run_log.last_sample(rec.run_id)["t"] == n - 1
    rec.close()


def test_a_sample_reads_the_same_before_and_after_its_block_is_sealed(run_log: RunLog) -> None:
    rec = run_log.start_run(kiln="k", profile="p", started=0.0)
    fill(rec, BLOCK_ROWS - 1)
    rec.flush()
    before = run_log.samples(rec.run_id)
    assert stored(run_log.path, rec.run_id) == (BLOCK_ROWS - 1, 0)  # all still rows
    fill(rec, 1, t0=BLOCK_ROWS - 1.0)
    rec.flush()
    after = run_log.samples(rec.run_id)
    assert stored(run_log.path, rec.run_id) == (0, BLOCK_ROWS)  # all in one block now
    for name, column in before.items():
        assert np.array_equal(column, after[name][:-1], equal_nan=True), name
    # since_t reads across the line between the blocks and the rows after them
    fill(rec, 10, t0=float(BLOCK_ROWS))
    rec.flush()
    late = run_log.samples(rec.run_id, since_t=BLOCK_ROWS - 3.0)
    assert late["t"].tolist() == [float(t) for t in range(BLOCK_ROWS - 2, BLOCK_ROWS + 10)]
    rec.close()


def test_samples_of_one_instant_never_straddle_a_block_end(run_log: RunLog) -> None:
    """A manual clock may log several samples at one time: none may fall between the block
    that ends at that time and the rows after it."""
    rec = run_log.start_run(kiln="k", profile="p", started=0.0)
    times = [float(i // 3) for i in range(BLOCK_ROWS * 3)]  # three samples per instant
    for i, t in enumerate(times):
        rec.sample(t, 20.0 + i, None, None, 100.0, 50.0, 0, 1, 0)
    rec.flush()
    s = run_log.samples(rec.run_id)
    assert s["t"].tolist() == times
    assert s["chamber_c"].tolist() == [20.0 + i for i in range(len(times))]
    assert run_log.sample_count(rec.run_id) == len(times)
    rec.close()


def test_two_runs_writing_at_once_keep_their_own_samples(run_log: RunLog) -> None:
    """Two ovens logging into one folder: their rows interleave; each run seals its own."""
    one = run_log.start_run(kiln="one", profile="p", started=0.0)
    two = run_log.start_run(kiln="two", profile="p", started=0.0)
    for i in range(BLOCK_ROWS * 2 + 50):
        one.sample(float(i), 100.0, None, None, 100.0, 10.0, 0, 1, 0)
        two.sample(float(i) + 0.5, 200.0, None, None, 200.0, 20.0, 0, 1, 0)
        if i % 97 == 0:
            one.flush()
            two.flush()
    one.flush()
    two.flush()
    for rec, base, level in ((one, 0.0, 100.0), (two, 0.5, 200.0)):
        s = run_log.samples(rec.run_id)
        assert np.array_equal(s["t"], np.arange(BLOCK_ROWS * 2 + 50) + base)
        assert set(s["chamber_c"].tolist()) == {level}
        rows, packed = stored(run_log.path, rec.run_id)
        assert rows + packed == BLOCK_ROWS * 2 + 50
        rec.close()


def test_a_reader_never_sees_a_sample_missing_or_twice_while_blocks_are_sealed(tmp_path):
    log = RunLog(tmp_path / "runs.sqlite")
    rec = log.start_run(kiln="k", profile="p", started=0.0)
    total = BLOCK_ROWS * 4
    done = threading.Event()
    problems: list[str] = []

    def read() -> None:
        reader = RunLog(tmp_path / "runs.sqlite")  # another connection, as a screen's
        while not done.is_set():
            t = reader.samples(rec.run_id)["t"]
            if not np.array_equal(t, np.arange(len(t), dtype=float)):
                problems.append(f"{len(t)} samples, not 0..{len(t) - 1} in order")
        reader.close()

    thread = threading.Thread(target=read)
    thread.start()
    try:
        for start in range(0, total, 37):  # commits of 37: many cross a block's end
            fill(rec, min(37, total - start), t0=float(start))
            rec.flush()
    finally:
        done.set()
        thread.join()
    assert problems == []
    assert len(log.samples(rec.run_id)["t"]) == total
    rec.close()
    log.close()


def test_a_log_from_before_reads_the_same_and_a_resumed_run_goes_on_in_it(tmp_path):
    """The earlier layout kept every sample as a row and again in blocks, the last of which
    grew with each commit. Built here with plain SQL, as that code wrote it."""
    path = tmp_path / "runs.sqlite"
    log = RunLog(path)
    rec = log.start_run(kiln="k", profile="p", started=0.0)
    fill(rec, BLOCK_ROWS + 100)  # as rows and blocks in today's layout ...
    rec.flush()
    rec.conn.close()  # the engine dies here
    with sqlite3.connect(path) as conn:  # ... made into the earlier one: rows for all
        columns = log.samples(rec.run_id)
        conn.execute("DELETE FROM samples")
        rows = [(rec.run_id, *(None if isinstance(v, float) and v != v else v
                               for v in (columns[name][i].item() for name in columns)))
                for i in range(len(columns["t"]))]
        conn.executemany("INSERT INTO samples VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)", rows)
        grown = [row[1:] for row in rows[BLOCK_ROWS:]]  # the growing block of the last 100
        conn.execute("INSERT INTO sample_blocks (run_id, first_t, last_t, n, data)"
                     " VALUES (?, ?, ?, ?, ?)",
                     (rec.run_id, grown[0][0], grown[-1][0], len(grown), _pack_block(grown)))
    assert stored(path, rec.run_id) == (BLOCK_ROWS + 100, BLOCK_ROWS + 100)  # all twice
    old = log.samples(rec.run_id)
    assert np.array_equal(old["t"], np.arange(BLOCK_ROWS + 100, dtype=float))
    assert log.sample_count(rec.run_id) == BLOCK_ROWS + 100
    resumed = log.resume_run(rec.run_id)
    fill(resumed, BLOCK_ROWS * 2, t0=BLOCK_ROWS + 100.0)
    resumed.flush()
    s = log.samples(rec.run_id)
    assert np.array_equal(s["t"], np.arange(BLOCK_ROWS * 3 + 100, dtype=float))
    assert log.sample_count(rec.run_id) == BLOCK_ROWS * 3 + 100
    resumed.close()
    log.close()


def test_threads_reading_one_log_at_once_each_get_every_sample(tmp_path):
    """Screens read the log from worker threads; two reads at once on one RunLog must not
    trip over each other's read transaction ("cannot start a transaction within a
    transaction")."""
    from concurrent.futures import ThreadPoolExecutor

    log = RunLog(tmp_path / "runs.sqlite")
    rec = log.start_run(kiln="k", profile="p", started=0.0)
    fill(rec, BLOCK_ROWS * 2 + 30)
    rec.flush()

    def read(_: int) -> tuple[int, int, float]:
        return (len(log.samples(rec.run_id)["t"]), log.sample_count(rec.run_id),
                log.last_sample(rec.run_id)["t"])

    n = BLOCK_ROWS * 2 + 30
    with ThreadPoolExecutor(max_workers=8) as pool:
        assert set(pool.map(read, range(400))) == {(n, n, n - 1.0)}
    rec.close()
    log.close()
