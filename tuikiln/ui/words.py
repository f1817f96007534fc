"""The run in plain words for the screens: the step, the times ahead, the alarms.

Built from the status object's numbers (not the engine's sentences), so switching °C/°F
changes every value on show.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from tuikiln.engine.states import RunState, StepState
from tuikiln.events import Severity, said_text
from tuikiln.plan import Plan
from tuikiln.profile import Cool, Hold, Pause, Ramp
from tuikiln.ui.runfeed import finite
from tuikiln.units import Units, format_duration, format_rate, format_temp

ACK_KEY = "a"

RUN_STATE_WORDS: dict[str, str] = {
    RunState.STARTING: "starting",
    RunState.RUNNING: "running",
    RunState.PAUSED: "PAUSED by you",
    RunState.WAITING: "WAITING FOR YOU",
    RunState.ENDED: "ended",
}


def about(seconds: float | None) -> str:
    return f"about {format_duration(seconds)}" if seconds is not None else "unknown"


def step_words(status: Mapping[str, Any], plan: Plan | None, units: Units) -> str:
    """What the oven is doing now, e.g. 'holding at 1750 °F, 12m of 30m left'."""
    state = status.get("step_state")
    index = status.get("step")
    step = None
    if plan is not None and isinstance(index, int) and 0 <= index < len(plan.steps):
        step = plan.steps[index].step
    target = finite(status.get("target_c"))
    if target is None and isinstance(step, Ramp | Cool):
        target = step.to_c
    to_next = finite(status.get("time_to_next_step_s"))
    eq = status.get("equalization") or {}
    if status.get("state") == RunState.PAUSED:
        return f"paused by you at {format_temp(finite(status.get('setpoint_c')), units)}: " \
               "press r to resume"
    if state == StepState.HEATING:
        rate = format_rate(step.rate_c_per_s, units) if isinstance(step, Ramp) else ""
        return f"heating to {format_temp(target, units)}" + (f" at {rate}" if rate else "")
    if state == StepState.HEATING_FULL:
        return f"heating as fast as the oven goes to {format_temp(target, units)}"
    if state == StepState.REACHING:
        return f"waiting for the oven to reach {format_temp(target, units)}"
    if state == StepState.EVENING:
        eta = finite(eq.get("eta_s"))
        return f"waiting for the load to even out: {about(eta)}"
    if state == StepState.HOLDING:
        total = step.duration_s if isinstance(step, Hold) else None
        left = format_duration(to_next)
        of = f" of {format_duration(total)}" if total else ""
        return f"holding at {format_temp(target, units)}, {left}{of} left"
    if state == StepState.SLIPPED:
        return f"out of band at {format_temp(target, units)}: the hold clock is stopped"
    if state == StepState.COOLING:
        rate = format_rate(step.rate_c_per_s, units) if isinstance(step, Cool) else ""
        return f"cooling to {format_temp(target, units)}" + (f" at {rate}" if rate else "")
    if state == StepState.SETTLING:
        return f"waiting for the oven to come down to {format_temp(target, units)}"
    if state == StepState.COASTING:
        return f"cooling with the heater off to {format_temp(target, units)}"
    if state == StepState.WAITING_YOU:
        # The pause's own words are in the full-width band above: here a short reminder.
        kind = "the quench" if isinstance(step, Pause) and "quench" in step.message.lower() \
            else "you"
        return f"WAITING FOR {kind.upper()}: press {ACK_KEY} when done"
    if state == StepState.DONE:
        return "every step is done"
    words = status.get("step_words")
    return str(words) if words else str(state or StepState.STARTING)


def step_title(status: Mapping[str, Any], plan: Plan | None) -> str:
    index = status.get("step")
    count = status.get("step_count") or (len(plan.steps) if plan else None)
    kind = status.get("step_kind") or ""
    label = ""
    if plan is not None and isinstance(index, int) and 0 <= index < len(plan.steps):
        label = plan.steps[index].step.label
        kind = kind or plan.steps[index].kind
    if not isinstance(index, int):
        return "no step yet"
    name = f"{kind} ({label})" if label else kind
    return f"step {index + 1} of {count}: {name}"


def times_ahead(status: Mapping[str, Any]) -> list[tuple[str, str]]:
    """(label, value) rows: next step, next time the person is needed, the end."""
    rows = [("next step", format_duration(finite(status.get("time_to_next_step_s"))))]
    operator = finite(status.get("time_to_operator_s"))
    if (status.get("step_state") == StepState.WAITING_YOU
            or status.get("state") == RunState.WAITING):
        rows.append(("you're needed", "NOW"))
    else:
        rows.append(("you're needed", format_duration(operator) if operator is not None
                     else "not again"))
    end = finite(status.get("time_to_end_s"))
    rows.append(("end", format_duration(end)))
    return rows


def alarm_line(alarm: Mapping[str, Any], units: Units) -> str:
    """One alarm, readable without colour: a symbol, its severity in capitals, the words."""
    severity = str(alarm.get("severity", Severity.WARNING))
    symbol = "✖" if severity == Severity.CRITICAL else "▲"
    seen = "seen" if alarm.get("acknowledged") else f"press {ACK_KEY} to acknowledge"
    words = said_text(alarm, units) or str(alarm.get("words", alarm.get("code", "alarm")))
    return f"{symbol} {severity.upper()} ALARM: {words}  ({seen})"


def safe_state_line(safe: Mapping[str, Any]) -> str:
    """The engine still trying to turn the heat off after the run ended: above every alarm,
    and nothing to acknowledge (only the oven's own switch ends it)."""
    tries = int(safe.get("attempts") or 0)
    since = finite(safe.get("since_s"))
    when = f", {format_duration(since)} since the run ended" if since is not None else ""
    words = str(safe.get("words") or "the heater may still be on: switch it off by hand")
    return f"✖ CRITICAL: {words} ({tries} tries so far{when})"


def unacknowledged(status: Mapping[str, Any] | None) -> list[Mapping[str, Any]]:
    if not status:
        return []
    return [a for a in status.get("alarms") or () if not a.get("acknowledged")]
