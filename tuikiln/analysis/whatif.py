"""Run the live engine's rules again over logged samples: the same code, other thresholds.

    result = rerun_rules(trace, profile, limits, events=logged_events, max_c=kiln_max_c)
    result.step, result.state     # per sample, as the engine would have logged them
    result.events                 # what the engine would have said, in the run log's shape
    compare_alarms(logged_events, result.events)   # what would have fired, what would not

The stepper, the alarm rules and the equalization detector are `tuikiln.engine.rules.RunRules`
itself: its array forms over the whole log where they can follow the run (a 7-day log in well
under a second), else fed one logged sample at a time. Both share the rules' thresholds,
decisions and words, and are held equal by tests/test_whatif_arrays.py. What cannot be
replayed is the oven's answer to a different setpoint: the readings stay the ones logged.

The person's commands (pause, resume, skip, abort) are applied again at their logged times.
A pause step is acknowledged at the next logged acknowledgement after it began, or at once
when the log has none (another tool's log), so a replay never waits for a person.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from tuikiln import events as ev
from tuikiln.engine import states as st
from tuikiln.engine.alarm_arrays import KINDS, Seen, alarm_events
from tuikiln.engine.rules import RunRules, TickInput
from tuikiln.engine.stepper_arrays import NotInArrays, follow
from tuikiln.limits import Limits
from tuikiln.profile import Hold, Profile, Ramp
from tuikiln.units import Units

REPLAYED_COMMANDS = ("pause", "resume", "skip", "abort")
_DONE_CODE = st.STATE_CODE[st.DONE]


@dataclass
class Rerun:
    """What the engine's rules decide over a logged trace."""

    step: np.ndarray
    """Step index per sample (len(profile.steps) once every step is done)."""
    state: np.ndarray
    """Step state code per sample (tuikiln.engine.states.STATE_CODE)."""
    setpoint_c: np.ndarray
    """The setpoint the rules would have asked for (NaN before the first)."""
    events: list[dict[str, Any]] = field(default_factory=list)
    outcome: str | None = None
    end_reason: str = ""
    ended_at: float | None = None
    how: str = "per sample"
    """"arrays" when the rules' array forms decided, "per sample" when RunRules did."""


def _finite_or_none(value: float) -> float | None:
    return value if math.isfinite(value) else None


def _as_dict(event: ev.Event) -> dict[str, Any]:
    return {"id": None, "time": event.time, "kind": event.kind, "severity": event.severity,
            "message": event.message, "detail": dict(event.detail)}


def _logged_commands(events: Sequence[Mapping[str, Any]], with_skips: bool
                     ) -> tuple[list[tuple[float, str, str | None]], list[float]]:
    """(time, name, arg) of the person's commands to apply again, and acknowledgement times."""
    commands: list[tuple[float, str, str | None]] = []
    acks: list[float] = []
    for event in events:
        detail = event.get("detail") or {}
        if event["kind"] == ev.OPERATOR_ACKNOWLEDGED:
            acks.append(float(event["time"]))
        elif event["kind"] == ev.COMMAND:
            name = detail.get("name")
            if name in REPLAYED_COMMANDS and (with_skips or name != "skip"):
                commands.append((float(event["time"]), str(name), None))
    commands.sort(key=lambda c: c[0])
    acks.sort()
    return commands, acks


def rerun_rules(
    t: np.ndarray,
    chamber_c: np.ndarray,
    load_c: np.ndarray,
    output_pct: np.ndarray,
    profile: Profile,
    limits: Limits,
    *,
    events: Sequence[Mapping[str, Any]] = (),
    flags: np.ndarray | None = None,
    max_c: float | None = None,
    units: Units | None = None,
    same_profile: bool = True,
    sample_s: float = 0.0,
    unjudged: frozenset[str] = frozenset(),
    per_sample: bool = False,
) -> Rerun:
    """Feed the samples to a fresh RunRules; `load_c` is the load thermocouple (NaN: none;
    the rules keep their own core estimate, as in a live run).

    `sample_s`: the log's sample interval, for a log that has no step column (another
    tool's, or a thinned export). The rules count a hold's clock from the first sample in
    band to the last, which falls short of the real hold by up to one interval, so each hold
    is taken as done one interval early: a 10 s log that ends at the last sample of a hold
    finished it. `unjudged`: alarm codes about signals the log does not have.

    The rules' array forms (tuikiln.engine.stepper_arrays, alarm_arrays) decide where they
    can follow the run: no `equalized` holds, no replayed commands (acknowledgements of a
    pause step are fine), times that never go backwards. Otherwise, or with `per_sample`,
    the samples go to RunRules one at a time. Both give the same steps, states, setpoints,
    alarms and outcome (tests/test_whatif_arrays.py); the array forms leave out the
    step-state words and the pause reminders."""
    if sample_s > 0.0:
        profile = dataclasses.replace(profile, steps=tuple(
            dataclasses.replace(s, duration_s=max(0.0, s.duration_s - sample_s))
            if isinstance(s, Hold) else s for s in profile.steps))
    if not per_sample:
        rules = RunRules(profile, limits, max_c=max_c, units=units)
        rules.alarms.unjudged = frozenset(unjudged)
        commands, acks = _logged_commands(events, with_skips=same_profile)
        if not commands:
            try:
                return rerun_arrays(rules, t, chamber_c, output_pct, flags, acks)
            except NotInArrays:
                pass
    n = t.size
    step = np.full(n, -1, dtype=np.int64)
    state = np.zeros(n, dtype=np.int64)
    setpoints = np.full(n, np.nan)
    rules = RunRules(profile, limits, max_c=max_c, units=units)
    rules.alarms.unjudged = frozenset(unjudged)
    commands, acks = _logged_commands(events, with_skips=same_profile)
    next_command = 0
    next_ack = 0
    out: list[dict[str, Any]] = []
    code = st.STATE_CODE
    stepper = rules.stepper
    pause_since: float | None = None
    no_reading = st.FLAG_NO_READING
    sensor_fault = st.FLAG_SENSOR_FAULT
    ended_at: float | None = None
    for i in range(n):
        now = float(t[i])
        while next_command < len(commands) and commands[next_command][0] <= now:
            _, name, arg = commands[next_command]
            next_command += 1
            out.extend(_as_dict(e) for e in rules.command(now, name, arg, "replay").events)
        if stepper.waiting_for_operator:
            if pause_since is None:
                pause_since = now
                while next_ack < len(acks) and acks[next_ack] < pause_since:
                    next_ack += 1
            if next_ack >= len(acks) or acks[next_ack] <= now:
                next_ack += 1
                out.extend(_as_dict(e) for e in rules.command(now, "ack", "you", "replay").events)
        else:
            pause_since = None
        chamber = _finite_or_none(float(chamber_c[i]))
        sample_flags = int(flags[i]) if flags is not None else 0
        decision = rules.tick(now, TickInput(
            chamber_c=chamber,
            load_c=_finite_or_none(float(load_c[i])),
            output_pct=_finite_or_none(float(output_pct[i])),
            link_ok=not (sample_flags & no_reading) and (chamber is not None
                                                        or bool(sample_flags & sensor_fault)),
            sensor_fault=bool(sample_flags & sensor_fault),
        ))
        out.extend(_as_dict(e) for e in decision.events)
        step[i] = stepper.index
        state[i] = code.get(stepper.state, _DONE_CODE)
        if stepper.setpoint_c is not None:
            setpoints[i] = stepper.setpoint_c
        if decision.ended:
            ended_at = now
            step[i + 1:] = stepper.index
            state[i + 1:] = _DONE_CODE
            break
    return Rerun(step, state, setpoints, out, rules.outcome, rules.end_reason, ended_at)


def _finite(values: np.ndarray) -> np.ndarray:
    values = np.asarray(values, dtype=float)
    return np.where(np.isfinite(values), values, np.nan)


def rerun_arrays(rules: RunRules, t: np.ndarray, chamber_c: np.ndarray,
                 output_pct: np.ndarray, flags: np.ndarray | None,
                 acks: Sequence[float] = ()) -> Rerun:
    """What `rules` (fresh) decide over the samples, by the rules' array forms; raises
    NotInArrays where only the per-sample rules can follow the run."""
    t = np.asarray(t, dtype=float)
    n = t.size
    if not np.isfinite(t).all() or (n > 1 and bool((np.diff(t) < 0).any())):
        raise NotInArrays("sample times go backwards")
    chamber = _finite(chamber_c)
    output = _finite(output_pct)
    bits = np.zeros(n, dtype=np.int64) if flags is None else np.asarray(flags, dtype=np.int64)
    sensor = (bits & st.FLAG_SENSOR_FAULT) != 0
    link_ok = ((bits & st.FLAG_NO_READING) == 0) & (np.isfinite(chamber) | sensor)
    # The stepper is given the reading whenever the device answered without a fault.
    given = np.where(link_ok & ~sensor, chamber, np.nan)
    profile = rules.profile
    steps = follow(profile, rules.limits, rules.units, t, given,
                   watched_equalize=rules.load_watch is not None, acks=acks)
    count = len(profile.steps)
    kind_of = np.array([KINDS.index(s.kind) for s in profile.steps] + [-1], dtype=np.int64)
    rated_of = np.array([isinstance(s, Ramp) and s.rate_c_per_s is not None
                         for s in profile.steps] + [False])
    index = np.minimum(steps.step, count)
    seen = Seen(t, link_ok, chamber, sensor, output, steps.setpoint, steps.target,
                kind_of[index], steps.state, steps.state_since, steps.started, rated_of[index],
                steps.heat_off)
    found = alarm_events(rules.alarms, seen)
    ends = [i for i in (steps.done_at, found.first_critical) if i is not None]
    end = min(ends) if ends else None
    merged = [(i, -1, k, e) for k, (i, e) in enumerate(steps.events)]
    merged += [(i, rank, 0, e) for i, rank, e in found.events]
    merged.sort(key=lambda m: (m[0], m[1], m[2]))
    out = [_as_dict(e) for i, _, _, e in merged if end is None or i <= end]
    step, state, setpoint = steps.step, steps.state, steps.setpoint
    outcome, reason, ended_at = None, "", None
    if end is not None:
        step[end + 1:] = step[end]
        state[end + 1:] = _DONE_CODE
        setpoint[end + 1:] = np.nan
        ended_at = float(t[end])
        if found.first_critical == end:
            outcome, reason = st.STOPPED_BY_ALARM, found.critical_words
        else:
            outcome, reason = st.COMPLETED, "every step is done"
    return Rerun(step, state, setpoint, out, outcome, reason, ended_at, how="arrays")


@dataclass(frozen=True)
class AlarmSpan:
    code: str
    severity: str
    words: str
    raised_t: float
    cleared_t: float | None
    as_logged: bool = False
    """The words are the stored sentence (an older log, whose alarms carry no numbers), in
    the units it was logged in, not in the units asked for."""


def alarm_spans(events: Sequence[Mapping[str, Any]], units: Units | None = None
                ) -> list[AlarmSpan]:
    """Raised alarms with when they cleared (None: still active at the end of the log),
    their words in `units` where the events carry their numbers."""
    open_: dict[str, dict[str, Any]] = {}
    spans: list[AlarmSpan] = []
    for event in events:
        detail = event.get("detail") or {}
        code = detail.get("alarm")
        if not code:
            continue
        if event["kind"] == ev.ALARM_RAISED:
            open_[code] = dict(event)
        elif event["kind"] == ev.ALARM_CLEARED and code in open_:
            raised = open_.pop(code)
            words, as_logged = _words(raised, units)
            spans.append(AlarmSpan(code, raised["severity"], words, raised["time"],
                                   float(event["time"]), as_logged))
    for code, raised in open_.items():
        words, as_logged = _words(raised, units)
        spans.append(AlarmSpan(code, raised["severity"], words, raised["time"], None,
                               as_logged))
    spans.sort(key=lambda s: s.raised_t)
    return spans


def _words(event: Mapping[str, Any], units: Units | None) -> tuple[str, bool]:
    """An alarm's words in `units` from its numbers, else as stored (and so marked)."""
    detail = event.get("detail") or {}
    if units is not None and isinstance(detail, Mapping):
        shown = ev.said_text(detail, units, key="words_template")
        if shown is not None:
            return shown, False
    return str(detail.get("words") or event.get("message") or ""), units is not None


@dataclass(frozen=True)
class AlarmChange:
    """One alarm in the comparison: fired in the log, in the replay, or in both."""

    code: str
    words: str
    logged_t: float | None
    replayed_t: float | None

    @property
    def change(self) -> str:
        if self.logged_t is None:
            return "would fire"
        if self.replayed_t is None:
            return "would not fire"
        return "fires in both"


# Alarms raised within this of each other count as the same one fired at about the same time.
MATCH_WITHIN_S = 600.0


def compare_alarms(logged: Sequence[Mapping[str, Any]],
                   replayed: Sequence[Mapping[str, Any]],
                   units: Units | None = None) -> list[AlarmChange]:
    """Pair the alarms raised in the log with those the replay raised, by code and time;
    their words in `units` where the events carry their numbers."""
    left = alarm_spans(logged, units)
    right = alarm_spans(replayed, units)
    used: set[int] = set()
    changes: list[AlarmChange] = []
    for span in left:
        best = None
        for j, other in enumerate(right):
            if j in used or other.code != span.code:
                continue
            gap = abs(other.raised_t - span.raised_t)
            if gap <= MATCH_WITHIN_S and (best is None or gap < best[0]):
                best = (gap, j)
        if best is None:
            changes.append(AlarmChange(span.code, span.words, span.raised_t, None))
        else:
            used.add(best[1])
            changes.append(AlarmChange(span.code, right[best[1]].words, span.raised_t,
                                       right[best[1]].raised_t))
    for j, other in enumerate(right):
        if j not in used:
            changes.append(AlarmChange(other.code, other.words, None, other.raised_t))
    changes.sort(key=lambda c: c.logged_t if c.logged_t is not None else c.replayed_t or 0.0)
    return changes
