"""What the engine tells the world: events, and the sink interface the alert fan-out implements.

The engine is the only producer. Every event goes to the run log and to every sink (the
terminal, MQTT, command hooks). A sink must never block or raise into the engine: `event`,
`state` and `reading` are plain calls that queue work and return at once.
"""

from __future__ import annotations

import string
from collections.abc import Mapping
from dataclasses import dataclass, field
from enum import StrEnum
from typing import Any, Protocol, TypedDict

from tuikiln.units import Units, delta_from_c, format_duration, format_rate, format_temp, symbol


class EventKind(StrEnum):
    """What happened (an event's `kind`). Stable strings: they are stored in run logs and
    sent over MQTT; a member *is* its string, so older logs and other readers match."""

    RUN_START = "run-start"
    RUN_END = "run-end"                      # detail: outcome ("completed", "aborted", ...)
    STEP_START = "step-start"                # detail: index (0-based), kind, description
    STEP_END = "step-end"
    STEP_STATE = "step-state"                # detail: state (our own names), words
    EQUALIZED = "equalized"                  # the load has evened out; detail: index, core_c
    ALARM_RAISED = "alarm-raised"            # detail: alarm (code), severity, words
    ALARM_ACKNOWLEDGED = "alarm-acknowledged"
    ALARM_CLEARED = "alarm-cleared"
    OPERATOR_NEEDED = "operator-needed"      # a pause step waits for the person; reminders too
    OPERATOR_ACKNOWLEDGED = "operator-acknowledged"
    NOTE = "note"                            # detail: text, source ("screen", "command", "mqtt")
    COMMAND = "command"                      # a command accepted; detail: name, source
    COMMAND_REFUSED = "command-refused"      # detail: name, source, reason
    SAFE_STATE = "safe-state"                # the device was driven safe; detail: reason
    GAP = "gap"                              # the engine was away; detail: seconds, before/after
    DEVICE = "device"                        # link lost/back, device rebooted; detail: words
    ALERT_FAILED = "alert-failed"            # a hook or publisher failed; detail: channel, words
    LOG_QUEUE = "log-queue"                  # samples wait for the run log; detail: queued, bound


class Severity(StrEnum):
    """How much an event matters (an event's and an alarm's `severity`)."""

    INFO = "info"
    WARNING = "warning"
    CRITICAL = "critical"


# Short names the code uses (members, not copies of the strings).
RUN_START = EventKind.RUN_START
RUN_END = EventKind.RUN_END
STEP_START = EventKind.STEP_START
STEP_END = EventKind.STEP_END
STEP_STATE = EventKind.STEP_STATE
EQUALIZED = EventKind.EQUALIZED
ALARM_RAISED = EventKind.ALARM_RAISED
ALARM_ACKNOWLEDGED = EventKind.ALARM_ACKNOWLEDGED
ALARM_CLEARED = EventKind.ALARM_CLEARED
OPERATOR_NEEDED = EventKind.OPERATOR_NEEDED
OPERATOR_ACKNOWLEDGED = EventKind.OPERATOR_ACKNOWLEDGED
NOTE = EventKind.NOTE
COMMAND = EventKind.COMMAND
COMMAND_REFUSED = EventKind.COMMAND_REFUSED
SAFE_STATE = EventKind.SAFE_STATE
GAP = EventKind.GAP
DEVICE = EventKind.DEVICE
ALERT_FAILED = EventKind.ALERT_FAILED
LOG_QUEUE = EventKind.LOG_QUEUE

SEVERITIES: tuple[Severity, ...] = tuple(Severity)

# A DEVICE event's detail["words"] when the engine armed the controller again (it held
# another setpoint or had stopped: a reboot, most often). Replay remarks on it.
REARMED = "controller re-armed"

# Units as data: an event's words keep their numbers apart. detail["template"] is the
# message with "{name}" where a number goes; detail["numbers"] holds each as {"kind": ...,
# "value": ...} in the engine's inside units, so a screen or report shows it in its own
# units. Nothing rewrites a sentence: a difference is a difference because it says so.
TEMPERATURE = "temperature"    # °C
DIFFERENCE = "difference"      # kelvin: converts by 9/5 only, never with the 32° offset
RATE = "rate"                  # °C per second
DURATION = "duration"          # seconds
NUMBER_KINDS = (TEMPERATURE, DIFFERENCE, RATE, DURATION)


def format_number(kind: str, value: float | None, units: Units) -> str:
    """One number of an event's words, in `units`."""
    if kind == TEMPERATURE:
        return format_temp(value, units)
    if kind == DIFFERENCE:
        if value is None or value != value:
            return "--"
        # Whole degrees; round first so a small negative difference never shows as "-0".
        return f"{int(round(delta_from_c(value, units)))} {symbol(units)}"
    if kind == RATE:
        return format_rate(value, units)
    return format_duration(value)


def literal(text: str) -> str:
    """Words (a label, a person's note) put into a template as they are."""
    return text.replace("{", "{{").replace("}", "}}")


@dataclass(frozen=True)
class Said:
    """Words with their numbers kept as numbers: say("{t} is over {limit}", t=(TEMPERATURE,
    812.0), limit=(TEMPERATURE, 800.0)).text("F") -> '1494 °F is over 1472 °F'."""

    template: str
    numbers: Mapping[str, tuple[str, float | None]] = field(default_factory=dict)

    def text(self, units: Units) -> str:
        shown = render(self.template, self.numbers, units)
        assert shown is not None, self.template  # the engine's own templates always fit
        return shown

    def after(self, words: str) -> Said:
        """These words with `words` before them."""
        return Said(literal(words) + self.template, self.numbers)

    def as_detail(self) -> dict[str, Any]:
        return {"template": self.template,
                "numbers": {name: {"kind": kind, "value": value}
                            for name, (kind, value) in self.numbers.items()}}


def say(template: str, **numbers: tuple[str, float | None]) -> Said:
    return Said(template, numbers)


def render(template: str, numbers: Mapping[str, tuple[str, float | None]],
           units: Units) -> str | None:
    """The template with each "{name}" shown in `units`; None when it does not fit (a
    stored template names a number it lacks, or asks for more than a plain name)."""
    out: list[str] = []
    try:
        for text, name, spec, conversion in string.Formatter().parse(template):
            out.append(text)
            if name is None:
                continue
            if spec or conversion or name not in numbers:
                return None
            kind, value = numbers[name]
            out.append(format_number(kind, value, units))
    except ValueError:  # unbalanced braces in a stored template
        return None
    return "".join(out)


def said_text(holder: Mapping[str, Any], units: Units, key: str = "template") -> str | None:
    """The words a stored detail (or status alarm) carries as a template, in `units`; None
    when it carries none or they do not fit (then show the stored words)."""
    template, stored = holder.get(key), holder.get("numbers")
    if not isinstance(template, str) or not isinstance(stored, Mapping):
        return None
    numbers: dict[str, tuple[str, float | None]] = {}
    for name, number in stored.items():
        if not isinstance(number, Mapping) or number.get("kind") not in NUMBER_KINDS:
            return None
        value = number.get("value")
        if value is not None and (isinstance(value, bool) or not isinstance(value, int | float)):
            return None
        numbers[str(name)] = (str(number["kind"]), None if value is None else float(value))
    return render(template, numbers, units)


def event_text(event: Mapping[str, Any], units: Units) -> str:
    """An event's words in `units`: from its numbers where it carries them, else the words
    it was stored with (an older log, a message with no temperature in it)."""
    detail = event.get("detail")
    if isinstance(detail, Mapping):
        shown = said_text(detail, units)
        if shown is not None:
            return shown
    return str(event.get("message") or event.get("kind") or "")


class EventDict(TypedDict):
    """An event as JSON (`Event.as_dict`; the run log's `events()` adds its row `id`; MQTT
    and `--json` send it as it is)."""

    time: float
    kind: str
    message: str
    severity: str
    detail: dict[str, Any]
    run: int | None


class SampleDict(TypedDict):
    """One reading as the engine hands it to each sink's `reading`."""

    time: float
    chamber_c: float | None
    load_c: float | None
    core_c: float | None
    setpoint_c: float | None
    output_pct: float | None
    step: int
    step_state: str


@dataclass(frozen=True)
class Event:
    time: float
    """Epoch seconds (the engine's clock; simulated time in a simulated run)."""
    kind: str
    message: str
    """Plain words for a person, e.g. 'Holding at 1750 °F for 30 min'."""
    severity: str = Severity.INFO
    detail: Mapping[str, Any] = field(default_factory=dict)
    run_id: int | None = None

    def as_dict(self) -> EventDict:
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

    def reading(self, sample: SampleDict) -> None:
        """One sample: time, chamber_c, load_c, core_c, setpoint_c, output_pct, step,
        step_state."""

    async def start(self) -> None: ...

    async def stop(self) -> None:
        """Flush what can be flushed quickly and say goodbye (e.g. MQTT 'offline')."""
