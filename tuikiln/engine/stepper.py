"""Following a profile step by step: which setpoint now, and in which state (pure rules).

`Stepper.tick(now, chamber_c, load_c)` is called once per reading; it moves the setpoint,
runs the hold clock and moves to the next step. No clock is read and nothing is written
here, so a replay of a logged run can drive the same code.

The rules, as chosen for tuikiln (DEVELOPERS.md repeats them):

- A rated ramp starts its setpoint from where the temperature is at the step's start (or from
  the setpoint the previous step left, if that is higher and still below the target, so the
  setpoint never jumps back down), moves it at the rate, and ends when the setpoint reaches
  the target. When the next step is a hold, the hold waits for the band; otherwise (a pause,
  another ramp, the end) the ramp waits in REACHING until the temperature is in the band, so
  a quench pause never fires while the oven is still cold.
- A `max` ramp sets the target at once and ends when the temperature enters the band.
- A hold keeps the previous target. Its clock starts when the temperature is in the band
  (`reached`) or when the load has evened out (`equalized`); while out of band its clock
  stops and the time out of band is counted. A stretch in or out of the band shorter than
  BAND_DWELL_S does not change the state, and its seconds go to the side the hold was on: a
  chamber dithering on the band's edge neither flips the clock on and off nor raises alarms.
- A rated cool lowers the setpoint at the rate and ends when the setpoint is at the target
  and the temperature is within the band above it.
- A `free` cool sets the setpoint to FREE_COOL_SETPOINT_C (the controller's output drops to
  nothing; a setpoint at the target would let the temperature creep towards it for ever) and
  ends when the temperature is at or below the target. Before a hold it sets the target
  instead (the controller then catches the temperature at the hold's level rather than
  letting it sink through the band) and ends once within the band above the target.
- A pause keeps the last setpoint, alerts the person and repeats the alert every
  `pause_remind` until acknowledged.
- While the run is paused by the person, the setpoint is held and no step clock moves.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from tuikiln import events as ev
from tuikiln.engine import states as st
from tuikiln.events import Event, Said, Severity, literal, say
from tuikiln.limits import Limits
from tuikiln.profile import Cool, Hold, Pause, Profile, Ramp, Step, describe_step_said
from tuikiln.units import ROOM_C, Units, format_duration

FREE_COOL_SETPOINT_C = 0.0
# Reading noise (0.3 °C is typical) and a controller cycling on the band's edge cross it every
# few seconds; a real slip lasts minutes (hold_grace is 2 min). 20 s keeps the state to at
# most a few changes a minute and still shows a slip long before its alarm (our choice).
BAND_DWELL_S = 20.0




DetectorFactory = Callable[[float, float], Any]
"""(target_c, band_c) -> an object with `update(now, temp_c) -> EqualizeStatus`."""


@dataclass
class StepTick:
    """What the stepper wants this tick."""

    setpoint_c: float | None
    """The setpoint the device should hold (None: nothing to say yet)."""
    heat_off: bool = False
    """The step wants no heat at all (a free cool)."""
    events: list[Event] = field(default_factory=list)



def within_band(temp_c, target_c: float, band_c: float):  # noqa: ANN001, ANN201
    """The band rule, one for the engine, recovery and replay: `temp_c` (a number or a numpy
    array) is at temperature when it is no more than `band_c` from `target_c`."""
    return abs(temp_c - target_c) <= band_c


def planned_temperature_before(steps: tuple[Step, ...], index: int) -> float | None:
    """The target the steps before `index` lead to (the last ramp's or cool's), if any."""
    for step in reversed(steps[:index]):
        if isinstance(step, Ramp | Cool):
            return step.to_c
    return None

def step_start_event(now: float, steps: tuple[Step, ...], index: int, units: Units) -> Event:
    """The event a step's start is logged as (the stepper's and its array form's)."""
    step = steps[index]
    said = describe_step_said(step)
    label = f" ({step.label})" if step.label else ""
    message = said.after(f"Step {index + 1} of {len(steps)}{label}: ")
    return Event(now, ev.STEP_START, message.text(units), Severity.INFO,
                 {"index": index, "kind": step.kind, "description": said.text(units),
                  "label": step.label, **message.as_detail()})


def step_end_event(now: float, steps: tuple[Step, ...], index: int, started_at: float | None,
                   skipped: bool, hold_clock_s: float, out_of_band_s: float) -> Event:
    """The event a step's end is logged as; a hold's carries its clock and time out of band."""
    step = steps[index]
    detail: dict[str, Any] = {"index": index, "kind": step.kind, "skipped": skipped,
                              "seconds": 0.0 if started_at is None else now - started_at}
    extra = ""
    if isinstance(step, Hold):
        detail["out_of_band_s"] = out_of_band_s
        detail["hold_clock_s"] = hold_clock_s
        if out_of_band_s >= 1.0:
            extra = f" ({format_duration(out_of_band_s)} out of the band)"
    how = "skipped" if skipped else "done"
    return Event(now, ev.STEP_END, f"Step {index + 1} {how}{extra}", Severity.INFO, detail)


class Stepper:
    def __init__(
        self,
        profile: Profile,
        limits: Limits,
        units: Units | None = None,
        *,
        start_index: int = 0,
        detector_factory: DetectorFactory | None = None,
    ) -> None:
        self.profile = profile
        self.steps: tuple[Step, ...] = profile.steps
        self.limits = limits
        self.units: Units = units or profile.units
        self.detector_factory = detector_factory
        self.index = start_index
        self.state: st.StepState = st.STARTING
        self.setpoint_c: float | None = None
        self.target_c: float | None = None
        self.heat_off = False
        self.ended = False
        self.paused = False
        self.paused_since: float | None = None
        self.last_now: float | None = None
        self.last_temp_c: float | None = None
        # Per-step bookkeeping.
        self.step_started_at: float | None = None
        self.active_s = 0.0          # time in this step, not counting run pauses
        self.ramp_from_c = 0.0
        self.hold_clock_s = 0.0
        self.out_of_band_s = 0.0
        self.band_pending_s = 0.0    # a stretch on the other side of the band, not yet long
        self.state_since: float | None = None
        self.reached_at: float | None = None
        self.detector: Any = None
        self.equalize: Any = None    # the detector's last status
        self.next_reminder_at: float | None = None
        self.acknowledged = False
        self._pending: list[Event] = []
        if start_index > 0:
            # Started part-way (`tuikiln run --at-step N`): a hold or a pause there keeps the
            # temperature the steps before it lead to, not whatever the oven is at now.
            self.target_c = planned_temperature_before(self.steps, start_index)

    # ----- the profile -----

    @property
    def index(self) -> int:
        return self._index

    @index.setter
    def index(self, value: int) -> None:
        # The current step and what the tick asks of it follow from the index alone, and
        # are looked up several times a tick: keep them at hand.
        self._index = value
        steps = self.steps
        step = steps[value] if 0 <= value < len(steps) else None
        self.step: Step | None = step
        self._next_hold = value + 1 < len(steps) and isinstance(steps[value + 1], Hold)
        # A cool that leads to a hold, perhaps through pauses (put the parts in, then temper):
        # the oven is caught at the hold's temperature and kept there while the person acts.
        after = value + 1
        while after < len(steps) and isinstance(steps[after], Pause):
            after += 1
        self._cool_to_hold = after < len(steps) and isinstance(steps[after], Hold)
        self._step_band = self.band_c(step)

    def band_c(self, step: Step | None = None) -> float:
        step = step if step is not None else self.step
        if isinstance(step, Hold) and step.band_c is not None:
            return step.band_c
        return self.limits.band

    # ----- commands from the person -----

    def pause(self, now: float) -> None:
        if not self.paused and not self.ended:
            self.paused = True
            self.paused_since = now

    def resume(self, now: float) -> None:
        if self.paused:
            self.paused = False
            self.paused_since = None

    def skip(self, now: float) -> list[Event]:
        """End the current step now and start the next one."""
        if self.ended:
            return []
        temp = self.last_temp_c
        self._finish_step(now, skipped=True)
        self._advance(now, temp)
        return self._take_events()

    def acknowledge(self, now: float) -> list[Event]:
        """The person answered a pause step; it ends on the next tick."""
        if isinstance(self.step, Pause) and self.state == st.WAITING_YOU and not self.acknowledged:
            self.acknowledged = True
            self._emit(now, ev.OPERATOR_ACKNOWLEDGED,
                       "The pause is answered: going on with the next step", index=self.index)
            return self._take_events()
        return []

    @property
    def waiting_for_operator(self) -> bool:
        return self.state == st.WAITING_YOU and not self.acknowledged

    # ----- the tick -----

    def tick(self, now: float, chamber_c: float | None, load_c: float | None = None) -> StepTick:
        """One reading: `chamber_c` None when there is no usable reading this tick."""
        dt = 0.0 if self.last_now is None else max(0.0, now - self.last_now)
        self.last_now = now
        if chamber_c is not None:
            self.last_temp_c = chamber_c
        if self.state == st.STARTING and not self.ended:
            if chamber_c is None:
                return StepTick(self.setpoint_c, self.heat_off, self._take_events())
            self._enter(now, chamber_c)
        elif not self.ended and not self.paused:
            self.active_s += dt
            self._progress(now, dt, chamber_c, load_c)
        # Steps that end at once (a ramp already above its target) cascade in one tick.
        if not self.ended and self._step_done(chamber_c):
            for _ in range(len(self.steps) + 1):
                self._finish_step(now)
                self._advance(now, chamber_c)
                if self.ended or not self._step_done(chamber_c):
                    break
        return StepTick(self.setpoint_c, self.heat_off, self._take_events())

    # ----- inside -----

    def _emit(self, now: float, event_kind: str, message: str, severity: str = Severity.INFO,
              **detail: Any) -> None:
        self._pending.append(Event(now, event_kind, message, severity, detail))

    def _take_events(self) -> list[Event]:
        out, self._pending = self._pending, []
        return out

    def _set_state(self, now: float, state: st.StepState, *, force: bool = False) -> None:
        if force or state != self.state:
            self.state = state
            self.state_since = now
            said = self.words_said()
            words = said.text(self.units)
            self._emit(now, ev.STEP_STATE, words, state=state, index=self.index, words=words,
                       **said.as_detail())

    def _enter(self, now: float, temp_c: float | None) -> None:
        step = self.step
        if step is None:
            self._end(now)
            return
        self.step_started_at = now
        self.active_s = 0.0
        self.hold_clock_s = 0.0
        self.out_of_band_s = 0.0
        self.band_pending_s = 0.0
        self.reached_at = None
        self.detector = None
        self.equalize = None
        self.acknowledged = False
        self.next_reminder_at = None
        self.heat_off = False
        temp = temp_c if temp_c is not None else (self.setpoint_c or ROOM_C)
        previous = self.setpoint_c
        new_state = st.HOLDING
        if isinstance(step, Ramp):
            self.target_c = step.to_c
            if step.rate_c_per_s is None:
                self.setpoint_c = step.to_c
                new_state = st.HEATING_FULL
            else:
                start = temp
                if previous is not None and temp < previous < step.to_c:
                    start = previous
                self.ramp_from_c = min(start, step.to_c)
                self.setpoint_c = self.ramp_from_c
                new_state = st.HEATING
        elif isinstance(step, Hold):
            if self.target_c is None:
                self.target_c = temp
            self.setpoint_c = self.target_c
            new_state = st.REACHING
        elif isinstance(step, Cool):
            self.target_c = step.to_c
            if step.rate_c_per_s is None:
                # Before a hold (a temper after the quench) the controller is given the
                # target, so it catches the temperature there instead of letting it sink
                # through the band; otherwise the setpoint goes right down.
                self.setpoint_c = step.to_c if self._cool_to_hold else FREE_COOL_SETPOINT_C
                self.heat_off = True
                new_state = st.COASTING
            else:
                start = temp
                if previous is not None and step.to_c < previous < temp:
                    start = previous
                self.ramp_from_c = max(start, step.to_c)
                self.setpoint_c = self.ramp_from_c
                new_state = st.COOLING
        else:
            if self.setpoint_c is None:
                self.setpoint_c = self.target_c if self.target_c is not None else temp
            new_state = st.WAITING_YOU
        self._pending.append(step_start_event(now, self.steps, self.index, self.units))
        self._set_state(now, new_state, force=True)  # a new step always tells its state
        if isinstance(step, Hold) and temp_c is not None:
            self._hold(now, 0.0, temp_c, None)
        if isinstance(step, Pause):
            self._remind(now, first=True)

    def _remind(self, now: float, first: bool = False) -> None:
        step = self.step
        assert isinstance(step, Pause)
        again = "" if first else "Reminder: "
        self._emit(now, ev.OPERATOR_NEEDED, f"{again}{step.message}", Severity.WARNING,
                   index=self.index, text=step.message, reminder=not first)
        self.next_reminder_at = now + self.limits.pause_remind

    def _progress(self, now: float, dt: float, temp: float | None, load_c: float | None) -> None:
        step = self.step
        if isinstance(step, Ramp):
            if step.rate_c_per_s is not None and self.state == st.HEATING:
                sp = self.ramp_from_c + step.rate_c_per_s * self.active_s
                if sp >= step.to_c:
                    sp = step.to_c
                    if not self._next_hold:
                        self._set_state(now, st.REACHING)
                self.setpoint_c = sp
        elif isinstance(step, Hold):
            if temp is not None:
                self._hold(now, dt, temp, load_c)
        elif isinstance(step, Cool):
            if step.rate_c_per_s is not None and self.state == st.COOLING:
                sp = self.ramp_from_c - step.rate_c_per_s * self.active_s
                if sp <= step.to_c:
                    sp = step.to_c
                    self._set_state(now, st.SETTLING)
                self.setpoint_c = sp
        elif isinstance(step, Pause):
            if (not self.acknowledged and self.next_reminder_at is not None
                    and now >= self.next_reminder_at):
                self._remind(now)

    def _hold(self, now: float, dt: float, temp: float, load_c: float | None) -> None:
        step = self.step
        assert isinstance(step, Hold) and self.target_c is not None
        band = self._step_band
        in_band = within_band(temp, self.target_c, band)
        if self.state == st.REACHING:
            if not in_band:
                return
            self.reached_at = now
            if step.start == "equalized" and self.detector_factory is not None:
                self.detector = self.detector_factory(self.target_c, band)
                self._set_state(now, st.EVENING)
            else:
                self._set_state(now, st.HOLDING)
                return
        if self.state == st.EVENING:
            source = load_c if load_c is not None else temp
            self.equalize = self.detector.update(now, source)
            if getattr(self.equalize, "equalized", False):
                said = say("The load has evened out at {core}: the hold clock starts",
                           core=(ev.TEMPERATURE, source))
                self._emit(now, ev.EQUALIZED, said.text(self.units), index=self.index,
                           core_c=source, **said.as_detail())
                self._set_state(now, st.HOLDING)
            return
        if self.state in (st.HOLDING, st.SLIPPED):
            self._band_dwell(now, dt, in_band)

    def _band_dwell(self, now: float, dt: float, in_band: bool) -> None:
        """Count `dt` to the hold clock or to the time out of band, with BAND_DWELL_S of
        dwell: the seconds of a stretch on the other side wait in `band_pending_s` until the
        stretch is long enough to change the state (then they go with it) or ends (then
        they go to the side the hold stayed on). The clock never counts a doubtful second."""
        holding = self.state == st.HOLDING
        if in_band == holding:
            if self.band_pending_s:
                self._credit(holding, self.band_pending_s)
                self.band_pending_s = 0.0
            self._credit(holding, dt)
            return
        self.band_pending_s += dt
        if self.band_pending_s >= BAND_DWELL_S:
            began = now - self.band_pending_s
            self._credit(in_band, self.band_pending_s)
            self.band_pending_s = 0.0
            self._set_state(now, st.HOLDING if in_band else st.SLIPPED)
            self.state_since = began  # the slip (or the return) began a dwell ago

    def _credit(self, in_band: bool, seconds: float) -> None:
        if in_band:
            self.hold_clock_s += seconds
        else:
            self.out_of_band_s += seconds

    def _step_done(self, temp: float | None) -> bool:
        step = self.step
        if step is None or self.state == st.STARTING:
            return False
        if self.paused and not isinstance(step, Pause):
            return False
        if isinstance(step, Ramp):
            in_band = temp is not None and temp >= step.to_c - self.limits.band
            if step.rate_c_per_s is None:
                return in_band
            at_target = self.setpoint_c is not None and self.setpoint_c >= step.to_c
            if not at_target:
                return False
            return self._next_hold or in_band
        if isinstance(step, Hold):
            return self.hold_clock_s >= step.duration_s
        if isinstance(step, Cool):
            if temp is None:
                return False
            if step.rate_c_per_s is None:
                if self._cool_to_hold:
                    return temp <= step.to_c + self.limits.band  # the hold waits for the band
                return temp <= step.to_c
            at_target = self.setpoint_c is not None and self.setpoint_c <= step.to_c
            return at_target and temp <= step.to_c + self.limits.band
        return self.acknowledged

    def _finish_step(self, now: float, skipped: bool = False) -> None:
        if self.step is None:
            return
        self._pending.append(step_end_event(now, self.steps, self.index, self.step_started_at,
                                            skipped, self.hold_clock_s, self.out_of_band_s))

    def _advance(self, now: float, temp: float | None) -> None:
        self.index += 1
        if self.index >= len(self.steps):
            self._end(now)
        else:
            self._enter(now, temp)

    def _end(self, now: float) -> None:
        self.ended = True
        self.index = len(self.steps)
        self.state = st.DONE
        self.state_since = now

    # ----- for people -----

    def step_time_left_s(self) -> float | None:
        """Time until this step ends, where it can be told; None when it cannot."""
        step = self.step
        if step is None:
            return 0.0
        if isinstance(step, Ramp) and step.rate_c_per_s and self.setpoint_c is not None:
            if self.state == st.HEATING:
                return max(0.0, (step.to_c - self.setpoint_c) / step.rate_c_per_s)
            return None
        if isinstance(step, Hold):
            left = max(0.0, step.duration_s - self.hold_clock_s)
            if self.state == st.EVENING:
                eta = getattr(self.equalize, "eta_s", None)
                return None if eta is None else left + eta
            if self.state in (st.HOLDING, st.SLIPPED):
                return left
            return None
        if isinstance(step, Cool) and step.rate_c_per_s and self.setpoint_c is not None:
            if self.state == st.COOLING:
                return max(0.0, (self.setpoint_c - step.to_c) / step.rate_c_per_s)
        return None

    def words(self) -> str:
        """The state in plain words, e.g. 'holding at 1750 °F, 12 min of 30 left'."""
        return self.words_said().text(self.units)

    def words_said(self) -> Said:
        """The state's words with their temperatures kept as numbers (tuikiln.events)."""
        step = self.step
        numbers = {"target": (ev.TEMPERATURE, self.target_c),
                   "now": (ev.TEMPERATURE, self.last_temp_c)}
        if self.ended:
            return Said("all steps done")
        if step is None or self.state == st.STARTING:
            return Said("starting")
        state = self.state
        text = str(state)
        if state == st.HEATING and isinstance(step, Ramp):
            to_go = literal(format_duration(self.step_time_left_s()))
            numbers["rate"] = (ev.RATE, step.rate_c_per_s)
            text = f"heating to {{target}} at {{rate}} (now {{now}}, {to_go} to go)"
        elif state == st.HEATING_FULL:
            text = "heating as fast as the oven goes to {target} (now {now})"
        elif state == st.REACHING:
            text = "waiting to reach {target} (now {now})"
        elif state == st.EVENING:
            eta = getattr(self.equalize, "eta_s", None)
            about = f": about {_minutes(eta)}" if eta is not None else ""
            text = f"waiting for the load to even out at {{target}}{literal(about)}"
        elif state in (st.HOLDING, st.SLIPPED) and isinstance(step, Hold):
            left = max(0.0, step.duration_s - self.hold_clock_s)
            clock = f"{_minutes(left)} of {_minutes(step.duration_s)} left"
            text = (f"out of the band at {{target}} (now {{now}}): hold clock stopped, {clock}"
                    if state == st.SLIPPED else f"holding at {{target}}, {clock}")
        elif state == st.COOLING and isinstance(step, Cool):
            numbers["rate"] = (ev.RATE, step.rate_c_per_s)
            text = "cooling to {target} at {rate} (now {now})"
        elif state == st.SETTLING:
            text = "waiting to cool to {target} (now {now})"
        elif state == st.COASTING:
            text = "heater off, cooling to {target} (now {now})"
        elif state == st.WAITING_YOU and isinstance(step, Pause):
            text = ("acknowledged: carrying on" if self.acknowledged
                    else "waiting for you: " + literal(step.message))
        else:
            text = literal(text)
        return Said(text, {k: v for k, v in numbers.items() if "{" + k + "}" in text})


def _minutes(seconds: float | None) -> str:
    if seconds is None:
        return "--"
    if seconds < 90:
        return f"{max(0, round(seconds))} s"
    if seconds < 5400:
        return f"{round(seconds / 60)} min"
    return format_duration(seconds)
