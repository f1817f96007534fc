"""Hold a logged run against its profile, step by step: did the oven do what the plan said?

    trace = Trace.from_samples(log.samples(run_id), start_t=info.started)
    result = replay_run(trace, profile, limits, events=log.events(run_id), outcome=...)
    result.verdict, result.steps[i].verdict, result.steps[i].reasons, result.as_dict()

Who decided what:

- Step boundaries and step states come from the run itself: the engine logs the step index
  and step state with every sample and a `step-start` / `step-end` event for every step,
  with its own hold clock. For a log made by another tool, or to hold a run against another
  profile, `tuikiln.analysis.whatif.rerun_rules` feeds the samples to the engine's own rules
  first, and the same analysis reads the states those rules produce.
- Alarms are the ones the engine raised (or the re-run raised).
- The figures (rates, overshoot, lowest temperature, time in and out of band) are numpy over
  each step's slice of the samples; the band test is `in_band`, the stepper's rule.

Verdicts are our own words: "met", "met with remarks", "missed", each with reasons in plain
words. Times in the result are seconds from the start of the run (`*_s`); temperatures °C.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from tuikiln import events as ev
from tuikiln.analysis import quench as quench_rules
from tuikiln.analysis import temper as temper_rules
from tuikiln.analysis.whatif import AlarmSpan, Rerun, alarm_spans, rerun_rules
from tuikiln.engine import states as st
from tuikiln.engine.alarms import ALARMS, CRITICAL
from tuikiln.engine.stepper import BAND_DWELL_S, within_band
from tuikiln.limits import Limits
from tuikiln.profile import Cool, Hold, Pause, Profile, Ramp, Step, describe_step
from tuikiln.units import Units, delta_from_c, format_duration, format_rate, format_temp, symbol

MET = "met"
REMARKS = "met with remarks"
MISSED = "missed"
VERDICTS = (MET, REMARKS, MISSED)
# A run still going is judged only where it has been: its step under way and the steps to
# come have no verdict yet (a miss already made, out of band past the grace, say, stays one).
UNDER_WAY = "under way"
NOT_YET = "not yet"

# Out of band for less than this in all during a hold is reading noise at the band's edge:
# shown as a figure, not a remark (our choice).
OUT_OF_BAND_REMARK_S = 10.0
# Tempering happens below the lower critical temperature (about 727 °C in plain carbon steel,
# textbook value); holds from TEMPER_MIN_C up to TEMPER_MAX_C count as tempers.
TEMPER_MIN_C = temper_rules.DEFAULT_THRESHOLD_C
TEMPER_MAX_C = 700.0
# A ramp whose chamber rose at less than this share of the planned rate fell short of it
# (our choice: a fifth slower is more than a controller's lag at the start and end).
RATE_SHORT_SHARE = 0.8
# A hold at or above this is a hardening (austenitizing) hold: a quench follows it.
HARDEN_MIN_C = 700.0
# "Hand-warm" (about 150 °F), when a quenched part is usually put to temper: common practice,
# no source.
DEFAULT_QUENCH_BELOW_C = 65.0

_REACHED_CODES = np.array([st.STATE_CODE[s] for s in (st.EVENING, st.HOLDING, st.SLIPPED)])
_HOLDING = st.STATE_CODE[st.HOLDING]
_SLIPPED = st.STATE_CODE[st.SLIPPED]
_EVENING = st.STATE_CODE[st.EVENING]


def in_band(temp_c: np.ndarray | float, target_c: float, band_c: float) -> np.ndarray | bool:
    """The engine's band rule (tuikiln.engine.stepper.within_band), for arrays as well."""
    return within_band(np.asarray(temp_c), target_c, band_c)


def with_dwell(raw: np.ndarray, seconds: np.ndarray) -> np.ndarray:
    """The stepper's band dwell over a reached hold's samples: a stretch in or out of the band
    shorter than BAND_DWELL_S goes to the side of the last longer one (in band at first)."""
    n = raw.size
    if n == 0:
        return raw
    edges = np.flatnonzero(raw[1:] != raw[:-1]) + 1
    starts, ends = np.r_[0, edges], np.r_[edges, n]
    total = np.r_[0.0, np.cumsum(seconds)]
    decided = np.where(total[ends] - total[starts] >= BAND_DWELL_S, raw[starts].astype(np.int8), -1)
    last = np.maximum.accumulate(np.where(decided >= 0, np.arange(decided.size), -1))
    side = np.where(last >= 0, decided[np.maximum(last, 0)], 1).astype(bool)
    return np.repeat(side, ends - starts)


@dataclass(eq=False)
class Trace:
    """A run's samples, as numpy arrays (NaN where there was no reading)."""

    t: np.ndarray
    chamber_c: np.ndarray
    load_c: np.ndarray
    core_c: np.ndarray
    setpoint_c: np.ndarray
    output_pct: np.ndarray
    step: np.ndarray | None = None
    state: np.ndarray | None = None
    flags: np.ndarray | None = None
    start_t: float = 0.0
    """When the run started (the engine's clock): times in results are from here."""

    @classmethod
    def from_samples(cls, samples: Mapping[str, np.ndarray], start_t: float | None = None
                     ) -> Trace:
        t = np.asarray(samples["t"], dtype=float)
        n = t.size
        nan = np.full(n, np.nan)

        def column(name: str) -> np.ndarray:
            values = samples.get(name)
            return nan if values is None else np.asarray(values, dtype=float)

        def codes(name: str) -> np.ndarray | None:
            values = samples.get(name)
            return None if values is None else np.asarray(values, dtype=np.int64)

        first = float(t[0]) if n else 0.0
        return cls(t, column("chamber_c"), column("load_c"), column("core_c"),
                   column("setpoint_c"), column("output_pct"), codes("step"), codes("state"),
                   codes("flags"), first if start_t is None else float(start_t))

    @property
    def has_load(self) -> bool:
        return bool(np.isfinite(self.load_c).any())

    @property
    def sample_s(self) -> float:
        """The usual interval between samples (the median: a gap does not move it)."""
        if self.t.size < 2:
            return 0.0
        return float(np.median(np.diff(self.t)))

    def has(self, column: str) -> bool:
        """The log has this signal (a column of all NaN is one the log never had)."""
        return bool(np.isfinite(getattr(self, column)).any())


# Alarms that judge the heater from its output or the controller's setpoint: a log with
# neither column cannot support them.
HEATER_ALARMS = frozenset({"no-rise", "heat-stuck-on"})


def unjudged_alarms(trace: Trace) -> frozenset[str]:
    if trace.has("output_pct") or trace.has("setpoint_c"):
        return frozenset()
    return HEATER_ALARMS


@dataclass
class StepResult:
    index: int
    step: Step
    verdict: str
    reasons: list[str]
    start_s: float | None
    end_s: float | None
    figures: dict[str, Any] = field(default_factory=dict)
    alarms: list[AlarmSpan] = field(default_factory=list)

    @property
    def kind(self) -> str:
        return self.step.kind

    def title(self, units: Units) -> str:
        label = f" ({self.step.label})" if self.step.label else ""
        return f"step {self.index + 1}{label}: {describe_step(self.step, units)}"

    def as_dict(self, start_t: float, units: Units) -> dict[str, Any]:
        return {"index": self.index, "number": self.index + 1, "kind": self.kind,
                "label": self.step.label, "description": describe_step(self.step, units),
                "verdict": self.verdict, "reasons": list(self.reasons),
                "start_s": self.start_s, "end_s": self.end_s, **_jsonable(self.figures),
                "alarms": [_alarm_dict(a, start_t) for a in self.alarms]}


@dataclass
class Replay:
    """The whole answer: per step, for the run, and the temper and quench figures."""

    profile: Profile
    limits: Limits
    units: Units
    trace: Trace
    steps: list[StepResult]
    verdict: str
    reasons: list[str]
    alarms: list[AlarmSpan]
    events: list[dict[str, Any]]
    outcome: str | None
    source: str
    """"log" (the engine's own states) or "rules" (the rules run again over the samples)."""
    run: dict[str, Any] = field(default_factory=dict)
    temper: dict[str, Any] = field(default_factory=dict)
    quench: list[dict[str, Any]] = field(default_factory=list)
    notes: list[dict[str, Any]] = field(default_factory=list)
    rerun: Rerun | None = None

    def as_dict(self) -> dict[str, Any]:
        start = self.trace.start_t
        return {
            "run": self.run,
            "profile": {"name": self.profile.name, "units": self.profile.units,
                        "path": self.profile.path},
            "verdict": self.verdict,
            "reasons": list(self.reasons),
            "outcome": self.outcome,
            "source": self.source,
            "limits": self.limits.as_dict(),
            "steps": [s.as_dict(start, self.units) for s in self.steps],
            "alarms": [_alarm_dict(a, start) for a in self.alarms],
            "temper": _jsonable(self.temper),
            "quench": _jsonable(self.quench),
            "notes": self.notes,
            "samples": int(self.trace.t.size),
            "load_thermocouple": self.trace.has_load,
        }


def _alarm_dict(alarm: AlarmSpan, start_t: float) -> dict[str, Any]:
    severity, name = ALARMS.get(alarm.code, (alarm.severity, alarm.code))
    return {"code": alarm.code, "name": name, "severity": alarm.severity, "words": alarm.words,
            "words_as_logged": alarm.as_logged, "raised_s": alarm.raised_t - start_t,
            "cleared_s": None if alarm.cleared_t is None else alarm.cleared_t - start_t}


def _jsonable(value: Any) -> Any:
    if isinstance(value, dict):
        return {k: _jsonable(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_jsonable(v) for v in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


# ----- words -----


def clock(seconds: float | None) -> str:
    """Seconds from the start of the run as h:mm:ss ("--" when unknown)."""
    if seconds is None or not math.isfinite(seconds):
        return "--"
    whole = int(round(max(0.0, seconds)))
    hours, rest = divmod(whole, 3600)
    return f"{hours}:{rest // 60:02d}:{rest % 60:02d}"


class _Words:
    def __init__(self, units: Units) -> None:
        self.units = units

    def t(self, celsius: float | None) -> str:
        return format_temp(celsius, self.units)

    def d(self, kelvin: float) -> str:
        return f"{delta_from_c(kelvin, self.units):.0f} {symbol(self.units)}"


# ----- the analysis -----


def replay_run(
    trace: Trace,
    profile: Profile,
    limits: Limits,
    *,
    events: Sequence[Mapping[str, Any]] = (),
    outcome: str | None = None,
    units: Units | None = None,
    max_c: float | None = None,
    rerun: bool | None = None,
    same_profile: bool = True,
    c: float = temper_rules.DEFAULT_C,
    quench_below_c: float = DEFAULT_QUENCH_BELOW_C,
    run: Mapping[str, Any] | None = None,
) -> Replay:
    """Analyse `trace` against `profile`.

    `rerun` None: use the logged step states when the trace has them, else run the engine's
    rules over the samples; True: always run the rules (another profile, other limits).
    """
    units = units or profile.units
    logged_events = [dict(e) for e in events]
    use_rules = rerun if rerun is not None else (trace.step is None or trace.state is None)
    rerun_result: Rerun | None = None
    if use_rules:
        # Only what the log shows: no step column, so holds are judged to one sample interval;
        # no heater output nor setpoint column, so nothing is said about the heater.
        foreign = trace.step is None
        rerun_result = rerun_rules(trace.t, trace.chamber_c, trace.load_c, trace.output_pct,
                                   profile, limits, events=logged_events, flags=trace.flags,
                                   max_c=max_c, units=units, same_profile=same_profile,
                                   sample_s=trace.sample_s if foreign else 0.0,
                                   unjudged=unjudged_alarms(trace))
        step_codes, state_codes = rerun_result.step, rerun_result.state
        rule_events = rerun_result.events
        if foreign:
            # Another tool's log has no outcome: the steps' verdicts say what happened, and
            # a log that simply stops is not a run that failed.
            outcome = rerun_result.outcome
        elif outcome is None or not same_profile:
            outcome = rerun_result.outcome or st.UNFINISHED
        source = "rules"
    else:
        assert trace.step is not None and trace.state is not None
        step_codes, state_codes = trace.step, trace.state
        rule_events = logged_events
        source = "log"
    # The rules re-run over the samples know nothing of the device: its events (a controller
    # armed again after a reboot) come from the log.
    device_events = [e for e in logged_events if e["kind"] == ev.DEVICE]
    analysis = _Analysis(trace, profile, limits, units, step_codes, state_codes,
                         rule_events if source == "log" else [*rule_events, *device_events],
                         outcome)
    steps = [analysis.step(i) for i in range(len(profile.steps))]
    verdict, reasons = _run_verdict(steps, outcome, rerun_result, units)
    notes = [{"at_s": float(e["time"]) - trace.start_t,
              "text": str((e.get("detail") or {}).get("text") or e["message"])}
             for e in logged_events if e["kind"] == ev.NOTE]
    result = Replay(profile, limits, units, trace, steps, verdict, reasons,
                    alarm_spans(rule_events, units), rule_events, outcome, source,
                    run=dict(run or {}), notes=notes, rerun=rerun_result)
    result.temper = temper_figures(result, c)
    result.quench = quench_figures(result, quench_below_c)
    return result


class _Analysis:
    def __init__(self, trace: Trace, profile: Profile, limits: Limits, units: Units,
                 step_codes: np.ndarray, state_codes: np.ndarray,
                 events: Sequence[Mapping[str, Any]], outcome: str | None = None) -> None:
        self.trace = trace
        self.outcome = outcome
        self.going = outcome == st.RUN_RUNNING
        """The run is still going: an unfinished step is under way, not missed."""
        self.profile = profile
        self.limits = limits
        self.units = units
        self.words = _Words(units)
        self.state = state_codes
        self.t = trace.t
        self.dt = np.diff(trace.t, prepend=trace.t[:1]) if trace.t.size else trace.t
        # Steps only move forward; a running maximum makes the column safe to search.
        self.step_sorted = np.maximum.accumulate(step_codes) if step_codes.size else step_codes
        self.starts: dict[int, Mapping[str, Any]] = {}
        self.ends: dict[int, Mapping[str, Any]] = {}
        self.equalized: dict[int, float] = {}
        self.rearmed = [float(e["time"]) for e in events if e["kind"] == ev.DEVICE
                        and (e.get("detail") or {}).get("words") == ev.REARMED]
        """When the engine armed the controller again (it may have rebooted)."""
        for e in events:
            index = (e.get("detail") or {}).get("index")
            if index is None:
                continue
            if e["kind"] == ev.STEP_START:
                self.starts.setdefault(int(index), e)
            elif e["kind"] == ev.STEP_END:
                self.ends[int(index)] = e
            elif e["kind"] == ev.EQUALIZED:
                self.equalized.setdefault(int(index), float(e["time"]))
        self.alarms = alarm_spans(events, units)
        self.target = _targets(profile, trace)

    # ----- where each step is in the samples -----

    def bounds(self, index: int) -> tuple[int, int, float | None, float | None, bool]:
        """(first sample, end sample, start t, end t, finished) of step `index`."""
        n = self.t.size
        lo = int(np.searchsorted(self.step_sorted, index, "left"))
        hi = int(np.searchsorted(self.step_sorted, index + 1, "left"))
        start_event = self.starts.get(index)
        end_event = self.ends.get(index)
        start_t = float(start_event["time"]) if start_event else (
            float(self.t[lo]) if lo < n else None)
        finished = end_event is not None or hi < n
        end_t = float(end_event["time"]) if end_event else (float(self.t[hi]) if hi < n else None)
        if start_event is not None and start_t is not None:
            lo = int(np.searchsorted(self.t, start_t, "left"))
        if end_event is not None and end_t is not None:
            hi = int(np.searchsorted(self.t, end_t, "right"))
        if start_t is None:
            return n, n, None, None, False
        return lo, max(lo, hi), start_t, end_t, finished

    def rel(self, t: float | None) -> float | None:
        return None if t is None else t - self.trace.start_t

    def step(self, index: int) -> StepResult:
        step = self.profile.steps[index]
        lo, hi, start_t, end_t, finished = self.bounds(index)
        alarms = [a for a in self.alarms if self._step_at(a.raised_t) == index]
        if start_t is None:
            if self.going:
                return StepResult(index, step, NOT_YET, ["not yet: the run is still going"],
                                  None, None, {}, alarms)
            return StepResult(index, step, MISSED, ["never started: the run ended before it"],
                              None, None, {}, alarms)
        result = StepResult(index, step, MET, [], self.rel(start_t), self.rel(end_t),
                            {"duration_s": None if end_t is None else end_t - start_t,
                             "finished": finished}, alarms)
        end_event = self.ends.get(index)
        skipped = bool(end_event and (end_event.get("detail") or {}).get("skipped"))
        result.figures["skipped"] = skipped
        if isinstance(step, Ramp | Cool):
            self._moving(result, step, lo, hi, start_t, end_t, finished)
        elif isinstance(step, Hold):
            self._hold(result, step, lo, hi, start_t, end_t, finished, end_event)
        else:
            self._pause(result, step, start_t, end_t, finished)
        self._alarm_reasons(result)
        for when in self.rearmed:
            if self._step_at(when) == index:
                _worse(result, REMARKS, f"the controller was armed again at "
                       f"{clock(self.rel(when))}: it held another setpoint or had stopped "
                       "(it may have rebooted)")
        if skipped and result.verdict == MET:
            _worse(result, REMARKS, "skipped by you")
        if self.going and not result.figures["finished"] and result.verdict != MISSED:
            result.reasons.insert(0, self._so_far(result, step, start_t))
            result.verdict = UNDER_WAY
        return result

    def _so_far(self, result: StepResult, step: Step, start_t: float) -> str:
        """How far the step under way has got, in plain words."""
        w = self.words
        since = format_duration(float(self.t[-1]) - start_t) if self.t.size else "0s"
        if isinstance(step, Hold):
            clock_s = result.figures.get("hold_clock_s") or 0.0
            return (f"under way: {format_duration(clock_s)} of the "
                    f"{format_duration(step.duration_s)} hold at temperature so far")
        if isinstance(step, Pause):
            return f"under way: waiting for you for {since}"
        now = result.figures.get("reached_c")
        return (f"under way for {since}: at {w.t(now)} now, the target is {w.t(step.to_c)}"
                if now is not None else f"under way for {since}")

    def _step_at(self, t: float) -> int:
        i = int(np.searchsorted(self.t, t, "right")) - 1
        if i < 0 or not self.step_sorted.size:
            return 0
        return int(self.step_sorted[min(i, self.step_sorted.size - 1)])

    # ----- ramps and cools -----

    def _moving(self, result: StepResult, step: Ramp | Cool, lo: int, hi: int,
                start_t: float, end_t: float | None, finished: bool) -> None:
        w = self.words
        temps = self.trace.chamber_c[lo:hi]
        times = self.t[lo:hi]
        good = np.isfinite(temps)
        figures = result.figures
        figures["target_c"] = step.to_c
        rate = step.rate_c_per_s
        figures["planned_rate_c_per_h"] = None if rate is None else rate * 3600.0
        if good.sum() >= 2:
            t_good, temp_good = times[good], temps[good]
            span = float(t_good[-1] - t_good[0])
            from_c, to_c = float(temp_good[0]), float(temp_good[-1])
            figures["from_c"] = from_c
            figures["reached_c"] = to_c
            figures["achieved_rate_c_per_h"] = (abs(to_c - from_c) / span * 3600.0
                                                if span > 0 else None)
        else:
            from_c = None
        planned_s = None
        if rate is not None and from_c is not None:
            planned_s = abs(step.to_c - from_c) / rate
        figures["planned_s"] = planned_s
        duration = figures["duration_s"]
        behind = None if planned_s is None or duration is None else duration - planned_s
        figures["behind_schedule_s"] = behind
        if isinstance(step, Ramp) and temps.size:
            self._overshoot(figures, temps, times, step.to_c)
        if not finished:
            now = figures.get("reached_c")
            if self.going:
                return  # under way: judged when it has ended
            if self._reached_between_samples(step, times, temps):
                result.figures["finished"] = True
                return
            if self._cooling_at_end(result, step, temps):
                begun = times.size >= 2 and times[-1] - times[0] > 2.0 * self.trace.sample_s
                _worse(result, REMARKS, f"the log ends at {w.t(now)} while cooling (the "
                       f"target is {w.t(step.to_c)})" if begun else
                       "not in the log: the log ends as the cool begins")
                return
            result.verdict = MISSED
            result.reasons.append(f"did not finish: {self._ending()} at {w.t(now)} (the "
                                  f"target is {w.t(step.to_c)})")
            return
        late = behind is not None and behind > self.limits.behind_for
        if late:
            achieved = (figures.get("achieved_rate_c_per_h") or 0.0) / 3600.0
            _worse(result, REMARKS, f"finished {format_duration(behind)} later than planned "
                   f"(planned {format_rate(rate, self.units)}, achieved "
                   f"{format_rate(achieved, self.units)})")
        if isinstance(step, Ramp):
            self._ramp_shortfall(result, step, figures, said_rate=late)

    def _ramp_shortfall(self, result: StepResult, step: Ramp, figures: dict[str, Any],
                        said_rate: bool) -> None:
        """A finished ramp whose chamber fell short of its target or its rate is not plainly
        met, and one on an oven that never heated is missed: the setpoint moving on plan says
        nothing about the oven (a controller that never took its setpoint looks the same)."""
        w = self.words
        from_c, reached = figures.get("from_c"), figures.get("reached_c")
        if from_c is None or reached is None:
            return
        band = self.limits.band
        up = step.to_c >= from_c
        moved = reached - from_c if up else from_c - reached
        short = step.to_c - reached if up else reached - step.to_c
        figures["short_of_target_c"] = max(0.0, short)
        if up and step.to_c - from_c > band and moved < band:
            _worse(result, MISSED, f"the oven never heated: {w.t(from_c)} at the start, "
                   f"{w.t(reached)} at the end, {w.d(short)} short of {w.t(step.to_c)}")
            return
        if short > band:
            _worse(result, REMARKS, f"ended {w.d(short)} short of its target "
                   f"({w.t(reached)} of {w.t(step.to_c)})")
        rate = step.rate_c_per_s
        achieved = figures.get("achieved_rate_c_per_h")
        if rate is None or achieved is None or said_rate:
            return
        achieved_s = achieved / 3600.0
        if achieved_s < RATE_SHORT_SHARE * rate:
            _worse(result, REMARKS, f"heated at {format_rate(achieved_s, self.units)} of the "
                   f"planned {format_rate(rate, self.units)} "
                   f"({(1.0 - achieved_s / rate) * 100.0:.0f} % slower)")

    def _cooling_at_end(self, result: StepResult, step: Ramp | Cool,
                        temps: np.ndarray) -> bool:
        """Another tool's log that stops during the last step, a cool, with the oven falling:
        the cool happened; only its end is not in the log."""
        if not isinstance(step, Cool) or self.outcome is not None or self.trace.step is not None:
            return False
        if result.index != len(self.profile.steps) - 1:
            return False
        good = temps[np.isfinite(temps)]
        times = self.t[np.searchsorted(self.t, self.t[-1] - 2.0 * self.trace.sample_s):]
        just_begun = good.size < 2 or times.size >= good.size
        return just_begun or float(good[-1]) < float(good[0])

    def _reached_between_samples(self, step: Ramp | Cool, times: np.ndarray,
                                 temps: np.ndarray) -> bool:
        """A log with no outcome (another tool's, or a thinned export) that ends within the
        band of the target, or would pass it within one more sample interval at the rate it
        was going: the target was reached, as far as such a log can show. The engine ends a
        step at the first reading past the target, noise included, so the last sample kept
        of a thinned log lies anywhere in the reading noise above it; the band is the tool's
        own measure of "at temperature"."""
        if self.outcome is not None or self.trace.step is not None:
            return False
        good = np.isfinite(temps)
        if good.sum() < 2:
            return False
        t_good, temp_good = times[good], temps[good]
        span = float(t_good[-1] - t_good[-2])
        rate = (float(temp_good[-1]) - float(temp_good[-2])) / span if span > 0 else 0.0
        ahead = float(temp_good[-1]) + rate * self.trace.sample_s
        if abs(float(temp_good[-1]) - step.to_c) <= self.limits.band:
            return True
        if step.to_c > float(temp_good[0]):
            return ahead >= step.to_c
        return ahead <= step.to_c

    def _overshoot(self, figures: dict[str, Any], temps: np.ndarray, times: np.ndarray,
                   target_c: float) -> None:
        good = np.isfinite(temps)
        if not good.any():
            return
        over = np.where(good, temps - target_c, -np.inf)
        i = int(np.argmax(over))
        figures["max_overshoot_c"] = max(0.0, float(over[i]))
        figures["max_overshoot_at_s"] = self.rel(float(times[i])) if over[i] > 0 else None
        figures["highest_c"] = float(temps[i])

    # ----- holds -----

    def _hold(self, result: StepResult, step: Hold, lo: int, hi: int, start_t: float,
              end_t: float | None, finished: bool, end_event: Mapping[str, Any] | None) -> None:
        w = self.words
        figures = result.figures
        target = self.target[result.index]
        band = step.band_c if step.band_c is not None else self.limits.band
        figures["target_c"] = target
        figures["band_c"] = band
        figures["planned_s"] = step.duration_s
        if target is None:
            result.verdict = MISSED
            result.reasons.append("no temperature to hold: nothing was logged before it")
            return
        temps = self.trace.chamber_c[lo:hi]
        times = self.t[lo:hi]
        states = self.state[lo:hi]
        dt = self.dt[lo:hi].copy()
        if dt.size:
            dt[0] = 0.0
        self._overshoot(figures, temps, times, target)
        reached_mask = np.isin(states, _REACHED_CODES)
        reached_i = int(np.argmax(reached_mask)) if reached_mask.any() else None
        reached_t = float(times[reached_i]) if reached_i is not None else None
        figures["reached_at_s"] = self.rel(reached_t)
        figures["to_reach_s"] = None if reached_t is None else reached_t - start_t
        equalized_t = self.equalized.get(result.index)
        if equalized_t is None and step.start == "equalized" and reached_i is not None:
            after = np.flatnonzero(states[reached_i:] == _HOLDING)
            if after.size and (states[reached_i:] == _EVENING).any():
                equalized_t = float(times[reached_i + after[0]])
        figures["equalized_at_s"] = self.rel(equalized_t)
        figures["evening_s"] = float(dt[states == _EVENING].sum())
        detail = (end_event or {}).get("detail") or {}
        clock_s = detail.get("hold_clock_s")
        slipped_s = detail.get("out_of_band_s")
        figures["hold_clock_s"] = float(clock_s if clock_s is not None
                                        else dt[states == _HOLDING].sum())
        figures["clock_out_of_band_s"] = float(slipped_s if slipped_s is not None
                                               else dt[states == _SLIPPED].sum())
        if reached_i is None:
            result.verdict = MISSED
            highest = figures.get("highest_c")
            result.reasons.append(f"never reached the band ({w.t(target)} ± {w.d(band)}); the "
                                  f"highest was {w.t(highest)}")
            return
        # From the moment it was reached: where was it, with the stepper's band rule.
        at = slice(reached_i, None)
        temps_at, times_at, dt_at = temps[at], times[at], dt[at]
        good = np.isfinite(temps_at)
        dt_in = np.r_[dt_at[1:], 0.0]  # a sample's state lasts until the next sample
        inside = with_dwell(np.asarray(in_band(temps_at, target, band)) & good, dt_in)
        outside = ~inside
        figures["in_band_s"] = float(dt_in[inside].sum())
        figures["out_of_band_s"] = float(dt_in[outside].sum())
        figures["at_temperature_s"] = figures["in_band_s"]
        if good.any():
            low = int(np.argmin(np.where(good, temps_at, np.inf)))
            figures["lowest_c"] = float(temps_at[low])
            figures["lowest_at_s"] = self.rel(float(times_at[low]))
        stretches = _stretches(outside, times_at, temps_at, target, end_t)
        figures["out_of_band_stretches"] = [
            {"from_s": self.rel(a), "to_s": self.rel(b), "seconds": b - a,
             "furthest_c": far} for a, b, far in stretches]
        self._hold_verdict(result, step, target, band, stretches, finished, end_t)

    def _hold_verdict(self, result: StepResult, step: Hold, target: float, band: float,
                      stretches: list[tuple[float, float, float]], finished: bool,
                      end_t: float | None) -> None:
        w = self.words
        figures = result.figures
        grace = self.limits.hold_grace
        for a, b, far in stretches:
            if b - a > grace:
                side = "down to" if far < target else "up to"
                _worse(result, MISSED, f"out of the band for {format_duration(b - a)} from "
                       f"{clock(self.rel(a))} to {clock(self.rel(b))} ({side} {w.t(far)}, "
                       f"{w.d(abs(far - target))} {'below' if far < target else 'above'} "
                       f"{w.t(target)}; the band is ± {w.d(band)}, the grace "
                       f"{format_duration(grace)})")
        clock_s = figures["hold_clock_s"]
        if (not finished and not self.going) or (finished and clock_s < step.duration_s - 1.0):
            why = "skipped by you" if figures.get("skipped") else self._ending()
            if not finished or figures.get("skipped"):
                _worse(result, MISSED, f"{why} after {format_duration(clock_s)} of the "
                       f"{format_duration(step.duration_s)} hold at temperature")
        out_s = figures["out_of_band_s"]
        if result.verdict == MET and out_s >= OUT_OF_BAND_REMARK_S:
            count = len(stretches)
            longest = max((b - a for a, b, _ in stretches), default=0.0)
            _worse(result, REMARKS, f"out of the band for {format_duration(out_s)} in all "
                   f"({count} time{'s' if count != 1 else ''}, the longest "
                   f"{format_duration(longest)}), within the grace of {format_duration(grace)}")
        over = figures.get("max_overshoot_c") or 0.0
        if over > band and over <= self.limits.overshoot:
            _worse(result, REMARKS, f"overshot to {w.t(figures.get('highest_c'))}, "
                   f"{w.d(over)} above the target at {clock(figures.get('max_overshoot_at_s'))}")

    def _ending(self) -> str:
        outcome = self.outcome
        if outcome in (None, st.UNFINISHED, st.RUN_RUNNING, st.COMPLETED):
            return "the log ends"
        return f"the run ended ({outcome})"

    # ----- pauses -----

    def _pause(self, result: StepResult, step: Pause, start_t: float, end_t: float | None,
               finished: bool) -> None:
        result.figures["waited_s"] = None if end_t is None else end_t - start_t
        if not finished and not self.going:
            _worse(result, MISSED, f"never acknowledged: {self._ending()} while waiting for you")

    # ----- alarms -----

    def _alarm_reasons(self, result: StepResult) -> None:
        w = self.words
        for alarm in result.alarms:
            when = clock(self.rel(alarm.raised_t))
            if alarm.code == "too-hot":
                over = result.figures.get("max_overshoot_c") or 0.0
                _worse(result, MISSED, f"too hot at {when}: up to "
                       f"{w.t(result.figures.get('highest_c'))}, {w.d(over)} above the target "
                       f"(the limit is {w.d(self.limits.overshoot)})")
            elif alarm.code == "hold-slipped":
                if not any("out of the band for" in r for r in result.reasons):
                    _worse(result, MISSED, f"alarm at {when}: {alarm.words}")
            elif alarm.severity == CRITICAL:
                _worse(result, MISSED, f"alarm at {when}: {alarm.words}")
            else:
                _worse(result, REMARKS, f"warning at {when}: {alarm.words}")


def _worse(result: StepResult, verdict: str, reason: str) -> None:
    if VERDICTS.index(verdict) > VERDICTS.index(result.verdict):
        result.verdict = verdict
    result.reasons.append(reason)


def _stretches(outside: np.ndarray, times: np.ndarray, temps: np.ndarray, target: float,
               end_t: float | None) -> list[tuple[float, float, float]]:
    """(from, to, furthest temperature) of each run of samples out of the band."""
    if not outside.any():
        return []
    edges = np.diff(np.r_[0, outside.astype(np.int8), 0])
    begins = np.flatnonzero(edges == 1)
    stops = np.flatnonzero(edges == -1)  # first sample back in band (or past the end)
    out: list[tuple[float, float, float]] = []
    distance = np.abs(np.nan_to_num(temps - target, nan=0.0))
    last = float(end_t) if end_t is not None else float(times[-1])
    for b, s in zip(begins, stops, strict=True):
        a_t = float(times[b])
        s_t = float(times[s]) if s < times.size else last
        far_i = b + int(np.argmax(distance[b:s]))
        far = float(temps[far_i]) if math.isfinite(temps[far_i]) else target
        out.append((a_t, s_t, far))
    return out


def _targets(profile: Profile, trace: Trace) -> list[float | None]:
    """Each step's target as the stepper keeps it: a hold keeps the one before it."""
    targets: list[float | None] = []
    current: float | None = None
    for step in profile.steps:
        if isinstance(step, Ramp | Cool):
            current = step.to_c
        elif isinstance(step, Hold) and current is None:
            good = np.isfinite(trace.chamber_c)
            current = float(trace.chamber_c[good][0]) if good.any() else None
        targets.append(current)
    return targets


def _run_verdict(steps: list[StepResult], outcome: str | None, rerun: Rerun | None,
                 units: Units) -> tuple[str, list[str]]:
    verdict = MET
    reasons: list[str] = []
    if outcome == st.RUN_RUNNING:
        # Judged so far: a miss already made is one; else the run is under way.
        here = next((s for s in steps if s.verdict == UNDER_WAY), None)
        where = f"step {here.index + 1} of {len(steps)}" if here else "its last step"
        verdict = UNDER_WAY
        reasons.append(f"the run is still going ({where}); judged so far")
        for s in steps:
            if s.verdict in (MISSED, REMARKS):
                verdict = MISSED if s.verdict == MISSED else verdict
                first = s.reasons[0] if s.reasons else ""
                reasons.append(f"{s.title(units)}: {s.verdict}: {first}")
        return verdict, reasons
    if outcome not in (None, st.COMPLETED):
        verdict = MISSED
        why = f" ({rerun.end_reason})" if rerun is not None and rerun.end_reason else ""
        reasons.append(f"the run did not complete: {outcome}{why}")
    for s in steps:
        if s.verdict != MET:
            if VERDICTS.index(s.verdict) > VERDICTS.index(verdict):
                verdict = s.verdict
            first = s.reasons[0] if s.reasons else ""
            reasons.append(f"{s.title(units)}: {s.verdict}: {first}")
    return verdict, reasons


# ----- tempering parameter and quench timing -----


def _span(result: Replay, first: int, last: int) -> tuple[int, int] | None:
    """Sample range covering steps first..last (by their logged start and end)."""
    start = result.steps[first].start_s
    if start is None:
        return None
    end = next((result.steps[k].end_s for k in range(last, first - 1, -1)
                if result.steps[k].end_s is not None), None)
    t = result.trace.t - result.trace.start_t
    lo = int(np.searchsorted(t, start, "left"))
    hi = int(np.searchsorted(t, end, "right")) if end is not None else t.size
    return lo, hi


def _watched(trace: Trace, lo: int, hi: int) -> tuple[np.ndarray, str]:
    load = trace.load_c[lo:hi]
    if load.size and np.isfinite(load).all():
        return load, "load thermocouple"
    return trace.chamber_c[lo:hi], "chamber thermocouple"


def temper_figures(result: Replay, c: float = temper_rules.DEFAULT_C) -> dict[str, Any]:
    """Hollomon-Jaffe P of each temper hold from the trace: the ramps up to it, the hold and
    the cools after it (a cool before it follows a quench: the part was out of the oven)."""
    steps = result.profile.steps
    targets = _targets(result.profile, result.trace)
    holds: list[dict[str, Any]] = []
    spans: list[tuple[int, int]] = []
    planned: list[tuple[float, float]] = []
    # A hold before the last hardening hold is a preheat, not a temper.
    hardening = [i for i, step in enumerate(steps) if isinstance(step, Hold)
                 and targets[i] is not None and (targets[i] or 0.0) >= HARDEN_MIN_C]
    after = hardening[-1] if hardening else -1
    tempers = [i for i, step in enumerate(steps) if isinstance(step, Hold) and i > after
               and targets[i] is not None and TEMPER_MIN_C <= (targets[i] or 0.0) < TEMPER_MAX_C]
    foreign = result.trace.step is None
    for i, step in enumerate(steps):
        target = targets[i]
        if not isinstance(step, Hold) or target is None or i <= after:
            continue
        if not TEMPER_MIN_C <= target < TEMPER_MAX_C:
            continue
        first = i
        while first > 0 and isinstance(steps[first - 1], Ramp):
            first -= 1
        last = i
        while last + 1 < len(steps) and isinstance(steps[last + 1], Cool):
            last += 1
        entry: dict[str, Any] = {"index": i, "target_c": target,
                                 "planned_hours": step.duration_s / 3600.0,
                                 "planned_parameter": temper_rules.parameter(
                                     target, step.duration_s / 3600.0, c)}
        planned.append((target, step.duration_s / 3600.0))
        span = _span(result, first, last)
        if foreign and len(tempers) == 1:
            # Another tool's log: where the rules put the step edges is a guess, the trace is
            # not. The whole trace above the threshold counts (after the quench, when there
            # was a hardening: the quench's own cooling is not tempering).
            n = result.trace.t.size
            span = (0 if after < 0 else (span[0] if span is not None else n), n)
        entry["parameter"] = None
        if span is not None and span[1] - span[0] >= 2:
            lo, hi = span
            temps, source = _watched(result.trace, lo, hi)
            good = np.isfinite(temps)
            times = result.trace.t[lo:hi][good]
            try:
                entry["parameter"] = temper_rules.trace_parameter(times, temps[good], c)
            except ValueError as exc:
                entry["problem"] = str(exc)
            entry["source"] = source
            entry["from_s"] = float(times[0] - result.trace.start_t) if times.size else None
            entry["to_s"] = float(times[-1] - result.trace.start_t) if times.size else None
            spans.append(span)
        holds.append(entry)
    out: dict[str, Any] = {"c": c, "holds": holds,
                           "c_note": "C depends on the steel (about 10 to 20 with t in hours); "
                                     f"{temper_rules.DEFAULT_C:g} is the usual default"}
    if len(holds) >= 2:
        out["planned_total"] = temper_rules.combined_parameter(planned, c)
        if len(spans) == len(holds):
            lo, hi = spans[0][0], spans[-1][1]
            temps, _ = _watched(result.trace, lo, hi)
            good = np.isfinite(temps)
            try:
                out["total"] = temper_rules.trace_parameter(result.trace.t[lo:hi][good],
                                                            temps[good], c)
            except ValueError as exc:
                out["problem"] = str(exc)
    return out


def quench_figures(result: Replay, below_c: float = DEFAULT_QUENCH_BELOW_C
                   ) -> list[dict[str, Any]]:
    """t8/5 and the time from the end of each hardening hold to below `below_c`, measured on
    the load thermocouple up to the next heating step."""
    steps = result.profile.steps
    targets = _targets(result.profile, result.trace)
    out: list[dict[str, Any]] = []
    trace = result.trace
    for i, step in enumerate(steps):
        target = targets[i]
        if not isinstance(step, Hold) or target is None or target < HARDEN_MIN_C:
            continue
        if i + 1 < len(steps) and isinstance(steps[i + 1], Ramp):
            continue  # a preheat or a step up, not the hold before a quench
        entry: dict[str, Any] = {"index": i, "below_c": below_c, "t8_5_s": None,
                                 "to_below_s": None}
        out.append(entry)
        end_s = result.steps[i].end_s
        if end_s is None:
            entry["reason"] = "the hold did not end"
            continue
        nxt = next((k for k in range(i + 1, len(steps)) if isinstance(steps[k], Ramp | Hold)),
                   None)
        stop_s = result.steps[nxt].start_s if nxt is not None else None
        t = trace.t - trace.start_t
        lo = int(np.searchsorted(t, end_s, "left"))
        hi = int(np.searchsorted(t, stop_s, "right")) if stop_s is not None else t.size
        lo = max(0, lo - 1)
        load = trace.load_c[lo:hi]
        if not np.isfinite(load).any():
            entry["reason"] = "no load thermocouple was logged: quench timing needs one"
            continue
        times = t[lo:hi]
        t85 = quench_rules.t8_5(times, load)
        entry["t8_5_s"] = t85.seconds
        entry["t8_5_reason"] = t85.reason
        below = quench_rules.time_to_below(times, load, max(end_s, float(times[0])), below_c)
        entry["to_below_s"] = below.seconds
        entry["to_below_reason"] = below.reason
    return out
