"""A toy alarm check, written by following docs/CONTRIBUTING.md "An alarm rule".

In the project it would be tuikiln/engine/checks/straining.py; here it lives with the tests
so it does not ship. It warns when a hold keeps the heater at full output for ten minutes:
a healthy oven needs only part of its power to hold (common practice, no source), so an
oven that needs all of it has a weak element, an open door or too big a load.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from tuikiln.engine.checks import Check, alarm_check

if TYPE_CHECKING:
    from tuikiln.engine.alarms import Observation

FULL_PCT = 99.0
STRAINING_FOR_S = 600.0


@alarm_check
class Straining(Check):
    code = "straining"
    name = "holding at full power"

    def __init__(self, *args: object) -> None:
        super().__init__(*args)  # type: ignore[arg-type]
        self.since: float | None = None

    def judge(self, obs: Observation, temp: float | None) -> str | bool | None:
        full = (obs.step_kind == "hold" and obs.output_pct is not None
                and obs.output_pct >= FULL_PCT and not obs.heat_off)
        if not full:
            self.since = None
            return False
        if self.since is None:
            self.since = obs.now
        if obs.now - self.since < STRAINING_FOR_S:
            return None
        return (f"Holding at full power for {(obs.now - self.since) / 60:.0f} min at "
                f"{self.temp(temp)}: a weak element, an open door or too big a load")
