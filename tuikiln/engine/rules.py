"""RunRules: the stepper, the alarm rules and the person's commands, as one pure object.

    rules = RunRules(profile, limits, max_c=kiln.max_c, units="F")
    decision = rules.tick(now, TickInput(chamber_c=812.3, output_pct=40.0))
    rules.command(now, "pause")

The async runner (runner.py) reads the device, calls `tick`, writes what it decides and logs
the events; a replay can feed logged readings to the same object.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from tuikiln import events as ev
from tuikiln.engine import states as st
from tuikiln.engine.alarms import AlarmRules, Observation
from tuikiln.engine.stepper import DetectorFactory, Stepper
from tuikiln.events import Event, Severity
from tuikiln.limits import Limits
from tuikiln.plaintext import plain
from tuikiln.profile import Profile, Ramp
from tuikiln.units import ROOM_C, Units

COMMANDS = ("pause", "resume", "skip", "abort", "ack", "note")
# Command sources that are remote (tuikiln/alerts/remote.py): they may silence alarms but never
# release a pause step or a hold after a restart, since going on from either can add heat.
REMOTE_SOURCES = ("mqtt",)
MAX_ARG_CHARS = 2000


@dataclass
class TickInput:
    """One reading as the rules need it."""

    chamber_c: float | None
    load_c: float | None = None
    """The load thermocouple, where there is one (else the rules' core estimate is used)."""
    output_pct: float | None = None
    link_ok: bool = True
    sensor_fault: bool = False


@dataclass
class Decision:
    setpoint_c: float | None
    """The setpoint the device should hold now (None: nothing to write)."""
    heat_off: bool = False
    """No heat wanted (a free cool): a setpoint at the cool's target does it."""
    events: list[Event] = field(default_factory=list)
    ended: bool = False
    outcome: str | None = None
    safe_reason: str | None = None
    """Set when the device must be driven safe now (critical alarm, abort)."""


@dataclass
class CommandResult:
    ok: bool
    message: str
    events: list[Event] = field(default_factory=list)


def make_load_watch(profile: Profile, limits: Limits, units: Units) -> Any:
    """tuikiln.equalize.LoadWatch for the profile's load (None where it is not installed)."""
    try:
        from tuikiln.equalize import LoadWatch
    except ImportError:
        return None
    try:
        return LoadWatch(profile.load.material, profile.load.thickness_m, wrap=profile.load.wrap,
                         width_m=profile.load.width_m,
                         window_s=limits.equalize_window,
                         slope_limit_c_per_s=limits.equalize_slope / 60.0,
                         confirm_s=limits.equalize_confirm, units=units)
    except Exception:  # noqa: BLE001 - no estimate is better than no run
        return None


class _WatchedHold:
    """What the stepper sees as its detector: the run's LoadWatch, which has been fed every
    reading since the start (so its slope window is already full when a hold begins)."""

    def __init__(self, rules: RunRules, target_c: float, band_c: float) -> None:
        self.rules = rules
        rules.load_watch.begin_hold(target_c, band_c)
        rules.watching_hold = True

    def update(self, now: float, temp_c: float) -> Any:
        return self.rules.last_equalize


class RunRules:
    def __init__(
        self,
        profile: Profile,
        limits: Limits,
        *,
        max_c: float | None = None,
        units: Units | None = None,
        start_index: int = 0,
        detector_factory: DetectorFactory | None = None,
        load_watch: Any = "default",
    ) -> None:
        self.profile = profile
        self.limits = limits
        self.units: Units = units or profile.units
        self.load_watch = (make_load_watch(profile, limits, self.units)
                           if load_watch == "default" else load_watch)
        self.last_equalize: Any = None
        self.watching_hold = False
        self.core_c: float | None = None
        if detector_factory is None and self.load_watch is not None:
            detector_factory = self._watched_hold
        self.stepper = Stepper(profile, limits, self.units, start_index=start_index,
                               detector_factory=detector_factory)
        self.alarms = AlarmRules(limits, max_c, self.units)
        self._obs = Observation(0.0)
        self.ended = False
        self.outcome: str | None = None
        self.end_reason = ""
        self._abort_reason: str | None = None

    def _watched_hold(self, target_c: float, band_c: float) -> _WatchedHold:
        return _WatchedHold(self, target_c, band_c)

    # ----- state for people -----

    @property
    def run_state(self) -> st.RunState:
        s = self.stepper
        if self.ended:
            return st.RUN_ENDED
        if s.state == st.STARTING:
            return st.RUN_STARTING
        if s.paused:
            return st.RUN_PAUSED
        if s.waiting_for_operator:
            return st.RUN_WAITING
        return st.RUN_RUNNING

    # ----- the tick -----

    def tick(self, now: float, reading: TickInput) -> Decision:
        if self.ended:
            return Decision(None, True, [], True, self.outcome)
        s = self.stepper
        usable = None if (not reading.link_ok or reading.sensor_fault) else reading.chamber_c
        watch = self.load_watch
        if watch is not None:
            self.last_equalize = watch.update(now, usable, reading.load_c)
            core = watch.model.core_c
            self.core_c = None if core != core else float(core)  # NaN: not started yet
        load_now = reading.load_c if reading.load_c is not None else self.core_c
        was_pause = s.acknowledged or s.state == st.WAITING_YOU  # waiting_for_operator or ack
        step_tick = s.tick(now, usable, load_now)
        if watch is not None:
            if self.watching_hold and s.state != st.EVENING:
                watch.end_hold()
                self.watching_hold = False
            if was_pause and s.step is not None and s.state != st.WAITING_YOU:
                # The load was most likely taken out (a quench): estimate it cold again.
                watch.reset_load(min(usable if usable is not None else ROOM_C, ROOM_C))
        events = step_tick.events
        step = s.step
        obs = self._obs  # one object, refilled each tick (this runs 10,000 times a second)
        obs.now = now
        obs.link_ok = reading.link_ok
        obs.chamber_c = reading.chamber_c
        obs.sensor_fault = reading.sensor_fault
        obs.output_pct = reading.output_pct
        obs.setpoint_c = s.setpoint_c
        obs.target_c = s.target_c
        obs.step_kind = None if step is None else step.kind
        obs.step_state = s.state
        obs.state_since = s.state_since
        obs.step_started_at = s.step_started_at
        obs.rated_ramp = isinstance(step, Ramp) and step.rate_c_per_s is not None
        obs.heat_off = s.heat_off
        obs.paused_since = s.paused_since
        alarms = self.alarms
        raised = alarms.evaluate(obs)
        if raised:
            events.extend(raised)
        critical = alarms.critical() if alarms.active else None
        if self._abort_reason is not None:
            return self._finish(now, events, st.ABORTED, self._abort_reason, safe=True)
        if critical is not None:
            return self._finish(now, events, st.STOPPED_BY_ALARM, critical.words, safe=True)
        if s.ended:
            return self._finish(now, events, st.COMPLETED, "every step is done", safe=False)
        return Decision(step_tick.setpoint_c, step_tick.heat_off, events)

    def _finish(self, now: float, events: list[Event], outcome: str, reason: str,
                safe: bool) -> Decision:
        self.ended = True
        self.outcome = outcome
        self.end_reason = reason
        return Decision(None, True, events, True, outcome, reason if safe else None)

    def stop(self, now: float, outcome: str, reason: str) -> Decision:
        """End the run from outside the rules (a signal, an engine failure)."""
        if self.ended:
            return Decision(None, True, [], True, self.outcome)
        return self._finish(now, [], outcome, reason, safe=True)

    # ----- commands -----

    def command(self, now: float, name: str, arg: str | None = None,
                source: str = "command") -> CommandResult:
        # Every way in (socket, MQTT, keys, argv) meets here: make the words storable and
        # printable once, so no note or reason can fail the log or drive a terminal.
        name, source = plain(name, limit=40), plain(source, limit=40)
        arg = None if arg is None else plain(arg, limit=MAX_ARG_CHARS)
        if self.ended:
            return self._refuse(now, name, source, "the run has ended")
        s = self.stepper
        if name == "pause":
            if s.paused:
                return self._refuse(now, name, source, "the run is already paused")
            s.pause(now)
            return self._accept(now, name, source, "Paused: the setpoint is held and the step "
                                "clocks are stopped until you resume")
        if name == "resume":
            if not s.paused:
                return self._refuse(now, name, source, "the run is not paused")
            s.resume(now)
            extra = self.alarms.set_condition("paused-too-long", False, now)
            result = self._accept(now, name, source, "Resumed")
            result.events.extend(extra)
            return result
        if name == "skip":
            result = self._accept(now, name, source, f"Skipped step {s.index + 1}")
            result.events.extend(s.skip(now))
            return result
        if name == "abort":
            self._abort_reason = "you aborted the run" + (f" ({arg})" if arg else "")
            return self._accept(now, name, source, "Aborting: the heat is being turned off")
        if name == "ack":
            return self._ack(now, arg, source)
        if name == "note":
            text = (arg or "").strip()
            if not text:
                return self._refuse(now, name, source, "a note needs some text")
            event = Event(now, ev.NOTE, f"Note: {text}", Severity.INFO,
                          {"text": text, "source": source})
            return CommandResult(True, "Note added", [event])
        return self._refuse(now, name, source, f'unknown command "{name}"')

    def _ack(self, now: float, code: str | None, source: str) -> CommandResult:
        events: list[Event] = []
        if code in (None, "", "pause", "you") and source not in REMOTE_SOURCES:
            events.extend(self.stepper.acknowledge(now))  # going on may add heat: local only
        if code not in ("pause", "you"):
            if code and code not in self.alarms.active:
                active = ", ".join(self.alarms.active) or "none"
                return self._refuse(now, "ack", source, f'no alarm "{code}" is active '
                                    f"(active: {active})")
            events.extend(self.alarms.acknowledge(now, code or None))
        if not events:
            return self._refuse(now, "ack", source, "nothing is waiting to be acknowledged")
        result = self._accept(now, "ack", source, "Acknowledged")
        result.events.extend(events)
        return result

    def _accept(self, now: float, name: str, source: str, message: str) -> CommandResult:
        return CommandResult(True, message, [Event(now, ev.COMMAND, message, Severity.INFO,
                                                   {"name": name, "source": source})])

    def _refuse(self, now: float, name: str, source: str, reason: str) -> CommandResult:
        return CommandResult(False, reason, [Event(now, ev.COMMAND_REFUSED,
                                                   f"Refused {name}: {reason}", Severity.INFO,
                                                   {"name": name, "source": source,
                                                    "reason": reason})])
