"""The status object: what `tuikiln status --json` prints, the MQTT `state` payload and what
the live screen shows. `Status` below is its shape; keep its keys (other programs read them):

    run, kiln, profile, units, state, step, step_count, step_kind, step_state, step_words,
    chamber_c, load_c, core_c, setpoint_c, target_c, output_pct, equalization,
    time_to_next_step_s, time_to_operator_s, time_to_end_s, alarms, time, started, watch_only,
    safe_state

Temperatures are °C (None when unknown); `units` says how to show them. The states are the
StrEnums of engine/states.py, which serialize as their strings. `safe_state` is None
unless the run has ended without the controller confirming the heat is off (`SafeState`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, TypedDict

from tuikiln.engine.rules import RunRules
from tuikiln.engine.states import RunState, StepState
from tuikiln.events import Severity
from tuikiln.ovenmodel_plan import LiveForecast
from tuikiln.plan import step_duration_s
from tuikiln.profile import Cool, Pause, Ramp


class Equalization(TypedDict):
    """The status's `equalization` while the load evens out (None otherwise)."""

    state: str | None
    words: str
    slope_c_per_min: float | None
    eta_s: float | None
    eta_sigma_s: float | None
    rule_of_thumb_s: float | None


class SafeState(TypedDict):
    """The status's `safe_state` after a run ended without reaching the controller (a lost
    link): the engine keeps trying to turn the heat off. None once it is off."""

    state: str                 # "retrying"
    severity: str              # "critical": the oven may still be heating
    since: float               # when the run ended (the device clock, like `time`)
    since_s: float             # seconds since then
    attempts: int              # tries so far, the first at the run's end included
    words: str


SAFE_RETRYING = "retrying"
SAFE_RETRY_WORDS = ("the run has ended but the controller has not yet confirmed the heater is "
                    "off: switch it off by hand")


def status_from_json(value: Any) -> Status | None:
    """A status object read back from JSON (the control socket, a file): the Status it is,
    or None when it is not one (not an object, or a key missing): a screen then shows no
    status rather than failing on another program's answer."""
    if not isinstance(value, dict) or not all(key in value for key in STATUS_KEYS):
        return None
    return value  # type: ignore[return-value]  # its values are the JSON the engine sent


def safe_state(since: float, attempts: int, now: float) -> SafeState:
    return {"state": SAFE_RETRYING, "severity": Severity.CRITICAL, "since": since,
            "since_s": _round(max(0.0, now - since), 1) or 0.0, "attempts": attempts,
            "words": SAFE_RETRY_WORDS}


class Status(TypedDict):
    """The status object, key by key (the order is the order `--json` prints)."""

    run: int | None
    kiln: str
    profile: str
    units: str
    state: RunState
    step: int
    step_count: int
    step_kind: str | None
    step_state: StepState
    step_words: str
    chamber_c: float | None
    load_c: float | None
    core_c: float | None
    setpoint_c: float | None
    target_c: float | None
    output_pct: float | None
    equalization: Equalization | None
    time_to_next_step_s: float | None
    time_to_operator_s: float | None
    time_to_end_s: float | None
    alarms: list[dict[str, Any]]
    """The active alarms (engine/alarms.py `Alarm.as_dict`)."""
    time: float
    started: float
    watch_only: bool
    safe_state: SafeState | None
    """Set while the run has ended but the controller has not confirmed the heat is off."""


STATUS_KEYS: tuple[str, ...] = tuple(Status.__annotations__)


@dataclass
class LastReading:
    chamber_c: float | None = None
    load_c: float | None = None
    core_c: float | None = None
    output_pct: float | None = None


@dataclass(frozen=True)
class RunFacts:
    """What the status says about the run that its rules do not know."""

    run_id: int | None
    kiln: str
    started: float
    watch_only: bool


def _round(value: float | None, digits: int = 2) -> float | None:
    return None if value is None else round(float(value), digits)


def _equalization(eq: Any) -> Equalization | None:
    if eq is None:
        return None
    return {
        "state": getattr(eq, "state", None),
        "words": getattr(eq, "words", ""),
        "slope_c_per_min": _round(getattr(eq, "slope_c_per_min", None), 3),
        "eta_s": _round(getattr(eq, "eta_s", None), 0),
        "eta_sigma_s": _round(getattr(eq, "eta_sigma_s", None), 0),
        "rule_of_thumb_s": _round(getattr(eq, "rule_of_thumb_s", None), 0),
    }


def remaining_plan_s(rules: RunRules, forecast: LiveForecast | None = None
                     ) -> tuple[float | None, float | None, float | None]:
    """(time to the next step, to the next time the person is needed, to the end).

    Later steps count at their planned length (open-ended ones at their known minimum, as in
    tuikiln.plan); None where the current step's end cannot be told. With a learned oven
    (`forecast`) ramps and cools count at what the oven can do, the current one from the
    chamber's temperature now.
    """
    s = rules.stepper
    if s.ended:
        return 0.0, None, 0.0
    left = s.step_time_left_s()
    step_now = s.step
    if forecast is not None and isinstance(step_now, Ramp | Cool) and s.last_temp_c is not None:
        oven_left = forecast.step_left_s(s.index, s.last_temp_c)
        left = oven_left if left is None or oven_left is None else max(left, oven_left)
    if s.waiting_for_operator:
        return left, 0.0, None
    steps = s.steps
    temp = s.target_c if s.target_c is not None else (s.last_temp_c or 20.0)
    to_end = left
    to_operator: float | None = None
    total_after = 0.0
    unknown = False
    for index, step in enumerate(steps[s.index + 1:], start=s.index + 1):
        if isinstance(step, Pause) and to_operator is None:
            to_operator = None if left is None or unknown else left + total_after
        if forecast is not None:
            predicted = forecast.duration_s(index)
            unknown = unknown or predicted is None
            duration = predicted or 0.0
        else:
            duration, _ = step_duration_s(step, temp)
        total_after += duration
        if isinstance(step, Ramp | Cool):
            temp = step.to_c
    if to_end is not None:
        to_end = None if unknown else to_end + total_after
    return left, to_operator, to_end


def build_status(rules: RunRules, facts: RunFacts, *, now: float, last: LastReading,
                 forecast: LiveForecast | None = None, safe: SafeState | None = None) -> Status:
    s = rules.stepper
    step = s.step
    to_next, to_operator, to_end = remaining_plan_s(rules, forecast)
    return {
        "run": facts.run_id,
        "kiln": facts.kiln,
        "profile": rules.profile.name,
        "units": rules.units,
        "state": rules.run_state,
        "step": min(s.index, len(s.steps) - 1) if s.steps else 0,
        "step_count": len(s.steps),
        "step_kind": None if step is None else step.kind,
        "step_state": s.state,
        "step_words": s.words(),
        "chamber_c": _round(last.chamber_c),
        "load_c": _round(last.load_c),
        "core_c": _round(last.core_c),
        "setpoint_c": _round(s.setpoint_c),
        "target_c": _round(s.target_c),
        "output_pct": _round(last.output_pct, 1),
        "equalization": _equalization(s.equalize) if s.state == StepState.EVENING else None,
        "time_to_next_step_s": _round(to_next, 0),
        "time_to_operator_s": _round(to_operator, 0),
        "time_to_end_s": _round(to_end, 0),
        "alarms": rules.alarms.as_list(),
        "time": now,
        "started": facts.started,
        "watch_only": facts.watch_only,
        "safe_state": safe,
    }
