"""The run log's writes off the engine's event loop: a writer thread and a spill file.

    writer = BackgroundWriter(turn, "run-log-writer")   # turn() writes what is queued
    writer.wake()                                       # from the loop: never blocks
    writer.drain(timeout_s)                             # wait until a turn after now ran
    writer.stop(timeout_s)                              # drain, then end the thread

A database another program holds locked, a slow or full disk, a commit's fsync: none of
these may hold up the loop that reads the thermocouple and commands the controller. The
loop only appends rows to memory (tuikiln.runlog.RunRecorder) and wakes this thread; the
thread does the SQL and, when it fails, retries every `retry_s` until it works.

Memory is bounded: past the recorder's bound the oldest queued rows go to a spill file
beside the database (`SpillFile`, JSON lines, synced), which is always older than what is
still in memory, so writing the spill first and memory next keeps the order.
"""

from __future__ import annotations

import contextlib
import json
import os
import threading
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

SPILL_CHUNK_ROWS = 20_000  # rows per transaction when the spill is written back


class BackgroundWriter:
    """One thread that calls `turn()` when woken, and every `retry_s` while `turn()` says
    something is left (a locked database, a full disk)."""

    def __init__(self, turn: Callable[[], bool], name: str, retry_s: float = 1.0) -> None:
        self._turn = turn
        self.retry_s = retry_s
        self._cv = threading.Condition()
        self._woken = False
        self._stopping = False
        self._quit = False
        self._started = 0
        self._finished = 0
        self._left = False  # the last turn left something unwritten
        self._thread = threading.Thread(target=self._run, name=name, daemon=True)
        self._thread.start()

    def wake(self) -> None:
        with self._cv:
            self._woken = True
            self._cv.notify_all()

    def _run(self) -> None:
        while True:
            with self._cv:
                self._cv.wait_for(lambda: self._woken or self._stopping or self._quit,
                                  timeout=self.retry_s if self._left else None)
                if self._quit or (self._stopping and not self._woken and not self._left):
                    return
                self._woken = False
                self._started += 1
            try:
                left = not self._turn()
            except Exception:  # noqa: BLE001 - the writer must outlive any one turn
                left = True
            with self._cv:
                self._left = left
                self._finished += 1
                self._cv.notify_all()
                if self._stopping and not left and not self._woken:
                    return  # else: rows came in while this turn ran

    def drain(self, timeout_s: float) -> bool:
        """Wake the thread and wait (at most `timeout_s`) for a turn that began after now;
        True when that turn wrote everything."""
        with self._cv:
            want = self._started + 1
            self._woken = True
            self._cv.notify_all()
            done = self._cv.wait_for(lambda: self._finished >= want, timeout=timeout_s)
            return done and not self._left

    def stop(self, timeout_s: float) -> bool:
        """Keep retrying for at most `timeout_s`; True when everything was written."""
        with self._cv:
            self._stopping = True
            self._woken = True
            self._cv.notify_all()
        self._thread.join(timeout_s)
        if self._thread.is_alive():
            with self._cv:  # give up: the thread ends after the turn under way
                self._quit = True
                self._cv.notify_all()
            self._thread.join()
            return False
        return not self._left


class SpillFile:
    """Queued rows beyond the memory bound (samples), or left when a run's process ended
    with the log still locked or full (samples and events), in order, beside the database.

    JSON lines: a first line naming this file (its creation time, so a new spill is never
    mistaken for an older one), then one row a line, appended and synced. `chunks` reads
    them back and says how far each chunk goes ("<name>:<offset>"); the writer commits that
    with the chunk, so a crash while writing the spill back never writes a row twice."""

    SUFFIXES = {"samples": "spill", "events": "events-spill"}
    """A spill of each kind of row: `runs.sqlite.run-N.spill` holds samples and
    `runs.sqlite.run-N.events-spill` the events still queued when a run's process ended."""

    def __init__(self, db_path: Path, run_id: int, what: str = "samples") -> None:
        self.what = what
        self.path = db_path.with_name(f"{db_path.name}.run-{run_id}.{self.SUFFIXES[what]}")
        self.progress_key = (f"spill-progress-{run_id}" if what == "samples"
                             else f"spill-progress-{what}-{run_id}")
        """The meta table's key for how far the spill has been written back."""

    def exists(self) -> bool:
        return self.path.exists()

    def append(self, rows: list[tuple[Any, ...]]) -> bool:
        """Add rows at the end, synced; False (the file as it was) when the disk refuses."""
        data = "".join(json.dumps(list(row)) + "\n" for row in rows).encode()
        try:
            fd = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o600)
        except OSError:
            return False
        try:
            size = os.fstat(fd).st_size
            if size == 0:
                data = json.dumps({"spill": time.time_ns()}).encode() + b"\n" + data
            try:
                view = memoryview(data)
                while view:
                    view = view[os.write(fd, view):]
                os.fsync(fd)
            except OSError:
                with contextlib.suppress(OSError):
                    os.ftruncate(fd, size)  # no half rows left behind
                return False
        finally:
            os.close(fd)
        return True

    def chunks(self, progress: str | None, rows_per_chunk: int = SPILL_CHUNK_ROWS
               ) -> Iterator[tuple[list[tuple[Any, ...]], str]]:
        """(rows, progress after them), from where `progress` (from an earlier chunk of this
        same file, or None) says."""
        with open(self.path, "rb") as handle:
            first = handle.readline()
            name = str(json.loads(first)["spill"])
            offset = len(first)
            if progress is not None and progress.partition(":")[0] == name:
                offset = int(progress.partition(":")[2])
            handle.seek(offset)
            rows: list[tuple[Any, ...]] = []
            for line in handle:
                if not line.endswith(b"\n"):
                    break  # a row cut short by a crash while appending: never synced
                offset += len(line)
                rows.append(tuple(json.loads(line)))
                if len(rows) >= rows_per_chunk:
                    yield rows, f"{name}:{offset}"
                    rows = []
            if rows:
                yield rows, f"{name}:{offset}"

    def remove(self) -> None:
        with contextlib.suppress(OSError):
            self.path.unlink()
