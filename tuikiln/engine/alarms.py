"""Alarm rules (pure): what counts as wrong, when it is raised, and when it clears.

Each alarm has a code of our own (stable: stored in logs, sent over MQTT), a severity and
plain words. `AlarmRules.evaluate(obs)` looks at one tick and returns the events for every
change: raised, cleared. `acknowledge` marks alarms seen. An alarm clears when its cause
goes, acknowledged or not; if the cause comes back it is raised anew.

Critical alarms (heat-stuck-on, sensor-bad, over-kiln-max, no-link-too-long) make the run
drive the device safe and end (see rules.py). Thresholds come from tuikiln.limits.Limits;
the few fixed numbers below are debounce counts and noise margins, chosen so a clean run
with realistic noise (0.3 °C) raises nothing (tests/test_engine_sim.py runs ten seeds).
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field
from typing import Any

from tuikiln import events as ev
from tuikiln.engine import states as st
from tuikiln.engine.checks import ALARM_KINDS, CRITICAL, WARNING, Check, judge_all, make_checks
from tuikiln.events import Event, Said, Severity, say
from tuikiln.limits import Limits
from tuikiln.units import Units

# code -> (severity, short name for people). The same dict as engine/checks' ALARM_KINDS:
# checks registered there (one module each) join these built-in ones.
ALARMS: dict[str, tuple[str, str]] = ALARM_KINDS
ALARMS.update({
    "too-hot": (WARNING, "too hot"),
    "hold-slipped": (WARNING, "hold out of band"),
    "never-reached": (WARNING, "target never reached"),
    "lagging": (WARNING, "falling behind the ramp"),
    "no-rise": (WARNING, "not heating"),
    "heat-stuck-on": (CRITICAL, "heat stuck on"),
    "sensor-bad": (CRITICAL, "thermocouple fault"),
    "no-link": (WARNING, "no answer from the controller"),
    "no-link-too-long": (CRITICAL, "controller silent too long"),
    "over-kiln-max": (CRITICAL, "over the kiln's maximum"),
    "paused-too-long": (WARNING, "paused too long"),
    "log-trouble": (WARNING, "cannot write the run log"),
})

BAD_READINGS_TO_ALARM = 3      # consecutive impossible / faulty readings before sensor-bad
GOOD_READINGS_TO_CLEAR = 5
HOT_READINGS_TO_ALARM = 3      # consecutive readings over a threshold (noise spikes ignored)
IMPOSSIBLE_LOW_C = -50.0       # no oven reads this: a thermocouple wired backwards or broken
IMPOSSIBLE_HIGH_C = 1900.0     # above type K/N range (NIST ITS-90 tables end at 1372/1300 °C)
JUMP_C = 50.0                  # between two readings a few seconds apart: not a real oven
JUMPS_TO_ALARM = 3
JUMP_WINDOW_S = 120.0
FROZEN_S = 1200.0              # the very same reading this long while heating hard
STUCK_OUTPUT_PCT = 1.0         # output at or below this counts as "off"
STUCK_OFF_FOR_S = 180.0        # output off this long (element and lining lag) ...
STUCK_RISE_WINDOW_S = 120.0    # ... and the temperature rose over the last this long ...
STUCK_RISE_C = 5.0             # ... by at least this much: heat with no output
FULL_OUTPUT_PCT = 90.0
NO_RISE_C = 2.0                # less rise than this over stall_for at full output: no heat
HISTORY_EVERY_S = 10.0
# After the setpoint drops (a ramp ends in a free or rated cool) the chamber keeps rising for
# a minute or two on the heat stored in the elements and lining. "Far above the setpoint" is
# judged against the highest setpoint of this long ago, so that coast is not a stuck relay.
SETPOINT_LAG_S = 600.0
SLOW_EVERY_S = 5.0


def raised_event(now: float, code: str, words: str, said: Said | None = None) -> Event:
    """The event an alarm is raised with (the rules' and their array form's). With `said`
    the detail carries the numbers: "template" for the message, "words_template" for the
    words alone."""
    severity = ALARMS[code][0]
    prefix = "ALARM" if severity == CRITICAL else "Warning"
    detail: dict[str, Any] = {"alarm": code, "severity": severity, "words": words}
    if said is not None:
        detail.update(said.after(f"{prefix}: ").as_detail())
        detail["words_template"] = said.template
    return Event(now, ev.ALARM_RAISED, f"{prefix}: {words}", severity, detail)


def cleared_event(now: float, code: str, acknowledged: bool) -> Event:
    severity, name = ALARMS[code]
    return Event(now, ev.ALARM_CLEARED, f"Cleared: {name}", Severity.INFO,
                 {"alarm": code, "severity": severity, "acknowledged": acknowledged})


@dataclass
class Alarm:
    code: str
    severity: str
    words: str
    since: float
    acknowledged: bool = False
    said: Said | None = None
    """The words with their numbers (the status carries them: screens show their units)."""

    def as_dict(self) -> dict[str, Any]:
        out = {"code": self.code, "severity": self.severity, "words": self.words,
               "acknowledged": self.acknowledged, "since": self.since}
        if self.said is not None:
            out.update(self.said.as_detail())
        return out


@dataclass
class Observation:
    """What the alarm rules see in one tick."""

    now: float
    link_ok: bool = True
    """The device answered this tick (a sensor-fault answer is still an answer)."""
    chamber_c: float | None = None
    sensor_fault: bool = False
    output_pct: float | None = None
    setpoint_c: float | None = None
    """The setpoint the run wants now (the plan's, in a watch-only run)."""
    target_c: float | None = None
    step_kind: str | None = None
    step_state: str = st.STARTING
    state_since: float | None = None
    step_started_at: float | None = None
    rated_ramp: bool = False
    """The step is a ramp with a rate (the lagging check applies)."""
    heat_off: bool = False
    paused_since: float | None = None


@dataclass
class AlarmRules:
    limits: Limits
    max_c: float | None = None
    units: Units = "C"
    active: dict[str, Alarm] = field(default_factory=dict)
    _bad_count: int = 0
    _good_count: int = 0
    _hot_count: int = 0
    _max_count: int = 0
    _last_ok: float | None = None
    _last_temp: tuple[float, float] | None = None
    _jumps: deque[float] = field(default_factory=deque)
    _frozen_since: float | None = None
    _frozen_value: float | None = None
    _lag_since: float | None = None
    _demand_since: float | None = None
    _off_since: float | None = None
    _history: deque[tuple[float, float]] = field(default_factory=deque)
    _recent_sp: deque[tuple[float, float]] = field(default_factory=deque)
    _slow_at: float = -1e300
    _pending: list[Event] = field(default_factory=list)
    checks: list[Check] = field(default_factory=list)
    """The registered checks (engine/checks), made for this run's limits and units."""
    unjudged: frozenset[str] = frozenset()
    """Codes never raised: a replay of a log without the signal they judge (a log with no
    heater output column cannot say whether the heater was asked for power)."""

    def __post_init__(self) -> None:
        if not self.checks:
            self.checks = make_checks(self.limits, self.units)

    # ----- public -----

    def evaluate(self, obs: Observation) -> list[Event]:
        now = obs.now
        if self._last_ok is None:
            self._last_ok = now
        temp = self._usable_temp(obs)
        if temp is not None:
            hist = self._history
            if not hist or now - hist[-1][0] >= HISTORY_EVERY_S:
                self._remember(now, temp)
        if obs.link_ok and not self.active:
            self._last_ok = now  # _check_link's quiet case, by far the most common
        else:
            self._check_link(obs)
        self._check_sensor(obs, temp)
        # The slow checks judge minutes of history: every SLOW_EVERY_S is plenty, and it
        # halves the cost of a tick in simulated runs going 10,000 times faster than life.
        slow = now - self._slow_at >= SLOW_EVERY_S or now < self._slow_at
        if slow:
            self._slow_at = now
        if temp is not None:
            if self.max_c is not None:
                self._check_max(obs, temp)
            self._check_too_hot(obs, temp)
            if slow:
                self._check_lagging(obs, temp)
                self._check_no_rise(obs, temp)
                self._check_stuck_on(obs, temp)
        if slow:
            self._check_hold(obs)
            self._check_paused(obs)
        judge_all(self, obs, temp, slow)
        out, self._pending = self._pending, []
        return out

    def set_condition(self, code: str, active: bool, now: float,
                      words: str | Said = "") -> list[Event]:
        """Raise or clear an alarm whose cause the rules cannot see (e.g. log-trouble)."""
        self._set(code, active, now, words)
        out, self._pending = self._pending, []
        return out

    def set_alarm(self, code: str, active: bool, now: float, words: str | Said = "") -> None:
        """Raise or clear `code` as part of this tick (the registered checks' way in)."""
        self._set(code, active, now, words)

    def acknowledge(self, now: float, code: str | None = None) -> list[Event]:
        """Mark one alarm (or every active one) as seen; returns the events."""
        out: list[Event] = []
        for alarm in list(self.active.values()):
            if (code is None or alarm.code == code) and not alarm.acknowledged:
                alarm.acknowledged = True
                out.append(Event(now, ev.ALARM_ACKNOWLEDGED, f"Acknowledged: {alarm.words}",
                                 Severity.INFO, {"alarm": alarm.code, "severity": alarm.severity}))
        return out

    def critical(self) -> Alarm | None:
        for alarm in self.active.values():
            if alarm.severity == CRITICAL:
                return alarm
        return None

    def as_list(self) -> list[dict[str, Any]]:
        return [a.as_dict() for a in self.active.values()]

    # ----- raising and clearing -----

    def _set(self, code: str, on: bool, now: float, words: str | Said = "") -> None:
        if not on and code not in self.active:
            return  # the common case, every tick: nothing to clear
        alarm = self.active.get(code)
        said = words if isinstance(words, Said) else None
        text = said.text(self.units) if said is not None else str(words)
        if on and alarm is None:
            if code in self.unjudged:
                return
            self.active[code] = Alarm(code, ALARMS[code][0], text, now, said=said)
            self._pending.append(raised_event(now, code, text, said))
        elif on and alarm is not None and text:
            alarm.words = text
            alarm.said = said
        elif not on and alarm is not None:
            del self.active[code]
            self._pending.append(cleared_event(now, code, alarm.acknowledged))

    # ----- the words (shared with the array forms in alarm_arrays.py) -----
    # Each returns Said: the words with their numbers kept apart (tuikiln.events), so the
    # screens and reports show them in their own units.

    def no_link_words(self, silent_s: float) -> Said:
        return say("No answer from the controller for {silent}: check the cable and its "
                   "power", silent=(ev.DURATION, silent_s))

    def no_link_too_long_words(self, silent_s: float) -> Said:
        return say("The controller has been silent for {silent}: the run stops and the heat "
                   "is turned off where the controller can still hear it",
                   silent=(ev.DURATION, silent_s))

    def bad_reading_words(self, why: str, chamber_c: float | None = None) -> Said:
        """`why`: "fault" (the controller says so), "none" (no temperature), "impossible"."""
        if why == "fault":
            return say("Thermocouple fault: the controller reports the thermocouple open or "
                       "out of range")
        if why == "none":
            return say("Thermocouple fault: the controller gives no temperature")
        return say("Thermocouple fault: the reading {reading} is impossible",
                   reading=(ev.TEMPERATURE, chamber_c))

    def jumps_words(self) -> Said:
        return say("Thermocouple fault: the reading jumps by more than {jump} from one second "
                   "to the next", jump=(ev.DIFFERENCE, JUMP_C))

    def frozen_words(self, temp_c: float) -> Said:
        return say("Thermocouple fault: the reading has stayed at exactly {temp} for {frozen} "
                   "while heating", temp=(ev.TEMPERATURE, temp_c), frozen=(ev.DURATION, FROZEN_S))

    def over_max_words(self, temp_c: float) -> Said:
        return say("{temp} is over the kiln's maximum of {max}", temp=(ev.TEMPERATURE, temp_c),
                   max=(ev.TEMPERATURE, self.max_c))

    def too_hot_words(self, temp_c: float, target_c: float | None) -> Said:
        return say("Too hot: {temp} is {over} above the target {target}",
                   temp=(ev.TEMPERATURE, temp_c),
                   over=(ev.DIFFERENCE, temp_c - (target_c or 0.0)),
                   target=(ev.TEMPERATURE, target_c))

    def lagging_words(self, temp_c: float, gap_c: float, planned_c: float | None) -> Said:
        return say("Falling behind the ramp: {temp} is {gap} below the planned {planned} — a "
                   "heater failing, the door open, or a ramp too fast for this oven",
                   temp=(ev.TEMPERATURE, temp_c), gap=(ev.DIFFERENCE, gap_c),
                   planned=(ev.TEMPERATURE, planned_c))

    def no_rise_words(self, temp_c: float) -> Said:
        return say("Not heating: the heater is asked for full power but the temperature has "
                   "not risen in {stall} ({temp}) — a heater or its fuse failing, or the door "
                   "open", stall=(ev.DURATION, self.limits.stall_for),
                   temp=(ev.TEMPERATURE, temp_c))

    def stuck_on_words(self, temp_c: float, rising_off: bool, setpoint_c: float | None) -> Said:
        how = ("while the heater output is off" if rising_off else "{above} above the setpoint")
        return say(f"Heat stuck on: {{temp}} and rising {how} — a relay or contactor stuck "
                   "closed", temp=(ev.TEMPERATURE, temp_c),
                   above=(ev.DIFFERENCE, temp_c - (setpoint_c or 0.0)))

    def slipped_words(self, target_c: float | None, out_s: float) -> Said:
        return say("The hold at {target} has been out of its band for {out}: its clock is "
                   "stopped", target=(ev.TEMPERATURE, target_c), out=(ev.DURATION, out_s))

    def never_reached_words(self, in_hold: bool, target_c: float | None) -> Said:
        what = "The hold at" if in_hold else "The target"
        return say(f"{what} {{target}} has not been reached in {{within}}: the oven may not "
                   "get that hot (elements, a heavy load, the door)",
                   target=(ev.TEMPERATURE, target_c),
                   within=(ev.DURATION, self.limits.reach_within))

    # ----- the checks -----

    def _usable_temp(self, obs: Observation) -> float | None:
        t = obs.chamber_c
        if not obs.link_ok or obs.sensor_fault or t is None:
            return None
        if not (IMPOSSIBLE_LOW_C <= t <= IMPOSSIBLE_HIGH_C):
            return None
        return t

    def _remember(self, now: float, temp: float) -> None:
        hist = self._history
        if not hist or now - hist[-1][0] >= HISTORY_EVERY_S:
            hist.append((now, temp))
            keep = max(self.limits.stall_for, STUCK_RISE_WINDOW_S, self.limits.behind_for) + 60
            while hist and now - hist[0][0] > keep:
                hist.popleft()

    def _temp_ago(self, now: float, seconds: float) -> float | None:
        """The remembered temperature about `seconds` ago (None if not that much history)."""
        hist = self._history
        if not hist or now - hist[0][0] < seconds - HISTORY_EVERY_S:
            return None
        # Entries are about HISTORY_EVERY_S apart: guess the index, then step to the right one.
        i = max(0, len(hist) - 1 - int(seconds / HISTORY_EVERY_S))
        while i > 0 and now - hist[i][0] < seconds - HISTORY_EVERY_S * 0.5:
            i -= 1
        return hist[i][1]

    def _check_link(self, obs: Observation) -> None:
        now = obs.now
        if obs.link_ok:
            self._last_ok = now
            self._set("no-link", False, now)
            self._set("no-link-too-long", False, now)
            return
        assert self._last_ok is not None
        silent = now - self._last_ok
        if silent >= self.limits.link_lost:
            self._set("no-link", True, now, self.no_link_words(silent))
        if silent >= self.limits.link_lost_safe:
            self._set("no-link-too-long", True, now, self.no_link_too_long_words(silent))

    def _check_sensor(self, obs: Observation, temp: float | None) -> None:
        now = obs.now
        if not obs.link_ok:
            return
        why = ""
        if obs.sensor_fault:
            why = "fault"
        elif obs.chamber_c is None:
            why = "none"
        elif temp is None:
            why = "impossible"
        if why:
            self._bad_count += 1
            self._good_count = 0
            if self._bad_count >= BAD_READINGS_TO_ALARM:
                self._set("sensor-bad", True, now, self.bad_reading_words(why, obs.chamber_c))
            self._last_temp = None
            return
        assert temp is not None
        self._bad_count = 0
        self._good_count += 1
        last = self._last_temp
        self._last_temp = (now, temp)
        jumps = self._jumps
        if last is not None and now - last[0] <= 10.0 and abs(temp - last[1]) > JUMP_C:
            jumps.append(now)
        while jumps and now - jumps[0] > JUMP_WINDOW_S:
            jumps.popleft()
        frozen = self._frozen(obs, temp)
        if len(jumps) >= JUMPS_TO_ALARM:
            self._set("sensor-bad", True, now, self.jumps_words())
        elif frozen:
            self._set("sensor-bad", True, now, self.frozen_words(temp))
        elif (self._good_count >= GOOD_READINGS_TO_CLEAR and not jumps
              and "sensor-bad" in self.active):
            self._set("sensor-bad", False, now)

    def _frozen(self, obs: Observation, temp: float) -> bool:
        output = obs.output_pct
        heating = output is not None and output >= 50.0
        if not heating or temp != self._frozen_value:
            self._frozen_value = temp
            self._frozen_since = obs.now
            return False
        return self._frozen_since is not None and obs.now - self._frozen_since >= FROZEN_S

    def _check_max(self, obs: Observation, temp: float) -> None:
        if self.max_c is None:
            return
        if temp > self.max_c:
            self._max_count += 1
            if self._max_count >= HOT_READINGS_TO_ALARM:
                self._set("over-kiln-max", True, obs.now, self.over_max_words(temp))
        else:
            self._max_count = 0
            if temp < self.max_c - 5.0 and "over-kiln-max" in self.active:
                self._set("over-kiln-max", False, obs.now)

    def _check_too_hot(self, obs: Observation, temp: float) -> None:
        target = obs.target_c
        applies = target is not None and obs.step_kind in ("ramp", "hold", "pause")
        limit = (target or 0.0) + self.limits.overshoot
        if applies and temp > limit:
            self._hot_count += 1
            if self._hot_count >= HOT_READINGS_TO_ALARM:
                self._set("too-hot", True, obs.now, self.too_hot_words(temp, target))
        else:
            self._hot_count = 0
            if (not applies or temp < limit - 2.0) and "too-hot" in self.active:
                self._set("too-hot", False, obs.now)

    def _check_lagging(self, obs: Observation, temp: float) -> None:
        now = obs.now
        planned = obs.setpoint_c
        lagging = (obs.rated_ramp and obs.paused_since is None and planned is not None
                   and obs.step_state in (st.HEATING, st.REACHING))
        gap = (planned - temp) if lagging and planned is not None else 0.0
        if lagging and gap > self.limits.behind:
            if self._lag_since is None:
                self._lag_since = now
            if now - self._lag_since >= self.limits.behind_for:
                self._set("lagging", True, now, self.lagging_words(temp, gap, planned))
        else:
            self._lag_since = None
            if not lagging or gap < self.limits.behind * 0.75:
                self._set("lagging", False, now)

    def _check_no_rise(self, obs: Observation, temp: float) -> None:
        now = obs.now
        if obs.output_pct is not None:
            demand = obs.output_pct >= FULL_OUTPUT_PCT
        else:
            demand = obs.setpoint_c is not None and obs.setpoint_c - temp >= self.limits.behind
        demand = demand and not obs.heat_off and obs.paused_since is None
        if not demand:
            self._demand_since = None
            self._set("no-rise", False, now)
            return
        if self._demand_since is None:
            self._demand_since = now
        if now - self._demand_since < self.limits.stall_for:
            return
        before = self._temp_ago(now, self.limits.stall_for)
        if before is None:
            return
        rise = temp - before
        if rise < NO_RISE_C:
            self._set("no-rise", True, now, self.no_rise_words(temp))
        elif rise > NO_RISE_C * 2:
            self._set("no-rise", False, now)

    def _check_stuck_on(self, obs: Observation, temp: float) -> None:
        now = obs.now
        out = obs.output_pct
        if out is not None and out <= STUCK_OUTPUT_PCT:
            if self._off_since is None:
                self._off_since = now
        else:
            self._off_since = None
        before = self._temp_ago(now, STUCK_RISE_WINDOW_S)
        rise = None if before is None else temp - before
        rising_off = (self._off_since is not None and now - self._off_since >= STUCK_OFF_FOR_S
                      and rise is not None and rise >= STUCK_RISE_C)
        sp = self._highest_recent_setpoint(now, obs.setpoint_c)
        # Far above the setpoint and rising steadily through the whole window: a reading that
        # jumps back after the door was shut (a step, then flat) is not a stuck relay.
        half = self._temp_ago(now, STUCK_RISE_WINDOW_S / 2)
        last = self._temp_ago(now, STUCK_RISE_WINDOW_S / 4)
        steady = (before is not None and half is not None and last is not None
                  and half - before >= NO_RISE_C / 2 and temp - half >= NO_RISE_C / 2
                  and temp - last >= NO_RISE_C / 4)
        far_above = (sp is not None and temp > sp + self.limits.runaway
                     and rise is not None and rise >= NO_RISE_C and steady)
        if rising_off or far_above:
            self._set("heat-stuck-on", True, now, self.stuck_on_words(temp, rising_off, sp))
        elif rise is not None and rise < NO_RISE_C and not far_above:
            self._set("heat-stuck-on", False, now)

    def _highest_recent_setpoint(self, now: float, sp: float | None) -> float | None:
        """The highest setpoint of the last SETPOINT_LAG_S (a sliding maximum)."""
        recent = self._recent_sp
        if sp is not None:
            while recent and recent[-1][1] <= sp:
                recent.pop()
            recent.append((now, sp))
        while recent and (now - recent[0][0] > SETPOINT_LAG_S or now < recent[0][0]):
            recent.popleft()
        return recent[0][1] if recent else sp

    def _check_hold(self, obs: Observation) -> None:
        now = obs.now
        in_hold = obs.step_kind == "hold"
        slipped = in_hold and obs.step_state == st.SLIPPED and obs.state_since is not None
        if slipped and now - (obs.state_since or now) >= self.limits.hold_grace:
            self._set("hold-slipped", True, now,
                      self.slipped_words(obs.target_c, now - (obs.state_since or now)))
        elif not slipped:
            self._set("hold-slipped", False, now)
        # Waiting for the temperature to come into the band: a hold (from its start), a `max`
        # ramp (from its start), or a ramp whose setpoint is at the target (from then). An oven
        # that cannot get that hot would otherwise heat at full power for ever.
        since: float | None = None
        if obs.paused_since is None:
            if obs.step_state == st.REACHING and in_hold:
                since = obs.step_started_at
            elif obs.step_kind == "ramp" and obs.step_state == st.HEATING_FULL:
                since = obs.step_started_at
            elif obs.step_kind == "ramp" and obs.step_state == st.REACHING:
                since = obs.state_since
        if since is not None and now - since >= self.limits.reach_within:
            self._set("never-reached", True, now, self.never_reached_words(in_hold,
                                                                            obs.target_c))
        elif since is None:
            self._set("never-reached", False, now)

    def _check_paused(self, obs: Observation) -> None:
        since = obs.paused_since
        if since is not None and obs.now - since >= self.limits.pause_too_long:
            self._set("paused-too-long", True, obs.now, say(
                "The run has been paused for {paused}: resume it or abort it",
                paused=(ev.DURATION, obs.now - since)))
        elif since is None:
            self._set("paused-too-long", False, obs.now)
