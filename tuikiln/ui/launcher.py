"""Where the screens get runs from: the run log, the profile folders, and the engine process.

A run belongs to its engine process (`tuikiln run PROFILE --headless`), never to a screen:
starting a run here starts that process in its own session, so closing the screen (or the
SSH session) leaves it going, and `tuikiln watch` attaches again.
"""

from __future__ import annotations

import os
import subprocess
import sys
import time
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

import platformdirs

from tuikiln import control
from tuikiln.control import ActiveRun
from tuikiln.errors import UserError
from tuikiln.kiln import Kiln, load_kiln
from tuikiln.runlog import RunInfo, RunLog, default_data_dir, open_private, private_folder
from tuikiln.ui.loglink import Control, LogLink

# The examples travel inside the package (pyproject maps profiles/ to tuikiln.profiles), so
# they are found after any install, not only in a source checkout.
PACKAGE_PROFILES = Path(str(resources.files("tuikiln.profiles")))
START_TIMEOUT_S = 20.0


def profile_folders() -> list[Path]:
    """The shipped examples and the user's own folder (the user's listed first)."""
    user = Path(platformdirs.user_config_dir("tuikiln")) / "profiles"
    folders = [user, Path.cwd() / "profiles", PACKAGE_PROFILES]
    seen: list[Path] = []
    for folder in folders:
        if folder.is_dir() and folder.resolve() not in [s.resolve() for s in seen]:
            seen.append(folder)
    return seen


def find_profiles() -> list[Path]:
    return [p for folder in profile_folders() for p in sorted(folder.glob("*.toml"))]


def connect_control(data_dir: Path, run_id: int) -> Control | None:
    """The control client of a going run, or None when its engine is not there."""
    from tuikiln.ui.controllink import SocketControl

    return SocketControl.for_run(data_dir, run_id)


@dataclass
class Launcher:
    """The kiln, the data folder, and how to start or find runs."""

    data_dir: Path
    kiln_path: str | None = None
    extra_run_args: list[str] = field(default_factory=list)
    kiln: Kiln = field(init=False)

    def __post_init__(self) -> None:
        self.data_dir = default_data_dir(str(self.data_dir) if self.data_dir else None)
        self.kiln = load_kiln(self.kiln_path)

    def log(self) -> RunLog:
        return RunLog.in_folder(self.data_dir, read_only=True)

    def runs(self, limit: int = 50) -> list[RunInfo]:
        log = self.log()
        try:
            return list(reversed(log.runs()))[:limit]
        finally:
            log.close()

    def going_run(self) -> ActiveRun | None:
        """The run going on this kiln (its engine process is alive), if any."""
        for active in control.active_runs(self.data_dir):
            if control.kiln_slug(active.kiln) == control.kiln_slug(self.kiln.name):
                return active
        return None

    def link(self, run_id: int, live: bool = True) -> LogLink:
        control = connect_control(self.data_dir, run_id) if live else None
        return LogLink(self.data_dir, run_id, control=control)

    def start(self, profile_path: str) -> int:
        """Start the engine on `profile_path` in its own session; the new run's id."""
        logs = self.data_dir / "logs"
        private_folder(logs)
        log_path = logs / f"run-{time.strftime('%Y%m%d-%H%M%S')}-{os.getpid()}.log"
        command = [sys.executable, "-m", "tuikiln", "run", str(Path(profile_path).resolve()),
                   "--headless", "--detached", "--data", str(self.data_dir.resolve())]
        if self.kiln_path:
            command += ["--kiln", str(Path(self.kiln_path).resolve())]
        command += self.extra_run_args
        with open_private(log_path) as output:
            process = subprocess.Popen(command, stdin=subprocess.DEVNULL, stdout=output,
                                       stderr=subprocess.STDOUT, start_new_session=True)
        deadline = time.monotonic() + START_TIMEOUT_S
        while time.monotonic() < deadline:
            for active in control.active_runs(self.data_dir):
                if active.pid == process.pid and active.run is not None:
                    return int(active.run)
            if process.poll() is not None:
                break
            time.sleep(0.05)
        words = log_path.read_text(errors="replace").strip().splitlines()[-3:]
        raise UserError("the run did not start: " + (" / ".join(words) or "no words from it"))


