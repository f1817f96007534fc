"""What the engine tells the world: events, and the sink interface the alert fan-out implements.

The engine is the only producer. Every event goes to the run log and to every sink (the
terminal, MQTT, command hooks). A sink must never block or raise into the engine: `event`,
`state` and `reading` are plain calls that queue work and return at once.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Protocol

# Event kinds (stable strings: they are stored in run logs and sent over MQTT).
RUN_START = "run-start"
RUN_END = "run-end"                      # detail: outcome ("completed", "aborted", ...)
STEP_START = "step-start"                # detail: index (0-based), kind, description
STEP_END = "step-end"
STEP_STATE = "step-state"                # detail: state (our own names), words
EQUALIZED = "equalized"                  # the load has evened out; detail: index, core_c
ALARM_RAISED = "alarm-raised"            # detail: alarm (code), severity, words
ALARM_ACKNOWLEDGED = "alarm-acknowledged"
ALARM_CLEARED = "alarm-cleared"
OPERATOR_NEEDED = "operator-needed"      # a pause step waits for the person; repeated as reminders
OPERATOR_ACKNOWLEDGED = "operator-acknowledged"
NOTE = "note"                            # detail: text, source ("screen", "command", "mqtt")
COMMAND = "command"                      # a command accepted; detail: name, source
COMMAND_REFUSED = "command-refused"      # detail: name, source, reason
SAFE_STATE = "safe-state"                # the device was driven safe; detail: reason
GAP = "gap"                              # the engine was away; detail: seconds, before_c, after_c
DEVICE = "device"                        # link lost/back, device rebooted; detail: words
ALERT_FAILED = "alert-failed"            # a hook or publisher failed; detail: channel, words
LOG_QUEUE = "log-queue"                  # samples wait for the run log; detail: queued, bound

SEVERITIES = ("info", "warning", "critical")


@dataclass(frozen=True)
class Event:
    time: float
    """Epoch seconds (the engine's clock; simulated time in a simulated run)."""
    kind: str
    message: str
    """Plain words for a person, e.g. 'Holding at 1750 °F for 30 min'."""
    severity: str = "info"
    detail: Mapping[str, Any] = field(default_factory=dict)
    run_id: int | None = None

    def as_dict(self) -> dict[str, Any]:
        return {
            "time": self.time,
            "kind": self.kind,
            "message": self.message,
            "severity": self.severity,
            "detail": dict(self.detail),
            "run": self.run_id,
        }


class AlertSink(Protocol):
    """Receives what the engine does. Implementations queue and return at once."""

    def event(self, event: Event) -> None: ...

    def state(self, state: Mapping[str, Any]) -> None:
        """The live status (the same JSON object `tuikiln status --json` prints)."""

    def reading(self, sample: Mapping[str, Any]) -> None:
        """One sample: time, chamber_c, load_c, setpoint_c, output_pct, step, step_state."""

    async def start(self) -> None: ...

    async def stop(self) -> None:
        """Flush what can be flushed quickly and say goodbye (e.g. MQTT 'offline')."""
