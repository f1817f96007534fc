"""`tuikiln sim serve` as a subprocess for tests and trials: started, its first line (the pty
path or tcp:// address) read, and always stopped with its whole process group."""

from __future__ import annotations

import os
import select
import signal
import subprocess
import sys
import tempfile
from pathlib import Path
from types import TracebackType

REPO = Path(__file__).resolve().parents[1]


class ServedSim:
    """A running `tuikiln sim serve OPTIONS...`; `where` is what it printed first."""

    def __init__(self, *options: str, wait_s: float = 15.0) -> None:
        # stderr to a file, not a pipe: nobody reads it while the oven runs, and a full
        # pipe would stall the simulator.
        self.errors = tempfile.TemporaryFile(mode="w+")
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "tuikiln", "sim", "serve", *options],
            cwd=REPO, stdout=subprocess.PIPE, stderr=self.errors, text=True,
            start_new_session=True,
        )
        assert self.proc.stdout is not None
        ready, _, _ = select.select([self.proc.stdout], [], [], wait_s)
        line = self.proc.stdout.readline().strip() if ready else ""
        if not line:
            self.stop()
            self.errors.seek(0)
            raise AssertionError(f"sim serve printed nothing: {self.errors.read()}")
        self.where = line

    def stop(self) -> None:
        if self.proc.poll() is None:
            os.killpg(self.proc.pid, signal.SIGTERM)
            try:
                self.proc.wait(timeout=5)
            except subprocess.TimeoutExpired:
                os.killpg(self.proc.pid, signal.SIGKILL)
                self.proc.wait(timeout=5)
        self.errors.close()

    def __enter__(self) -> ServedSim:
        return self

    def __exit__(self, exc_type: type[BaseException] | None, exc: BaseException | None,
                 tb: TracebackType | None) -> None:
        self.stop()
