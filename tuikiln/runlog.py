"""The run log: every run, every sample and every event, in one SQLite file (WAL).

    log = RunLog(data_dir / "runs.sqlite")
    recorder = log.start_run(kiln="Bench oven", profile=profile, ...)   # the engine only
    recorder.sample(t, chamber_c, load_c, core_c, setpoint_c, output_pct, step, state, flags)
    recorder.event(event)
    recorder.end("completed", ended_t)
    log.runs(); log.samples(run_id) -> dict of numpy arrays; log.events(run_id, after_id)

The engine is the only writer. Samples and events are kept in memory and written in one
transaction at least once a second of wall time (or every `batch` samples, for simulated
runs faster than real time), so a kill loses at most about a second. Readers use their own
connections; WAL keeps them from blocking the writer and the writer from blocking them.

Commits stay short: the writer never copies the WAL back into the database itself (SQLite's
automatic checkpoint would land, every thousand pages, inside one unlucky commit); a small
thread with its own connection does it beside the engine (`_WalCheckpointer`). The writer
commits with `synchronous=FULL`, so a committed second survives a power cut of the whole
machine, not only a killed process.

Restart recovery: with every commit the engine's resume point (which step, its state, the
hold clock; `RunRecorder.resume_point`) replaces the run's row in `resume_points`, in the
same transaction as the samples it belongs to. A restarted engine reads it back
(`RunLog.resume_point`) and appends to the same run (`RunLog.resume_run`), so replay sees one
run with a GAP event where the engine was away.

When a write fails (disk full, file made read-only) nothing is lost from memory: the
recorder keeps the rows, sets `trouble` to the reason (the engine raises an alarm) and tries
again a few seconds later. The run goes on.

The engine's recorder writes from a thread of its own (`write_in_background`, see
tuikiln/logqueue.py): its loop only queues rows, so a log another program holds locked for
minutes, or a slow fsync, never delays a reading or a setpoint. The queue is bounded
(MEMORY_QUEUE_ROWS, the engine warns at QUEUE_WARN_FRACTION of it); past the bound the oldest
samples spill to `runs.sqlite.run-N.spill` and are written back first, so the order holds.
When the run's process ends with the log still refusing (CLOSE_WAIT_S), the samples and the
events still queued go to spill files (`runs.sqlite.run-N.spill`, `.events-spill`), which
the next engine that opens the log writes back before anything of its own. The end is not
spilled: it has its mark.

A run's end must survive a disk that is full at that moment: otherwise the run would look
unfinished and a restart with `on_restart = "continue"` would heat the oven again after an
abort. So each run keeps a small *end mark* beside the database (`EndMark`, the file
`runs.sqlite.run-N.end`), written and synced when the run starts, while there is room. The
end is written into that file first (in place, over the bytes already there: no new disk
blocks are needed, so a full disk takes it), synced, then into the database; once the
database has it the mark is removed. Recovery reads a mark that is left (`RunLog.end_mark`)
and ends the run instead of carrying it on.

Each sample is written once, as a row of `samples`, and kept once. Reading a week of
samples (604,800 rows) row by row through sqlite3 takes over a second in Python, so once a
run has BLOCK_ROWS rows past its last block, the commit that crosses that line also packs
them into one row of `sample_blocks` (a BLOB in columns: t as float64, temperatures and
output as float32, step, state and flags as integers) and deletes those rows, in the same
transaction. A block is never rewritten: a commit costs the new rows, not the growing block
(before, each commit rewrote a block of up to 1,024 rows: 53 KB of WAL a sample at one
sample a commit, 8.4 KB now; tests/bench/runlog_write.py).
`samples()` reads, in one read transaction, the run's blocks (a few hundred BLOBs and
`numpy.frombuffer`) and the rows after the last block (fewer than BLOCK_ROWS), so a live
run's reader sees every committed sample. Logs from before this (every sample a row, and
the same samples in blocks that grew) read the same way: their rows all lie within the blocks.
To read samples with SQL alone, `tuikiln export` writes them as CSV.

Sample times `t` and event times are the engine's clock (epoch seconds; simulated time in a
simulated run); `runs.started` is on the same clock, `runs.wall_started` on the wall clock.
"""

from __future__ import annotations

import contextlib
import json
import logging
import math
import os
import sqlite3
import threading
import time
from collections.abc import Callable, Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from tuikiln.engine.states import Outcome, RunState
from tuikiln.errors import UserError
from tuikiln.events import Event, Severity
from tuikiln.logqueue import BackgroundWriter, SpillFile
from tuikiln.plaintext import plain, plain_tree

RUNLOG_NAME = "runs.sqlite"
SCHEMA_VERSION = 1
SAMPLE_COLUMNS = ("t", "chamber_c", "load_c", "core_c", "setpoint_c", "output_pct", "step",
                  "state", "flags")
_FLOAT_COLUMNS = SAMPLE_COLUMNS[:6]
_INT_COLUMNS = SAMPLE_COLUMNS[6:]
_NULL = -1.0e308  # stands for NULL while rows stream into numpy (NaN cannot be stored)
RETRY_AFTER_S = 5.0
# The engine writes inside its loop: a log another program holds locked must cost a tick a
# moment, not ten seconds (samples stay in memory and the write is retried), except for the
# run's end, which waits as long as a reader does.
WRITER_BUSY_MS = 250
READER_BUSY_MS = 10_000
BLOCK_ROWS = 1024
# Column layout of one packed block (in this order, each n values, little-endian).
_BLOCK_TYPES: tuple[tuple[str, str], ...] = (
    ("t", "<f8"), ("chamber_c", "<f4"), ("load_c", "<f4"), ("core_c", "<f4"),
    ("setpoint_c", "<f4"), ("output_pct", "<f4"), ("step", "<i2"), ("state", "<i2"),
    ("flags", "<i4"),
)
MARK_BYTES = 512  # an end mark's fixed size: written at the start, overwritten in place
MEMORY_QUEUE_ROWS = 100_000  # about 28 h at 1 s (some 30 MB) queued in memory, then spilled
QUEUE_WARN_FRACTION = 0.8  # the engine warns when the memory queue is this full
BACKGROUND_RETRY_S = 1.0  # the writer thread retries a locked or full log this often
FLUSH_WAIT_S = 15.0  # flush() waits this long for the writer thread
CLOSE_WAIT_S = 60.0  # the end of a run waits this long for a locked or full log, then spills
MAX_KEPT_SAMPLES = 5_000_000  # a week at 1 s is 604,800: this is the memory cap while failing

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT);
CREATE TABLE IF NOT EXISTS runs (
    id INTEGER PRIMARY KEY,
    kiln TEXT NOT NULL,
    profile TEXT NOT NULL,
    profile_path TEXT,
    profile_text TEXT,
    kiln_text TEXT,
    load_json TEXT,
    units TEXT,
    device TEXT,
    speed TEXT,
    watch_only INTEGER DEFAULT 0,
    started REAL NOT NULL,
    wall_started REAL,
    ended REAL,
    outcome TEXT,
    pid INTEGER
);
CREATE TABLE IF NOT EXISTS samples (
    run_id INTEGER NOT NULL,
    t REAL NOT NULL,
    chamber_c REAL,
    load_c REAL,
    core_c REAL,
    setpoint_c REAL,
    output_pct REAL,
    step INTEGER,
    state INTEGER,
    flags INTEGER
);
CREATE INDEX IF NOT EXISTS samples_run_t ON samples (run_id, t);
CREATE TABLE IF NOT EXISTS sample_blocks (
    id INTEGER PRIMARY KEY,
    run_id INTEGER NOT NULL,
    first_t REAL NOT NULL,
    last_t REAL NOT NULL,
    n INTEGER NOT NULL,
    data BLOB NOT NULL
);
CREATE INDEX IF NOT EXISTS sample_blocks_run ON sample_blocks (run_id, last_t);
CREATE TABLE IF NOT EXISTS events (
    id INTEGER PRIMARY KEY,
    run_id INTEGER NOT NULL,
    t REAL NOT NULL,
    kind TEXT NOT NULL,
    severity TEXT NOT NULL,
    message TEXT NOT NULL,
    detail TEXT
);
CREATE INDEX IF NOT EXISTS events_run ON events (run_id, id);
CREATE TABLE IF NOT EXISTS resume_points (
    run_id INTEGER PRIMARY KEY,
    t REAL NOT NULL,
    data TEXT NOT NULL
);
"""
CHECKPOINT_EVERY_ROWS = 20_000  # about 2-4 MB of WAL: copied back by the side thread
CHECKPOINT_EVERY_S = 30.0


def default_data_dir(data: str | None = None) -> Path:
    """The data folder: `data` (from --data / TUIKILN_DATA) or the user's data folder."""
    if data:
        return Path(data).expanduser()
    import platformdirs

    return Path(platformdirs.user_data_dir("tuikiln"))


def private_folder(path: Path) -> Path:
    """Make `path` (and its parents) if missing, the new ones 0700: run logs say when the
    house is empty and what the oven is doing. An existing folder keeps its mode."""
    for folder in reversed([path, *path.parents]):
        if not folder.exists():
            folder.mkdir(mode=0o700, exist_ok=True)
    return path


def open_private(path: Path, mode: str = "ab") -> Any:
    """Open a file for writing, created 0600 (the engine's own log file)."""
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | (os.O_APPEND if "a" in mode else os.O_TRUNC),
                 0o600)
    return os.fdopen(fd, mode)


def log_trouble(path: Path, exc: BaseException) -> UserError:
    """One line for a run log that cannot be opened or read."""
    if isinstance(exc, OSError):
        what = exc.strerror or str(exc)
        return UserError(f"cannot use the data folder {path.parent}: {what} "
                         "(is it read-only or full? --data picks another)")
    words = str(exc) or type(exc).__name__
    hint = {"database is locked": "another program holds it locked: try again when it is done",
            "attempt to write a readonly database": "the file or its folder is read-only",
            "database or disk is full": "the disk is full: make room, or --data elsewhere",
            "unable to open database file": "the file or its folder cannot be opened "
            "(read-only, missing or full?)"}.get(words, "is the file damaged? Keep a copy "
                                                 "and move it aside to start a new log")
    return UserError(f"the run log {path} cannot be used: {words}; {hint}")


@dataclass(frozen=True)
class RunInfo:
    id: int
    kiln: str
    profile: str
    started: float
    ended: float | None
    outcome: str | None
    """None while the run goes on (or if its process was killed: see `status`)."""
    units: str = "C"
    device: str = ""
    speed: str = ""
    watch_only: bool = False
    wall_started: float | None = None
    profile_path: str | None = None
    profile_text: str = ""
    kiln_text: str = ""
    load: Mapping[str, Any] | None = None
    pid: int | None = None

    @property
    def status(self) -> str:
        """The outcome, "running", or "unfinished" when the engine died without ending it."""
        if self.outcome:
            return self.outcome
        if self.pid and pid_alive(self.pid):
            return RunState.RUNNING
        return Outcome.UNFINISHED

    def summary(self) -> dict[str, Any]:
        return {"id": self.id, "kiln": self.kiln, "profile": self.profile,
                "started": self.started, "ended": self.ended, "outcome": self.status,
                "units": self.units, "device": self.device, "speed": self.speed,
                "watch_only": self.watch_only, "wall_started": self.wall_started}


def pid_alive(pid: int) -> bool:
    """Whether a process with this id is running (ours or another user's)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _connect(path: Path, *, writer: bool = False) -> sqlite3.Connection:
    conn = sqlite3.connect(str(path), timeout=10.0, isolation_level=None,
                           check_same_thread=False)
    conn.execute("PRAGMA journal_mode=WAL")
    if writer:
        # FULL: the WAL is synced at every commit, so a power cut loses at most the second
        # not yet committed. No automatic checkpoint: _WalCheckpointer does it off the loop.
        conn.execute("PRAGMA synchronous=FULL")
        conn.execute("PRAGMA wal_autocheckpoint=0")
    else:
        conn.execute("PRAGMA synchronous=NORMAL")
    conn.execute(f"PRAGMA busy_timeout={WRITER_BUSY_MS if writer else READER_BUSY_MS}")
    return conn


def _connect_reader(path: Path) -> sqlite3.Connection:
    """A connection that can only read: SQLite refuses every write through it, so a screen
    or a listing can never create the file, add schema or race the engine's commits."""
    if not path.exists() or path.stat().st_size == 0:
        # Nothing logged yet (or the engine is making the file this instant): an empty log
        # in memory answers every question with "none".
        conn = sqlite3.connect(":memory:", isolation_level=None, check_same_thread=False)
        conn.executescript(_SCHEMA)
        return conn
    conn = sqlite3.connect(path.resolve().as_uri() + "?mode=ro", uri=True, timeout=10.0,
                           isolation_level=None, check_same_thread=False)
    conn.execute(f"PRAGMA busy_timeout={READER_BUSY_MS}")
    tables = {row[0] for row in conn.execute("SELECT name FROM sqlite_master")}
    if not {"runs", "meta"} <= tables:
        conn.close()
        raise sqlite3.DatabaseError("it is not a run log (it has no table of runs)")
    # Reading a page past the first finds most damage here, where the path is known, as the
    # writer's schema check does.
    conn.execute("SELECT value FROM meta WHERE key = 'schema'").fetchone()
    return conn


class RunLog:
    """Reader (and the door to the writer) for one `runs.sqlite`.

    `RunLog(path)` is the engine's: it makes the file and its schema. Everything else reads
    through `RunLog.reader(path)`, which opens it read-only (tests/test_layering.py checks
    which modules may do which)."""

    def __init__(self, path: str | os.PathLike[str], *, read_only: bool = False) -> None:
        self.path = Path(path)
        self.read_only = read_only
        self._reading = threading.Lock()
        """One read transaction at a time on this connection (screens read from threads)."""
        try:
            if read_only:
                self._conn = _connect_reader(self.path)
                return
            private_folder(self.path.parent)
            if not self.path.exists():  # made 0600 here; SQLite gives its WAL the same mode
                os.close(os.open(self.path, os.O_WRONLY | os.O_CREAT, 0o600))
            self._conn = _connect(self.path)
            self._conn.executescript(_SCHEMA)
            self._conn.execute("INSERT OR IGNORE INTO meta VALUES ('schema', ?)",
                               (str(SCHEMA_VERSION),))
        except (OSError, sqlite3.Error) as exc:
            raise log_trouble(self.path, exc) from exc

    @classmethod
    def in_folder(cls, data_dir: str | os.PathLike[str], *, read_only: bool = False) -> RunLog:
        return cls(Path(data_dir) / RUNLOG_NAME, read_only=read_only)

    @classmethod
    def reader(cls, path: str | os.PathLike[str]) -> RunLog:
        """The log opened read-only (a missing file reads as a log with no runs)."""
        return cls(path, read_only=True)

    def close(self) -> None:
        self._conn.close()

    # ----- reading -----

    def runs(self) -> list[RunInfo]:
        rows = self._conn.execute(f"SELECT {_RUN_FIELDS} FROM runs ORDER BY id").fetchall()
        return [_run_info(row) for row in rows]

    def run(self, run_id: int) -> RunInfo | None:
        row = self._conn.execute(f"SELECT {_RUN_FIELDS} FROM runs WHERE id = ?",
                                 (run_id,)).fetchone()
        return None if row is None else _run_info(row)

    def latest_run(self) -> RunInfo | None:
        row = self._conn.execute(f"SELECT {_RUN_FIELDS} FROM runs ORDER BY id DESC LIMIT 1"
                                 ).fetchone()
        return None if row is None else _run_info(row)

    def sample_count(self, run_id: int) -> int:
        with self._reading, _snapshot(self._conn):
            packed, sealed_t = self._conn.execute(
                "SELECT COALESCE(SUM(n), 0), MAX(last_t) FROM sample_blocks WHERE run_id = ?",
                (run_id,)).fetchone()
            tail = self._conn.execute(
                "SELECT COUNT(*) FROM samples WHERE run_id = ? AND t > ?",
                (run_id, _before_all(sealed_t))).fetchone()[0]
        return int(packed) + int(tail)

    def samples(self, run_id: int, since_t: float | None = None) -> dict[str, np.ndarray]:
        """Samples (after `since_t`, if given) as numpy arrays, one per column; NaN = none.

        Temperatures and output come back as float64 (stored as float32: 0.0001 °C steps at
        1000 °C, far below any thermocouple's resolution).
        """
        with self._reading, _snapshot(self._conn):
            blocks, tail = _blocks_and_tail(self._conn, run_id, since_t)
        parts: dict[str, list[np.ndarray]] = {name: [] for name, _ in _BLOCK_TYPES}
        for n, data in blocks:
            for name, array in _unpack_block(n, data).items():
                parts[name].append(array)
        if tail:
            for name, array in _rows_as_columns(tail).items():
                parts[name].append(array)
        out: dict[str, np.ndarray] = {}
        for name, kind in _BLOCK_TYPES:
            dtype = np.float64 if kind[1] == "f" else np.int64
            out[name] = (np.concatenate(parts[name]).astype(dtype) if parts[name]
                         else np.empty(0, dtype))
        if since_t is not None and len(out["t"]):
            keep = out["t"] > since_t
            if not keep.all():
                out = {name: array[keep] for name, array in out.items()}
        return out

    def last_sample(self, run_id: int) -> dict[str, Any] | None:
        """The run's newest committed sample (time and readings), or None."""
        with self._reading, _snapshot(self._conn):
            row = self._conn.execute(
                "SELECT t, chamber_c, load_c, setpoint_c, step, state FROM samples "
                "WHERE run_id = ? ORDER BY t DESC LIMIT 1", (run_id,)).fetchone()
            block = self._conn.execute(
                "SELECT n, data FROM sample_blocks WHERE run_id = ? ORDER BY last_t DESC"
                " LIMIT 1", (run_id,)).fetchone()
        if block is not None:
            columns = _unpack_block(*block)
            if row is None or columns["t"][-1] > row[0]:
                def last(name: str) -> Any:
                    value = columns[name][-1].item()
                    return None if isinstance(value, float) and math.isnan(value) else value
                row = tuple(last(name) for name in
                            ("t", "chamber_c", "load_c", "setpoint_c", "step", "state"))
        if row is None:
            return None
        return {"t": row[0], "chamber_c": row[1], "load_c": row[2], "setpoint_c": row[3],
                "step": row[4], "state": row[5]}

    def resume_point(self, run_id: int) -> dict[str, Any] | None:
        """The engine's last committed resume point for the run (see RunRecorder)."""
        row = self._conn.execute("SELECT t, data FROM resume_points WHERE run_id = ?",
                                 (run_id,)).fetchone()
        if row is None:
            return None
        data = json.loads(row[1])
        data["t"] = row[0]
        return data

    def end_mark(self, run_id: int) -> dict[str, Any] | None:
        """The end a run's engine wrote to its end mark when the database could not take it
        ({"outcome", "ended"}), or None (no mark, or a mark with no end in it)."""
        return EndMark(self.path, run_id).read()

    def events(self, run_id: int, after_id: int = 0) -> list[dict[str, Any]]:
        rows = self._conn.execute(
            "SELECT id, t, kind, severity, message, detail FROM events "
            "WHERE run_id = ? AND id > ? ORDER BY id", (run_id, after_id)).fetchall()
        return [{"id": r[0], "time": r[1], "kind": r[2], "severity": r[3], "message": r[4],
                 "detail": json.loads(r[5]) if r[5] else {}, "run": run_id} for r in rows]

    # ----- writing (the engine only) -----

    def start_run(
        self,
        *,
        kiln: str,
        profile: str,
        started: float,
        profile_path: str | None = None,
        profile_text: str = "",
        kiln_text: str = "",
        load: Mapping[str, Any] | None = None,
        units: str = "C",
        device: str = "",
        speed: str = "",
        watch_only: bool = False,
        batch: int = 250,
    ) -> RunRecorder:
        conn = _connect(self.path, writer=True)
        cursor = conn.execute(
            "INSERT INTO runs (kiln, profile, profile_path, profile_text, kiln_text, load_json,"
            " units, device, speed, watch_only, started, wall_started, pid)"
            " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (kiln, profile, profile_path, profile_text, kiln_text,
             json.dumps(dict(load)) if load is not None else None, units, device, speed,
             int(watch_only), started, time.time(), os.getpid()))
        run_id = int(cursor.lastrowid or 0)
        self._take_in_spills(conn)
        recorder = RunRecorder(conn, run_id, batch=batch, path=self.path)
        if recorder.mark is not None:
            recorder.mark.reserve()
        return recorder

    def resume_run(self, run_id: int, *, batch: int = 250) -> RunRecorder:
        """A writer that appends to an unfinished run (after a crash or power cut)."""
        conn = _connect(self.path, writer=True)
        conn.execute("UPDATE runs SET pid = ? WHERE id = ?", (os.getpid(), run_id))
        self._take_in_spills(conn)  # older than anything this engine will write
        recorder = RunRecorder(conn, run_id, batch=batch, path=self.path)
        if recorder.mark is not None:
            recorder.mark.reserve()  # keeps an end already in it (see EndMark.reserve)
        return recorder

    def _take_in_spills(self, conn: sqlite3.Connection) -> None:
        """Samples an earlier engine left in spill files (the log was locked or full when
        its run ended) are written now, before anything new."""
        for what, suffix in SpillFile.SUFFIXES.items():
            for path in sorted(self.path.parent.glob(f"{self.path.name}.run-*.{suffix}")):
                try:
                    run_id = int(path.name.rsplit(".run-", 1)[1].split(".")[0])
                except ValueError:
                    continue
                late = RunRecorder(conn, run_id)
                with contextlib.suppress(sqlite3.Error):
                    late._write_spill_back(SpillFile(self.path, run_id, what))


_RUN_FIELDS = ("id, kiln, profile, started, ended, outcome, units, device, speed, watch_only,"
               " wall_started, profile_path, profile_text, kiln_text, load_json, pid")


def _run_info(row: tuple[Any, ...]) -> RunInfo:
    return RunInfo(
        id=row[0], kiln=row[1], profile=row[2], started=row[3], ended=row[4], outcome=row[5],
        units=row[6] or "C", device=row[7] or "", speed=row[8] or "",
        watch_only=bool(row[9]), wall_started=row[10], profile_path=row[11],
        profile_text=row[12] or "", kiln_text=row[13] or "",
        load=json.loads(row[14]) if row[14] else None, pid=row[15])


_SAMPLE_FIELDS = ", ".join(SAMPLE_COLUMNS)
_log = logging.getLogger(__name__)


@contextlib.contextmanager
def _snapshot(conn: sqlite3.Connection) -> Iterator[None]:
    """One read transaction: the blocks and the rows after them are read as of one commit
    (a commit that seals a block moves rows between the two)."""
    if conn.in_transaction:
        yield
        return
    conn.execute("BEGIN")
    try:
        yield
    finally:
        with contextlib.suppress(sqlite3.Error):
            conn.execute("COMMIT")


def _before_all(sealed_t: float | None) -> float:
    """The time after which a run's rows are not yet in a block (every time, if none is)."""
    return -math.inf if sealed_t is None else float(sealed_t)


def _blocks_and_tail(conn: sqlite3.Connection, run_id: int, since_t: float | None
                     ) -> tuple[list[tuple[int, bytes]], list[tuple[Any, ...]]]:
    """A run's blocks (ending after `since_t`) and its rows after the last block (and after
    `since_t`), both in time order: read inside one `_snapshot`."""
    sealed_t = conn.execute("SELECT MAX(last_t) FROM sample_blocks WHERE run_id = ?",
                            (run_id,)).fetchone()[0]
    after = _before_all(sealed_t) if since_t is None else max(_before_all(sealed_t), since_t)
    blocks = conn.execute("SELECT n, data FROM sample_blocks WHERE run_id = ? AND last_t > ?"
                          " ORDER BY id", (run_id, _before_all(since_t))).fetchall()
    tail = conn.execute(f"SELECT {_SAMPLE_FIELDS} FROM samples WHERE run_id = ? AND t > ?"
                        " ORDER BY t, rowid", (run_id, after)).fetchall()
    return blocks, tail


def _rows_as_columns(rows: list[tuple[Any, ...]]) -> dict[str, np.ndarray]:
    """Rows (SAMPLE_COLUMNS) as a block's columns, rounded as a block stores them: a sample
    reads the same before and after its block is sealed."""
    return _unpack_block(len(rows), _pack_block(rows))


def _pack_block(rows: list[tuple[Any, ...]]) -> bytes:
    """Rows (SAMPLE_COLUMNS, in order) -> one packed block."""
    table = np.array(rows, dtype=np.float64)  # None -> NaN
    chunks = []
    for column, (_, kind) in enumerate(_BLOCK_TYPES):
        values = table[:, column]
        if kind[1] == "i":
            values = np.nan_to_num(values, nan=-1.0)
        chunks.append(values.astype(kind).tobytes())
    return b"".join(chunks)


def _unpack_block(n: int, data: bytes) -> dict[str, np.ndarray]:
    out: dict[str, np.ndarray] = {}
    offset = 0
    for name, kind in _BLOCK_TYPES:
        dtype = np.dtype(kind)
        out[name] = np.frombuffer(data, dtype=dtype, count=n, offset=offset)
        offset += n * dtype.itemsize
    return out


class EndMark:
    """A run's end, kept outside SQLite so that a full disk cannot lose it (module docstring).

    The file is MARK_BYTES long from the start: JSON, padded with spaces. `write` overwrites
    those bytes in place and syncs, which needs no free space on the disk."""

    def __init__(self, db_path: Path, run_id: int) -> None:
        self.path = db_path.with_name(f"{db_path.name}.run-{run_id}.end")
        self.run_id = run_id
        self.ready = False
        """Reserved (or found) with its full size: `write` can work on a full disk."""

    def _body(self, outcome: str | None, ended: float | None) -> bytes:
        text = json.dumps({"run": self.run_id, "outcome": outcome, "ended": ended})
        return text.encode("ascii").ljust(MARK_BYTES, b" ")[:MARK_BYTES]

    def reserve(self) -> bool:
        """Make the file (0600, synced, its folder too) while there is room. A mark that is
        already there is kept as it is: after a restart it may hold the end of the run."""
        try:
            if self.path.exists() and self.path.stat().st_size >= MARK_BYTES:
                self.ready = True
                return True
            fd = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o600)
            try:
                os.write(fd, self._body(None, None))
                os.fsync(fd)
            finally:
                os.close(fd)
            _sync_folder(self.path.parent)
            self.ready = True
        except OSError:
            self.ready = False  # the database alone keeps the end (as before marks)
        return self.ready

    def write(self, outcome: str, ended: float) -> bool:
        """The run's end, synced to the disk; False when it could not be."""
        if not self.ready:
            return False
        try:
            fd = os.open(self.path, os.O_WRONLY)
            try:
                os.pwrite(fd, self._body(outcome, ended), 0)
                os.fsync(fd)
            finally:
                os.close(fd)
        except OSError:
            return False
        return True

    def read(self) -> dict[str, Any] | None:
        try:
            data = json.loads(self.path.read_bytes())
        except (OSError, ValueError):
            return None
        if not isinstance(data, dict) or not isinstance(data.get("outcome"), str):
            return None
        ended = data.get("ended")
        return {"outcome": data["outcome"],
                "ended": float(ended) if isinstance(ended, int | float) else None}

    def remove(self) -> None:
        """The database has the end: the mark is no longer needed."""
        with contextlib.suppress(OSError):
            self.path.unlink()
        self.ready = False


def _sync_folder(folder: Path) -> None:
    """A new file's name is durable only once its folder is synced."""
    with contextlib.suppress(OSError):
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


class _WalCheckpointer:
    """Copies the WAL back into the database from a thread of its own (own connection), so
    no commit of the engine's ever carries that cost. PASSIVE: it never blocks the writer."""

    def __init__(self, path: Path) -> None:
        import threading

        self.path = path
        self._wake = threading.Event()
        self._stop = False
        self.done = 0
        self._thread = threading.Thread(target=self._run, name="wal-checkpoint", daemon=True)
        self._thread.start()

    def nudge(self) -> None:
        self._wake.set()

    def _run(self) -> None:
        try:
            conn = sqlite3.connect(str(self.path), timeout=1.0, isolation_level=None)
        except sqlite3.Error:
            return
        try:
            while not self._stop:
                self._wake.wait(CHECKPOINT_EVERY_S)
                self._wake.clear()
                try:
                    conn.execute("PRAGMA wal_checkpoint(PASSIVE)").fetchall()
                    self.done += 1
                except sqlite3.Error:
                    pass  # busy or the disk is full: the next turn tries again
        finally:
            conn.close()

    def stop(self) -> None:
        self._stop = True
        self._wake.set()
        self._thread.join(timeout=5.0)


class RunRecorder:
    """Buffered writer for one run. Never raises from `sample`, `event` or `flush`.

    Two ways to write: in the caller's thread (`flush` does the SQL; tools and tests), or,
    after `write_in_background()` (the engine), from a thread of its own
    (tuikiln/logqueue.py): then `sample`, `event` and `maybe_flush` only queue rows and wake
    the thread, so a locked database or a slow disk never holds up the engine's loop."""

    def __init__(self, conn: sqlite3.Connection, run_id: int, *, batch: int = 250,
                 every_s: float = 1.0, path: Path | None = None) -> None:
        self.conn = conn
        self.path = path
        self._checkpointer = _WalCheckpointer(path) if path is not None else None
        self._rows_since_checkpoint = 0
        self._resume_point: tuple[float, str] | None = None
        self.resume_source: Callable[[], tuple[float, Mapping[str, Any]]] | None = None
        """Called at each commit for the run's resume point (the engine sets it)."""
        self.run_id = run_id
        self.batch = batch
        self.every_s = every_s
        self._lock = threading.Lock()
        """Guards the queues below: the loop appends, the writer thread takes."""
        self._samples: list[tuple[Any, ...]] = []
        self._in_hand = 0
        """Samples the writer has taken out of `_samples` for the write it is trying; they
        still wait (a commit to a locked log can take the whole busy timeout)."""
        self._unsealed: int | None = None
        """Rows of this run in `samples` not yet packed into a block (None: not counted yet;
        the first commit counts them, as a resumed run may have left some)."""
        self._events: list[tuple[Any, ...]] = []
        self._end_request: tuple[str, float] | None = None
        self._last_flush = time.monotonic()
        self._retry_at = 0.0
        self.trouble: str | None = None
        """Why the last write failed; None when writing works."""
        self.samples_written = 0
        self.events_written = 0
        self.longest_commit_s = 0.0
        self.end_marked = False
        """The run's end reached the end mark (EndMark.write) when the run ended."""
        self.dropped = 0
        self.queue_bound = MEMORY_QUEUE_ROWS
        """Samples kept in memory while the log cannot be written; beyond, they spill."""
        self.queued_peak = 0
        self.spilled = 0
        """Samples that went to the spill file (all written back later, in order)."""
        self._closed = False
        self.mark = EndMark(path, run_id) if path is not None else None
        """The run's end mark (see EndMark): reserved by RunLog when the run starts."""
        self.spill = SpillFile(path, run_id) if path is not None else None
        self.event_spill = SpillFile(path, run_id, "events") if path is not None else None
        self._writer: BackgroundWriter | None = None

    def write_in_background(self) -> None:
        """From now on the SQL runs in a thread of its own (see the class docstring)."""
        if self._writer is None:
            self._writer = BackgroundWriter(self._write_turn, f"run-log-{self.run_id}",
                                            retry_s=BACKGROUND_RETRY_S)

    def sample(self, t: float, chamber_c: float | None, load_c: float | None,
               core_c: float | None, setpoint_c: float | None, output_pct: float | None,
               step: int, state: int, flags: int) -> None:
        # x == x is False only for NaN, which SQLite would store as NULL anyway; kept explicit.
        row = (self.run_id, t,
               chamber_c if chamber_c == chamber_c else None,
               load_c if load_c == load_c else None,
               core_c if core_c == core_c else None,
               setpoint_c if setpoint_c == setpoint_c else None,
               output_pct if output_pct == output_pct else None,
               step, state, flags)
        with self._lock:
            self._samples.append(row)
            queued = len(self._samples)
        if queued > self.queued_peak:
            self.queued_peak = queued
        if queued >= self.batch:
            if self._writer is not None:
                if queued % self.batch == 0:  # not a wake per sample while the log is stuck
                    self._writer.wake()
            else:
                self.flush()
        elif queued & 63 == 0:
            self.maybe_flush()

    def event(self, event: Event, *, urgent: bool = False) -> None:
        # plain: one unencodable character in a message would fail every later commit.
        row = (self.run_id, event.time, event.kind, event.severity,
               plain(event.message, lines=True),
               json.dumps(plain_tree(dict(event.detail)), default=str))
        with self._lock:
            self._events.append(row)
        if urgent or event.severity == Severity.CRITICAL:
            if self._writer is not None:
                self._writer.wake()
            else:
                self.flush()

    def resume_point(self, t: float, state: Mapping[str, Any]) -> None:
        """What a restarted engine needs to carry on (written with the next commit)."""
        with self._lock:
            self._resume_point = (t, json.dumps(dict(state), default=str))

    def maybe_flush(self) -> None:
        """Commit when `every_s` of wall time has passed since the last commit. The engine
        calls this every tick; a real-time run (one tick a second) commits every tick."""
        if time.monotonic() - self._last_flush < self.every_s:
            return
        if self._writer is None:
            self.flush()
            return
        self._last_flush = time.monotonic()
        self._take_resume_point()  # here, in the loop's thread: the rules are not shared
        self._writer.wake()

    def _take_resume_point(self) -> None:
        if self.resume_source is not None:
            t, state = self.resume_source()
            self.resume_point(t, state)

    def flush(self, force: bool = False) -> bool:
        """Write what is kept; False (and `trouble` set) when the write failed. With the
        writer thread running, waits for it (up to FLUSH_WAIT_S): call it off the loop."""
        if self._closed:
            return True
        if self._writer is not None:
            self._take_resume_point()
            return self._writer.drain(FLUSH_WAIT_S)
        if not force and self.trouble is not None and time.monotonic() < self._retry_at:
            return False
        if self.resume_source is not None and (self._samples or self._events):
            self._take_resume_point()
        return self._write_turn()

    def _write_turn(self) -> bool:
        """One write of everything queued (the spill first, then memory, then the end);
        True when nothing is left. Runs in the writer thread, or in the caller's."""
        with self._lock:
            samples, self._samples = self._samples, []
            self._in_hand = len(samples)
            events, self._events = self._events, []
            point, self._resume_point = self._resume_point, None
            end = self._end_request
        start = time.monotonic()
        ok = True
        try:
            self._write_spill_back(self.spill)
            if samples or events or point is not None:
                self._commit(samples, events, point)
        except sqlite3.Error as exc:
            with contextlib.suppress(sqlite3.Error):
                self.conn.execute("ROLLBACK")
            with self._lock:
                self._samples[:0] = samples
                self._in_hand = 0
                self._events[:0] = events
                if self._resume_point is None:
                    self._resume_point = point
                kept = len(self._samples)
            self._spill_over_bound()
            spilled = f", {self.spilled} in {self.spill.path.name}" if (
                self.spill is not None and self.spilled) else ""
            self.trouble = f"{exc} ({kept} samples kept in memory{spilled})"
            self._retry_at = start + RETRY_AFTER_S
            ok = False
        else:
            with self._lock:
                self._in_hand = 0
            elapsed = time.monotonic() - start
            self.longest_commit_s = max(self.longest_commit_s, elapsed)
            self.samples_written += len(samples)
            self.events_written += len(events)
            self._rows_since_checkpoint += len(samples)
            if (self._checkpointer is not None
                    and self._rows_since_checkpoint >= CHECKPOINT_EVERY_ROWS):
                self._rows_since_checkpoint = 0
                self._checkpointer.nudge()
            self.trouble = None
        self._last_flush = time.monotonic()
        if end is not None:  # tried even when the samples failed: the end matters most
            ok = self._write_end(*end) and ok
        return ok

    def _commit(self, samples: list[tuple[Any, ...]], events: list[tuple[Any, ...]],
                point: tuple[float, str] | None,
                spill_progress: tuple[str, str] | None = None) -> None:
        self.conn.execute("BEGIN")
        if samples:
            self.conn.executemany(
                "INSERT INTO samples (run_id, t, chamber_c, load_c, core_c, setpoint_c,"
                " output_pct, step, state, flags) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                samples)
            unsealed = self._seal_blocks(len(samples))
        if events:
            self.conn.executemany(
                "INSERT INTO events (run_id, t, kind, severity, message, detail)"
                " VALUES (?, ?, ?, ?, ?, ?)", events)
        if point is not None:
            self.conn.execute("INSERT OR REPLACE INTO resume_points (run_id, t, data)"
                              " VALUES (?, ?, ?)", (self.run_id, *point))
        if spill_progress is not None:  # (the spill's progress key, how far it got)
            self.conn.execute("INSERT OR REPLACE INTO meta VALUES (?, ?)", spill_progress)
        self.conn.execute("COMMIT")
        if samples:
            self._unsealed = unsealed

    def _spill_over_bound(self) -> None:
        """Past the memory bound, the oldest queued samples go to the spill file (older
        than everything still in memory, so the order holds). If the disk refuses that too,
        memory keeps them up to MAX_KEPT_SAMPLES, then the oldest are dropped (counted)."""
        with self._lock:
            over = len(self._samples) - self.queue_bound
            if over <= 0:
                return
            cut = len(self._samples) - self.queue_bound // 2
            oldest = self._samples[:cut]
            del self._samples[:cut]
        if self.spill is not None and self.spill.append(oldest):
            self.spilled += len(oldest)
            return
        with self._lock:
            self._samples[:0] = oldest
            if len(self._samples) > MAX_KEPT_SAMPLES:
                # Keep the newest: the end of a run matters most when it went wrong.
                drop = len(self._samples) - MAX_KEPT_SAMPLES
                del self._samples[:drop]
                self.dropped += drop

    def _left_behind(self) -> str:
        files = [spill.path.name for spill in (self.spill, self.event_spill)
                 if spill is not None and spill.exists()]
        lost = self.pending
        return ", ".join(files + ([f"{lost} rows could not be kept"] if lost else [])) or "none"

    def _spill_events(self) -> None:
        """The events still queued into their spill file (at close, the log still refusing);
        kept in memory, and counted as not written, when the disk refuses that too."""
        with self._lock:
            events, self._events = self._events, []
        if not events:
            return
        if self.event_spill is None or not self.event_spill.append(events):
            with self._lock:
                self._events[:0] = events

    def _write_spill_back(self, spill: SpillFile | None) -> None:
        """Write a spill file's rows (oldest first), a chunk a transaction, each with how
        far it got; then remove the file. Raises sqlite3.Error when the log still refuses."""
        if spill is None or not spill.exists():
            return
        row = self.conn.execute("SELECT value FROM meta WHERE key = ?",
                                (spill.progress_key,)).fetchone()
        events = spill.what == "events"
        try:
            for rows, progress in spill.chunks(row[0] if row else None):
                self._commit([] if events else rows, rows if events else [], None,
                             spill_progress=(spill.progress_key, progress))
                if events:
                    self.events_written += len(rows)
                else:
                    self.samples_written += len(rows)
        except (OSError, ValueError, KeyError, TypeError):
            return  # unreadable: left in place for a person; memory goes on being written
        spill.remove()  # a later spill has another name: the progress left here is inert

    def _seal_blocks(self, added: int) -> int:
        """Inside the commit that added `added` rows: pack each BLOCK_ROWS of the run's rows
        past its last block into a new block and delete those rows (module docstring).
        Returns how many rows are left unsealed. A block ends at a change of time, so rows
        of one instant never straddle a block's end (readers take rows after `last_t`)."""
        run = self.run_id
        sealed_t = self.conn.execute("SELECT MAX(last_t) FROM sample_blocks WHERE run_id = ?",
                                     (run,)).fetchone()[0]
        if self._unsealed is None:
            unsealed = int(self.conn.execute(
                "SELECT COUNT(*) FROM samples WHERE run_id = ? AND t > ?",
                (run, _before_all(sealed_t))).fetchone()[0])
        else:
            unsealed = self._unsealed + added
        while unsealed >= BLOCK_ROWS:
            after = _before_all(sealed_t)
            last_t = self.conn.execute(
                "SELECT t FROM samples WHERE run_id = ? AND t > ? ORDER BY t LIMIT 1 OFFSET ?",
                (run, after, BLOCK_ROWS - 1)).fetchone()[0]
            span = "run_id = ? AND t > ? AND t <= ?"
            rows = self.conn.execute(f"SELECT {_SAMPLE_FIELDS} FROM samples WHERE {span}"
                                     " ORDER BY t, rowid", (run, after, last_t)).fetchall()
            self.conn.execute("INSERT INTO sample_blocks (run_id, first_t, last_t, n, data)"
                              " VALUES (?, ?, ?, ?, ?)",
                              (run, rows[0][0], last_t, len(rows), _pack_block(rows)))
            self.conn.execute(f"DELETE FROM samples WHERE {span}", (run, after, last_t))
            unsealed -= len(rows)
            sealed_t = last_t
        return unsealed

    @property
    def pending(self) -> int:
        return len(self._samples) + len(self._events)

    @property
    def queued(self) -> int:
        """Samples waiting in memory to be written, those in the writer's hands included (a
        count of only the list would read 0 during each failed try at a locked log)."""
        with self._lock:
            return len(self._samples) + self._in_hand

    def end(self, outcome: str, ended: float) -> bool:
        """The run's end: into the end mark at once, then the database (with the writer
        thread, queued: True then means it is on its way; `close` waits for it)."""
        # The mark first: if the database cannot take the end (a full disk), a restart must
        # still see that the run is over and must not heat again.
        self.end_marked = self.mark is not None and self.mark.write(outcome, ended)
        with self._lock:
            self._end_request = (outcome, ended)
        if self._writer is not None:
            self._writer.wake()
            return True
        with contextlib.suppress(sqlite3.Error):
            self.conn.execute(f"PRAGMA busy_timeout={READER_BUSY_MS}")
        return self.flush(force=True)

    def _write_end(self, outcome: str, ended: float) -> bool:
        try:
            self.conn.execute("UPDATE runs SET outcome = ?, ended = ? WHERE id = ?",
                              (outcome, ended, self.run_id))
        except sqlite3.Error as exc:
            kept = (f"; the end is kept in {self.mark.path}" if self.mark and self.end_marked
                    else "; the end could not be kept anywhere else either")
            self.trouble = f"{exc}{kept}"
            return False
        with self._lock:
            if self._end_request == (outcome, ended):
                self._end_request = None
        if self.mark is not None:
            self.mark.remove()
        return True

    def close(self, wait_s: float | None = None) -> bool:
        """Write what is left and close; True when everything reached the log. With the
        writer thread, waits up to `wait_s` (CLOSE_WAIT_S) for a locked or full log, then
        puts the samples still queued into the spill file, which the next engine to open
        this log writes back (RunLog.start_run, resume_run)."""
        if self._closed:
            return True
        if self._writer is not None:
            self._take_resume_point()
            ok = self._writer.stop(CLOSE_WAIT_S if wait_s is None else wait_s)
            if not ok:  # what memory holds would die with the process
                self.queue_bound = 0
                self._spill_over_bound()
                self._spill_events()
                _log.warning("The run log %s still refused at the end of run %d (%s): what "
                             "it did not take waits beside it (%s) and is written by the "
                             "next run that opens the log", self.path or "", self.run_id,
                             self.trouble or "locked", self._left_behind())
        else:
            ok = self.flush(force=True)
        self._closed = True
        if self._checkpointer is not None:
            self._checkpointer.stop()
        with contextlib.suppress(sqlite3.Error):
            self.conn.close()
        return ok
