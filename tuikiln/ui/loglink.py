"""A `RunLink` over the run log (SQLite) and, while the run goes on, its engine's control.

The log is read on its own connection from a worker thread; the engine is reached through a
`Control` (the control socket client), which is absent for a finished run.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any, Protocol

import numpy as np

from tuikiln.engine.states import RunState
from tuikiln.engine.status import Status
from tuikiln.errors import FileProblems, UserError
from tuikiln.plan import plan_profile
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog
from tuikiln.ui.runfeed import RunHeader
from tuikiln.units import ROOM_C


class Control(Protocol):
    """The engine's side: the live status object and the operator's commands."""

    async def status(self) -> Status | None: ...

    async def command(self, name: str, arg: str | None = None) -> tuple[bool, str]: ...

    def close(self) -> None: ...


class LogLink:
    """Reads one run from `runs.sqlite` in `data_dir`; commands go to `control` if any."""

    def __init__(self, data_dir: str | Path, run_id: int, control: Control | None = None,
                 log: RunLog | None = None) -> None:
        self.log = log or RunLog.in_folder(data_dir, read_only=True)
        self.run_id = run_id
        self.control = control
        self._header: RunHeader | None = None

    def info(self) -> RunHeader:
        run = self.log.run(self.run_id)
        if run is None:
            raise UserError(f"there is no run {self.run_id} in {self.log.path}")
        name = run.profile_path or f"run {run.id} profile"
        try:
            profile = parse_profile(run.profile_text, name)
        except FileProblems as exc:
            raise UserError(f"run {run.id}: its stored profile does not read: {exc}") from None
        self._header = RunHeader(
            run_id=run.id, profile=profile, plan=plan_profile(profile, ROOM_C),
            started=run.started, kiln_name=run.kiln, units=run.units or profile.units,
            outcome=run.outcome if run.outcome else (None if run.status == RunState.RUNNING
                                                      else run.status),
            ended=run.ended, extra={"device": run.device, "speed": run.speed,
                                    "watch_only": run.watch_only,
                                    # the review screen judges with the run's thresholds
                                    "kiln_text": run.kiln_text},
        )
        return self._header

    def read_samples(self, since_t: float | None) -> Mapping[str, np.ndarray]:
        return self.log.samples(self.run_id, since_t)

    def read_events(self, after_id: int) -> Sequence[Mapping[str, Any]]:
        return self.log.events(self.run_id, after_id)

    async def status(self) -> Status | None:
        if self.control is None:
            return None
        return await self.control.status()

    async def command(self, name: str, arg: str | None = None) -> tuple[bool, str]:
        if self.control is None:
            return False, "this run is not going on any more: nothing to send it to"
        return await self.control.command(name, arg)

    def close(self) -> None:
        if self.control is not None:
            self.control.close()
        self.log.close()
