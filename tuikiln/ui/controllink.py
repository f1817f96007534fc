"""`Control` over the engine's Unix control socket (tuikiln.control), for another process.

Each call is one short request in a worker thread, so a slow or vanished engine never
freezes the screen; a vanished engine reads as "no status" (the run ended or was killed).
"""

from __future__ import annotations

import asyncio
from pathlib import Path

from tuikiln import control
from tuikiln.engine.status import Status, status_from_json
from tuikiln.errors import UserError

REQUEST_TIMEOUT_S = 3.0


class SocketControl:
    def __init__(self, socket_path: str) -> None:
        self.socket_path = socket_path

    @classmethod
    def for_run(cls, data_dir: Path, run_id: int) -> SocketControl | None:
        for active in control.active_runs(Path(data_dir)):
            if active.run == run_id:
                return cls(active.socket)
        return None

    async def status(self) -> Status | None:
        try:
            answer = await asyncio.to_thread(control.request, self.socket_path, "status", None,
                                             REQUEST_TIMEOUT_S)
        except (UserError, OSError, ValueError):
            return None
        return status_from_json(answer.get("status")) if answer.get("ok") else None

    async def command(self, name: str, arg: str | None = None) -> tuple[bool, str]:
        try:
            answer = await asyncio.to_thread(control.request, self.socket_path, name, arg,
                                             REQUEST_TIMEOUT_S)
        except (UserError, OSError, ValueError) as exc:
            return False, f"{name}: {exc}"
        words = answer.get("message") or answer.get("error") or name
        return bool(answer.get("ok")), str(words)

    def close(self) -> None:
        """Nothing held open between requests."""
