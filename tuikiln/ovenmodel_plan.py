"""A profile's times and warnings on a learned oven (tuikiln.ovenmodel).

    prediction = predict(plan, model, band_c=8.0)
    prediction.total_s            # None where a step never ends (a target out of reach)
    prediction.steps[i].end_s
    prediction.warnings           # (step index, text)

How each step is timed follows the engine's rules (tuikiln.engine.stepper), with the chamber
taken to follow the setpoint wherever the oven can, and to go as fast as it can where not
(the model, chamber and lining, stepped in time every STEP_S seconds; a hold moves only the
lining, exactly):

- a ramp ends when its setpoint is at the target and the chamber is in the band below it
  (a "max" ramp: when the chamber is in the band); the oven heats at the lesser of the rate
  and what full output gives at each temperature and lining temperature;
- a rated cool ends when the setpoint is at the target and the chamber is within the band
  above it; the oven cools at the lesser of the rate and its free cooling;
- a free cool ends when the chamber is at the target (within the band above it before a
  hold, where the controller catches it);
- a hold lasts its time; an `equalized` hold first waits, with the chamber at the target,
  until the engine's own load watch (tuikiln.equalize.LoadWatch: the slow-side core estimate
  of tuikiln.coremodel for the profile's `[load]`, and the same detector) calls the load
  even. The watch is fed the predicted chamber trace from the start, so the core carries
  its lag from the ramps before. With no `[load]` thickness it estimates a 25 mm part, as
  the engine does, and the prediction says so. A load thermocouple, which the plan cannot
  know of, usually ends the wait sooner: the prediction is then on the long side;
- a pause waits for the person: counted as nothing, the oven held where it was; afterwards
  the load is taken as cold again (a quench), as the engine does.

The practice warning (common practice, no source): parts hardened and quenched should be
tempered promptly, once they are hand-warm; a temper that waits for the oven to come down
from the hardening temperature leaves them untempered that long.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from tuikiln.coremodel import DEFAULT_THICKNESS_M
from tuikiln.limits import Limits
from tuikiln.ovenmodel import OvenModel
from tuikiln.plan import Plan, plan_profile
from tuikiln.profile import Cool, Hold, Pause, Profile, Ramp, Step
from tuikiln.units import (
    ROOM_C,
    Units,
    delta_from_c,
    format_duration,
    format_rate,
    format_temp,
    symbol,
)

HARDEN_FROM_C = 727.0
"""A hold at or above this before a pause is taken as austenitizing: 727 °C is the
eutectoid (A1) temperature of the iron-carbon diagram (ASM Handbook vol. 4, Heat Treating)."""
TEMPER_UP_TO_C = 700.0
"""A hold at or below this after the quench pause is taken as the temper."""
TEMPER_WAIT_S = 1800.0
"""Longer than this between the quench and the temper's start earns the warning (common
practice, no source: temper as soon as the parts are hand-warm, not hours later)."""
STEP_S = 10.0
"""The prediction's time step: a tenth of the fastest chamber time constant seen (minutes)."""
NEVER_S = 72 * 3600.0
"""A step predicted to take longer than this is taken never to end."""
SETTLED_S = 3600.0
"""A load estimate this long at the target (within 0.01 °C) and not yet called even is
taken never to be (or twice the slope window and confirmation, if longer)."""


@dataclass(frozen=True)
class PredictedStep:
    index: int
    start_s: float | None
    end_s: float | None
    end_c: float
    """The chamber's predicted temperature at the step's end."""
    lining_c: float
    """The model's lining temperature at the step's start."""
    equalize_s: float = 0.0
    """Of the step's time, the wait for the load to even out before an `equalized` hold's
    clock starts (inf: never)."""


@dataclass(frozen=True)
class PlanWarning:
    step: int
    text: str


@dataclass(frozen=True)
class Prediction:
    steps: tuple[PredictedStep, ...]
    warnings: tuple[PlanWarning, ...]

    @property
    def total_s(self) -> float | None:
        return self.steps[-1].end_s if self.steps else 0.0


@dataclass
class _Run:
    """The chamber and the lining, moved on step by step."""

    model: OvenModel
    temp: float
    lining: float
    behind_at: float | None = None
    watch: Any = None
    """The engine's LoadWatch, fed the predicted chamber (None: no load estimate wanted)."""
    clock: float = 0.0
    equalized: Any = None
    """The watch's last status while an equalized hold is watched."""

    def move(self, h: float, setpoint: float) -> None:
        """h seconds with the controller after `setpoint` as far as the oven allows."""
        m = self.model
        full = self.temp + h * m.rate_c_per_s(self.temp, self.lining, 1.0)
        off = self.temp + h * m.rate_c_per_s(self.temp, self.lining, 0.0)
        self.lining += h * (self.temp - self.lining) / m.lining_tau_s
        self.temp = min(max(setpoint, off), full)
        self._feed(h)

    def soak(self, seconds: float) -> None:
        """Held where it is for `seconds`: only the lining moves (exactly, T is constant)."""
        self.lining = self.temp + (self.lining - self.temp) * math.exp(
            -seconds / self.model.lining_tau_s)
        self._feed(seconds)

    def _feed(self, seconds: float) -> None:
        self.clock += seconds
        if self.watch is not None and math.isfinite(self.clock):
            self.equalized = self.watch.update(self.clock, self.temp)


def _equalize_wait(run: _Run, target: float, band: float) -> float:
    """Seconds from the chamber reaching `target` until the engine's watch calls the load
    even (the chamber held at the target meanwhile; inf: not within NEVER_S)."""
    if run.watch is None:
        return 0.0
    run.watch.begin_hold(target, band)
    run.equalized = None
    t = 0.0
    settled_for, give_up = 0.0, max(SETTLED_S, 2.0 * (run.watch.window_s + run.watch.confirm_s))
    while not getattr(run.equalized, "equalized", False):
        # A core already at the target that is still not called even never will be (a
        # band narrower than the detector's margin): no need to step on to NEVER_S.
        core = run.watch.model.core_c
        settled_for = settled_for + STEP_S if abs(core - target) < 0.01 else 0.0
        if t > NEVER_S or settled_for > give_up:
            run.watch.end_hold()
            return math.inf
        run.move(STEP_S, target)
        t += STEP_S
    run.watch.end_hold()
    return t


def _ramp(run: _Run, target: float, rate: float | None, band: float) -> float:
    sp = min(run.temp, target) if rate is not None else target
    t = 0.0
    while not (sp >= target and run.temp >= target - band):
        if t > NEVER_S:
            return math.inf
        sp = target if rate is None else min(target, sp + rate * STEP_S)
        run.move(STEP_S, sp)
        t += STEP_S
        if rate is not None and run.behind_at is None and sp - run.temp > band:
            run.behind_at = run.temp
    run.temp = max(run.temp, target)  # the hold's controller takes it the last degrees
    return t


def _cool(run: _Run, target: float, rate: float | None, band: float, next_hold: bool
          ) -> float:
    t = 0.0
    if rate is None:
        end = target + band if next_hold else target
        while run.temp > end:
            if t > NEVER_S:
                return math.inf
            run.move(STEP_S, -math.inf)
            t += STEP_S
        if next_hold:
            run.temp = target
        return t
    sp = max(run.temp, target)
    while not (sp <= target and run.temp <= target + band):
        if t > NEVER_S:
            return math.inf
        sp = max(target, sp - rate * STEP_S)
        run.move(STEP_S, sp)
        t += STEP_S
        if run.behind_at is None and run.temp - sp > band:
            run.behind_at = run.temp
    return t


def _load_watch(profile: Profile, limits: Limits | None, units: Units) -> Any:
    """The LoadWatch the engine would make for this profile (None: no equalized hold)."""
    if not any(isinstance(s, Hold) and s.start == "equalized" for s in profile.steps):
        return None
    from tuikiln.engine.rules import make_load_watch

    merged = limits if limits is not None else Limits().merged(profile.limits)
    return make_load_watch(profile, merged, units)


def predict_on_kiln(plan: Plan, model: OvenModel, alarms: Mapping[str, float] | None,
                    units: Units = "C") -> Prediction:
    """`predict` with the limits a run of this plan on this kiln has: the built-in ones,
    the kiln file's `alarms` over them (None: the kiln sets none), the profile's over those."""
    limits = Limits().merged(alarms or {}).merged(plan.profile.limits)
    return predict(plan, model, limits.band, units, limits=limits)


def predict(plan: Plan, model: OvenModel, band_c: float, units: Units = "C",
            lining_c: float | None = None, limits: Limits | None = None) -> Prediction:
    """Every step's predicted start and end on this oven, and what it cannot do. The oven
    starts soaked at the plan's start temperature unless `lining_c` says otherwise;
    `limits` (the run's, for the equalize detector) default to the profile's over the
    built-in ones."""
    out: list[PredictedStep] = []
    warnings: list[PlanWarning] = []
    steps = plan.profile.steps
    t: float | None = 0.0
    run = _Run(model, plan.start_c, plan.start_c if lining_c is None else lining_c,
               watch=_load_watch(plan.profile, limits, units))
    unsized = plan.profile.load.thickness_m is None
    top = model.top_c
    for i, step in enumerate(steps):
        following = steps[i + 1] if i + 1 < len(steps) else None
        band = following.band_c if isinstance(following, Hold) and following.band_c else band_c
        start_lining = run.lining
        run.behind_at = None
        if isinstance(step, Ramp):
            duration = _ramp(run, step.to_c, step.rate_c_per_s, band)
        elif isinstance(step, Cool):
            duration = _cool(run, step.to_c, step.rate_c_per_s, band,
                             isinstance(following, Hold))
        elif isinstance(step, Hold):
            wait = 0.0
            if step.start == "equalized":
                hold_band = step.band_c or band_c
                wait = _equalize_wait(run, run.temp, hold_band)
                if not math.isfinite(wait):
                    warnings.append(PlanWarning(i, _never_even(run.temp, hold_band, units)))
                if unsized and run.watch is not None:
                    warnings.append(PlanWarning(i, _UNSIZED))
                    unsized = False  # said once, at the first such hold
            duration = wait + step.duration_s
            if math.isfinite(duration):
                run.soak(step.duration_s)
        else:
            duration = 0.0
            if isinstance(step, Pause) and run.watch is not None:
                run.watch.reset_load(min(run.temp, ROOM_C))  # as the engine: a quench
        warnings.extend(_step_warnings(run, i, step, duration, top, units))
        start = t
        t = None if t is None or not math.isfinite(duration) else t + duration
        out.append(PredictedStep(i, start, t, run.temp, start_lining,
                                 wait if isinstance(step, Hold) else 0.0))
        if not math.isfinite(duration):
            # The rest cannot be told; go on from the target so later warnings still come.
            run.temp = run.lining = step.to_c if isinstance(step, Ramp | Cool) else run.temp
    warnings.extend(temper_warnings(plan, model, out, units))
    return Prediction(tuple(out), tuple(sorted(warnings, key=lambda w: w.step)))


_UNSIZED = (f"no [load] thickness: the wait for the load to even out is estimated as the "
            f"engine does, for a {DEFAULT_THICKNESS_M * 1000:.0f} mm part (the slow side); "
            "give [load] thickness for a closer time")


def _never_even(target_c: float, band_c: float, u: Units) -> str:
    width = f"{delta_from_c(band_c, u):g} {symbol(u)}"
    return (f"by the estimate the load never settles within ±{width} of "
            f"{format_temp(target_c, u)}, so the hold's clock would never start: widen the "
            "band")


def _step_warnings(run: _Run, i: int, step: Step, duration: float,
                   top_c: float, u: Units) -> list[PlanWarning]:
    model = run.model
    found: list[PlanWarning] = []
    if isinstance(step, Ramp):
        target = step.to_c
        if target > top_c or not math.isfinite(duration):
            never = "" if math.isfinite(duration) else ", so the step would never end"
            found.append(PlanWarning(i, f"{format_temp(target, u)} is beyond what the oven "
                                     f"can reach: about {format_temp(top_c, u)} at full "
                                     f"output{never}"))
        elif step.rate_c_per_s is not None and run.behind_at is not None:
            manages = max(0.0, model.rate_c_per_s(target, run.lining, 1.0))
            found.append(PlanWarning(
                i, f"the oven cannot heat at {format_rate(step.rate_c_per_s, u)} above about "
                   f"{format_temp(run.behind_at, u)}: it manages about "
                   f"{format_rate(manages, u)} at {format_temp(target, u)}"))
        if model.valid_to_c + 50.0 < target <= top_c:
            found.append(PlanWarning(i, f"the oven was learned only up to "
                                     f"{format_temp(model.valid_to_c, u)}: times above it "
                                     "are extrapolated"))
    elif isinstance(step, Cool) and step.rate_c_per_s is not None and run.behind_at is not None:
        free = float(model.loss_c_per_s(step.to_c, run.lining))
        found.append(PlanWarning(
            i, f"the oven cannot cool at {format_rate(step.rate_c_per_s, u)} below about "
               f"{format_temp(run.behind_at, u)} even with the heat off: it cools only about "
               f"{format_rate(max(free, 0.0), u)} at {format_temp(step.to_c, u)}"))
    return found


def temper_warnings(plan: Plan, model: OvenModel | None,
                    predicted: list[PredictedStep] | None, u: Units) -> list[PlanWarning]:
    """A temper hold after a quench pause that must wait for the oven to cool down from the
    hardening temperature (with a model: for longer than TEMPER_WAIT_S)."""
    found: list[PlanWarning] = []
    steps = plan.steps
    for p, planned in enumerate(steps):
        if not isinstance(planned.step, Pause) or planned.from_c < HARDEN_FROM_C:
            continue
        if not any(isinstance(s.step, Hold) for s in steps[:p]):
            continue
        # A pause between ("the oven is at the temper temperature: put the parts in") does
        # not end the wait: the parts wait out of the oven instead of in it.
        for h in range(p + 1, len(steps)):
            if not isinstance(steps[h].step, Hold):
                continue
            temper_c = steps[h].from_c
            if temper_c > TEMPER_UP_TO_C:
                break
            words = (f"the temper at {format_temp(temper_c, u)} waits for the oven to cool "
                     f"from {format_temp(planned.from_c, u)} after the quench")
            advice = ("; parts waiting untempered that long risk cracking: temper promptly "
                      "once they are hand-warm (common practice), for instance in a second "
                      "oven already at the temper temperature")
            if model is None or predicted is None:
                found.append(PlanWarning(h, words + " (how long is unknown without an oven "
                                         "model: `tuikiln learn`)" + advice))
            else:
                start, end = predicted[p].end_s, predicted[h].start_s
                if start is None or end is None:
                    break
                if end - start > TEMPER_WAIT_S:
                    found.append(PlanWarning(h, words + f": about {format_duration(end - start)}"
                                             + advice))
            break
    return found


class LiveForecast:
    """The model's times for a run going on (the live ETA, `status`): the steps after the
    current one from one prediction made at the start, the current ramp or cool from where
    the chamber is now (the lining taken where the prediction had it at the step's start).
    """

    def __init__(self, profile: Profile, model: OvenModel, band_c: float,
                 limits: Limits | None = None) -> None:
        self.model = model
        self.band_c = band_c
        self.profile = profile
        self.prediction = predict(plan_profile(profile), model, band_c, profile.units,
                                  limits=limits)
        self._cache: tuple[int, int, float] | None = None

    def duration_s(self, index: int) -> float | None:
        """The predicted length of step `index` (None: it never ends)."""
        p = self.prediction.steps[index]
        if p.start_s is None or p.end_s is None:
            return None
        return p.end_s - p.start_s

    def step_left_s(self, index: int, temp_c: float) -> float | None:
        """Seconds until the ramp or cool `index` is done, from the chamber at temp_c."""
        steps = self.profile.steps
        step = steps[index]
        if not isinstance(step, Ramp | Cool):
            return None
        key = (index, int(round(temp_c)))
        if self._cache is not None and self._cache[:2] == key:
            return self._cache[2]
        following = steps[index + 1] if index + 1 < len(steps) else None
        band = following.band_c if isinstance(following, Hold) and following.band_c \
            else self.band_c
        run = _Run(self.model, temp_c, self.prediction.steps[index].lining_c)
        if isinstance(step, Ramp):
            left = _ramp(run, step.to_c, step.rate_c_per_s, band)
        else:
            left = _cool(run, step.to_c, step.rate_c_per_s, band, isinstance(following, Hold))
        self._cache = (*key, left)
        return left if math.isfinite(left) else None
