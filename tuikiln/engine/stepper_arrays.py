"""The stepper over whole arrays of logged samples: what `Stepper.tick` decides sample by
sample, found with numpy one step at a time (what-if over a 7-day log in well under a second).

    arrays = follow(profile, limits, units, t, usable_c, watched_equalize=True)
    arrays.step, arrays.state, arrays.setpoint   # per sample, after that sample's tick

Same rules as tuikiln/engine/stepper.py, the same thresholds (`within_band`, BAND_DWELL_S,
FREE_COOL_SETPOINT_C, the limits) and the same events (`step_start_event`, `step_end_event`).
Clocks are summed in the same order (a cumulative sum adds one term after another, as the
stepper's `+=` does), so the result is equal, not close; tests/test_whatif_arrays.py runs
both over simulated runs with faults and compares them.

What it does not follow raises NotInArrays, and the caller uses the per-sample rules: holds
that start when the load has evened out (the equalization detector is fed one reading at a
time) and the person's commands (pause, skip, abort). A pause step is answered at the logged
acknowledgements, as whatif.rerun_rules answers it. The events are the step starts and
ends; the step-state words and the pause reminders are the per-sample rules' alone.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from tuikiln.engine import states as st
from tuikiln.engine.stepper import (
    BAND_DWELL_S,
    FREE_COOL_SETPOINT_C,
    step_end_event,
    step_start_event,
    within_band,
)
from tuikiln.events import Event
from tuikiln.limits import Limits
from tuikiln.profile import Cool, Hold, Pause, Profile, Ramp
from tuikiln.units import ROOM_C, Units

_CODE = st.STATE_CODE


class NotInArrays(Exception):
    """The run needs something only the per-sample rules can follow."""


@dataclass
class StepArrays:
    """Per sample, what the stepper holds after that sample's tick (NaN: None)."""

    step: np.ndarray
    state: np.ndarray
    setpoint: np.ndarray
    target: np.ndarray
    state_since: np.ndarray
    started: np.ndarray
    heat_off: np.ndarray
    events: list[tuple[int, Event]] = field(default_factory=list)
    """(sample index, event), in the order the stepper says them."""
    done_at: int | None = None
    """The sample at which every step was done."""


def _first(mask: np.ndarray, offset: int) -> int | None:
    """The index (plus `offset`) of the first True in `mask`, None when there is none."""
    if mask.size == 0:
        return None
    k = int(np.argmax(mask))
    return k + offset if mask[k] else None


def _active_sums(dt: np.ndarray, i: int) -> np.ndarray:
    """The step's active time after each tick that follows its start at sample `i`."""
    return np.cumsum(dt[i + 1:])


class _Follower:
    def __init__(self, profile: Profile, limits: Limits, units: Units, t: np.ndarray,
                 usable: np.ndarray, acks: Sequence[float]) -> None:
        self.steps = profile.steps
        self.acks = acks
        self.next_ack = 0
        self.limits = limits
        self.units = units
        self.t = t
        self.u = usable
        self.finite = np.isfinite(usable)
        n = t.size
        self.n = n
        dt = np.empty(n)
        if n:
            dt[0] = 0.0
            dt[1:] = np.maximum(0.0, np.diff(t))
        self.dt = dt
        nan = np.full(n, np.nan)
        self.out = StepArrays(np.zeros(n, dtype=np.int64), np.full(n, _CODE[st.STARTING]),
                              nan.copy(), nan.copy(), nan.copy(), nan.copy(),
                              np.zeros(n, dtype=bool))
        self.setpoint: float | None = None
        self.target: float | None = None

    def _temp_at_entry(self, i: int) -> float:
        # As Stepper._enter: the reading, else the setpoint (a falsy 0 too), else room.
        if self.finite[i]:
            return float(self.u[i])
        return self.setpoint or ROOM_C

    def _fill(self, a: int, b: int, index: int, state: str, since: float, started: float,
              heat_off: bool) -> None:
        o = self.out
        o.step[a:b] = index
        o.state[a:b] = _CODE[state]
        o.state_since[a:b] = since
        o.started[a:b] = started
        o.heat_off[a:b] = heat_off
        o.target[a:b] = np.nan if self.target is None else self.target

    def run(self) -> StepArrays:
        o = self.out
        first = _first(self.finite, 0)
        if first is None:
            return o
        index, i = 0, first
        while True:
            o.events.append((i, step_start_event(float(self.t[i]), self.steps, index,
                                                 self.units)))
            done, clock, oob = self._step(index, i)
            if done is None:
                return o
            o.events.append((done, step_end_event(float(self.t[done]), self.steps, index,
                                                  float(self.t[i]), False, clock, oob)))
            index += 1
            i = done
            if index >= len(self.steps):
                o.done_at = done
                o.step[done] = len(self.steps)
                o.state[done] = _CODE[st.DONE]
                o.state_since[done] = self.t[done]
                o.setpoint[done] = np.nan if self.setpoint is None else self.setpoint
                return o

    def _step(self, index: int, i: int) -> tuple[int | None, float, float]:
        """Follow step `index` from its start at sample `i`: the sample it ends at (None: not
        in the log), its hold clock and time out of band."""
        step = self.steps[index]
        if isinstance(step, Ramp):
            return self._ramp(index, i, step), 0.0, 0.0
        if isinstance(step, Hold):
            return self._hold(index, i, step)
        if isinstance(step, Cool):
            return self._cool(index, i, step), 0.0, 0.0
        assert isinstance(step, Pause)
        return self._pause(index, i), 0.0, 0.0

    def _pause(self, index: int, i: int) -> int | None:
        """A pause step, answered as whatif.rerun_rules answers it: at the first logged
        acknowledgement from the tick after it began, or on that tick when there is none."""
        t, n, acks = self.t, self.n, self.acks
        if self.setpoint is None:
            self.setpoint = self.target if self.target is not None else self._temp_at_entry(i)
        started = float(t[i])
        done: int | None = None
        if i + 1 < n:
            while self.next_ack < len(acks) and acks[self.next_ack] < t[i + 1]:
                self.next_ack += 1
            if self.next_ack >= len(acks):
                done = i + 1
            else:
                done = _first(t[i + 1:] >= acks[self.next_ack], i + 1)
            if done is not None:
                self.next_ack += 1
        end = n if done is None else done
        self._fill(i, end, index, st.WAITING_YOU, started, started, False)
        self.out.setpoint[i:end] = self.setpoint
        return done

    def _next_is_hold(self, index: int) -> bool:
        return index + 1 < len(self.steps) and isinstance(self.steps[index + 1], Hold)

    def _cool_to_hold(self, index: int) -> bool:
        after = index + 1
        while after < len(self.steps) and isinstance(self.steps[after], Pause):
            after += 1
        return after < len(self.steps) and isinstance(self.steps[after], Hold)

    def _ramp(self, index: int, i: int, step: Ramp) -> int | None:
        t, u, n = self.t, self.u, self.n
        to, band = step.to_c, self.limits.band
        self.target = to
        started = float(t[i])
        sp_out = self.out.setpoint
        if step.rate_c_per_s is None:
            self.setpoint = to
            done = _first(u[i:] >= to - band, i)
            end = n if done is None else done
            self._fill(i, end, index, st.HEATING_FULL, started, started, False)
            sp_out[i:end] = to
            return done
        temp = self._temp_at_entry(i)
        previous = self.setpoint
        start = previous if previous is not None and temp < previous < to else temp
        ramp_from = min(start, to)
        next_hold = self._next_is_hold(index)
        if ramp_from >= to and (next_hold or u[i] >= to - band):
            self.setpoint = ramp_from
            return i
        raw = ramp_from + step.rate_c_per_s * _active_sums(self.dt, i)
        reach = raw >= to
        done_mask = reach if next_hold else reach & (u[i + 1:] >= to - band)
        done = _first(done_mask, i + 1)
        end = n if done is None else done
        self._fill(i, end, index, st.HEATING, started, started, False)
        sp_out[i] = ramp_from
        sp_out[i + 1:end] = np.where(reach[: end - i - 1], to, raw[: end - i - 1])
        reached = None if next_hold else _first(reach, i + 1)
        if reached is not None and reached < end:
            self.out.state[reached:end] = _CODE[st.REACHING]
            self.out.state_since[reached:end] = t[reached]
        self.setpoint = float(sp_out[end - 1]) if done is None else to
        return done

    def _cool(self, index: int, i: int, step: Cool) -> int | None:
        t, u, n = self.t, self.u, self.n
        to, band = step.to_c, self.limits.band
        started = float(t[i])
        sp_out = self.out.setpoint
        temp = self._temp_at_entry(i)
        previous = self.setpoint
        self.target = to
        if step.rate_c_per_s is None:
            to_hold = self._cool_to_hold(index)
            self.setpoint = to if to_hold else FREE_COOL_SETPOINT_C
            done = _first(u[i:] <= (to + band if to_hold else to), i)
            end = n if done is None else done
            self._fill(i, end, index, st.COASTING, started, started, True)
            sp_out[i:end] = self.setpoint
            return done
        start = previous if previous is not None and to < previous < temp else temp
        ramp_from = max(start, to)
        if ramp_from <= to and u[i] <= to + band:
            self.setpoint = ramp_from
            return i
        raw = ramp_from - step.rate_c_per_s * _active_sums(self.dt, i)
        settled = raw <= to
        done = _first(settled & (u[i + 1:] <= to + band), i + 1)
        end = n if done is None else done
        self._fill(i, end, index, st.COOLING, started, started, False)
        sp_out[i] = ramp_from
        sp_out[i + 1:end] = np.where(settled[: end - i - 1], to, raw[: end - i - 1])
        at = _first(settled, i + 1)
        if at is not None and at < end:
            self.out.state[at:end] = _CODE[st.SETTLING]
            self.out.state_since[at:end] = t[at]
        self.setpoint = float(sp_out[end - 1]) if done is None else to
        return done

    def _hold(self, index: int, i: int, step: Hold) -> tuple[int | None, float, float]:
        t, n = self.t, self.n
        band = step.band_c if step.band_c is not None else self.limits.band
        if self.target is None:
            self.target = self._temp_at_entry(i)
        target = self.target
        self.setpoint = target
        started = float(t[i])
        self.out.setpoint[i:] = target
        if step.duration_s <= 0.0:  # a clock at 0 is already done, as _step_done says
            return i, 0.0, 0.0
        in_band = self.finite & within_band(self.u, target, band)
        reached = _first(in_band[i:], i)
        if reached is None:
            self._fill(i, n, index, st.REACHING, started, started, False)
            return None, 0.0, 0.0
        self._fill(i, reached, index, st.REACHING, started, started, False)
        done, clock, oob, changes = _band_dwell(
            t, self.dt, self.finite, in_band, reached, step.duration_s)
        end = n if done is None else done
        marks = [(reached, st.HOLDING, float(t[reached])), *changes]
        for k, (at, state, since) in enumerate(marks):
            stop = marks[k + 1][0] if k + 1 < len(marks) else end
            self._fill(at, max(at, stop), index, state, since, started, False)
        if done is not None:
            self.out.setpoint[done:] = np.nan
        return done, clock, oob


def _band_dwell(t: np.ndarray, dt: np.ndarray, finite: np.ndarray, in_band: np.ndarray,
                reached: int, duration_s: float
                ) -> tuple[int | None, float, float, list[tuple[int, str, float]]]:
    """Stepper._band_dwell over every tick after the band was reached, one stretch of
    ticks on the same side of the band at a time: (sample the clock is full at, hold clock,
    time out of band, [(sample, new state, since)])."""
    ticks = np.flatnonzero(finite[reached + 1:]) + reached + 1
    side = in_band[ticks]
    gaps = dt[ticks]
    bounds = [0, *(np.flatnonzero(side[1:] != side[:-1]) + 1).tolist(), ticks.size]
    holding, pending, clock, oob = True, 0.0, 0.0, 0.0
    changes: list[tuple[int, str, float]] = []

    def credit(a: int, b: int, extra: float) -> int | None:
        """Ticks a..b-1 credit their seconds to the side the hold is on; the first also
        takes `extra` (a stretch that went back in time). The tick the clock is full at."""
        nonlocal clock, oob
        if a >= b:
            if holding:
                clock = clock + extra if extra else clock
            else:
                oob = oob + extra if extra else oob
            return None
        base = clock if holding else oob
        if extra:
            base = base + extra
        sums = np.cumsum(np.concatenate(([base], gaps[a:b])))[1:]
        if not holding:
            oob = float(sums[-1])
            return None
        full = _first(sums >= duration_s, 0)
        if full is None:
            clock = float(sums[-1])
            return None
        clock = float(sums[full])
        return int(ticks[a + full])

    for a, b in zip(bounds[:-1], bounds[1:], strict=True):
        if bool(side[a]) == holding:
            done = credit(a, b, pending)
            pending = 0.0
            if done is not None:
                return done, clock, oob, changes
            continue
        waits = np.cumsum(gaps[a:b])
        flip = _first(waits >= BAND_DWELL_S, 0)
        if flip is None:
            pending = float(waits[-1])
            continue
        waited = float(waits[flip])
        at = int(ticks[a + flip])
        holding = bool(side[a])
        if holding:
            clock += waited
        else:
            oob += waited
        pending = 0.0
        changes.append((at, st.HOLDING if holding else st.SLIPPED, float(t[at]) - waited))
        if holding and clock >= duration_s:
            return at, clock, oob, changes
        done = credit(a + flip + 1, b, 0.0)
        if done is not None:
            return done, clock, oob, changes
    return None, clock, oob, changes


def follow(profile: Profile, limits: Limits, units: Units, t: np.ndarray,
           usable_c: np.ndarray, *, watched_equalize: bool,
           acks: Sequence[float] = ()) -> StepArrays:
    """The stepper's decisions over the samples. `usable_c`: the reading the stepper is
    given (NaN where it gets None); `watched_equalize`: the rules feed an equalization
    detector (an `equalized` hold then waits for it, which only the per-sample rules do);
    `acks`: the times (sorted) a person answered a pause step in the log."""
    for step in profile.steps:
        if isinstance(step, Hold) and step.start == "equalized" and watched_equalize:
            raise NotInArrays("an equalized hold waits for the per-sample detector")
    return _Follower(profile, limits, units, t, usable_c, acks).run()
