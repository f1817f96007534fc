"""The run loop: read the device, apply the rules, write the setpoint, log, tell the sinks.

    settings = RunSettings(KilnInfo("Shop oven", "C", 1100.0), limits, speed="max")
    engine = RunEngine(device, profile, settings, runlog=log, sinks=[fanout])
    outcome = await engine.run()          # the device must be connected already

`RunSettings` is what the run is told (the kiln, the alarm limits, the tick, the first step,
the speed as written, whether pauses answer themselves); `SafetyWiring` (safety.py) is how the
heat is reached when the loop cannot (the watchdog, a second connection); `resume` carries on
an unfinished run. tuikiln/engine/host.py builds all of them from a kiln file.

Time comes from `device.clock` (wall time for real ovens, simulated time for the in-process
simulator), so a simulated day runs in seconds. Every tick: one read, one `RunRules.tick`,
at most one setpoint write, one sample. Commands (`engine.command(...)`) come from the
control socket in the same event loop and act at once on the rules.

Anything unexpected inside the loop drives the device safe, records the failure and is
raised again: a bug must never leave an oven heating unattended.

A watchdog task beside the loop watches the wall clock: when a tick has not finished within
`SafetyWiring.watchdog_s` (a read that hangs despite the driver's own timeout), it cancels
the loop, stops heating through a separate path (safety.py `stop_heat_separately`: the same
device once the stuck call is cancelled, else a fresh connection) and ends the run
(engine-failed, exit 5). It cannot help when the event loop itself is blocked by a call that
never yields. A run that ended without reaching the controller keeps trying the safe state
(saferetry.py).

After a restart (`resume=ResumePlan`, see recovery.py) the engine appends to the same run,
writes a GAP event on its first reading and carries on, holds safe or ends per the kiln
file's `on_restart`. With every commit the stepper's resume point goes into the run log.

A controller that rebooted comes back with its own setpoint and often stopped: when it
reports another setpoint than ours, or "not running" while the run wants heat, the engine
arms it again (stop, then setpoint and run written afresh) and says so (setpoint.py).
"""

from __future__ import annotations

import asyncio
import logging
import sqlite3
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from tuikiln import events as ev
from tuikiln.drivers.base import Device, Reading
from tuikiln.drivers.errors import DeviceError, LinkLost, NoAnswer, SensorFault
from tuikiln.engine import recovery
from tuikiln.engine import states as st
from tuikiln.engine.recovery import ResumePlan
from tuikiln.engine.rules import REMOTE_SOURCES, CommandResult, Decision, RunRules, TickInput
from tuikiln.engine.saferetry import RETRY_WORDS, SafeRetry
from tuikiln.engine.safety import (
    DEFAULT_SAFETY,
    WATCHDOG_S,
    SafeResult,
    SafetyWiring,
    drive_safe,
    stop_heat_separately,
)
from tuikiln.engine.setpoint import SetpointKeeper
from tuikiln.engine.states import RestartPolicy
from tuikiln.engine.status import LastReading, RunFacts, Status, build_status
from tuikiln.errors import UserError
from tuikiln.events import Event, Severity
from tuikiln.limits import Limits
from tuikiln.ovenmodel_plan import LiveForecast
from tuikiln.profile import Profile
from tuikiln.runlog import QUEUE_WARN_FRACTION, RUNLOG_NAME, RunLog, RunRecorder, log_trouble
from tuikiln.units import format_duration, format_temp

log = logging.getLogger(__name__)

STATUS_EVERY_WALL_S = 1.0
SUSPENDED = "suspended"     # not an outcome in the log: the run stays unfinished, to resume
COMMIT_EVERY_S = 0.5       # the run log commits at least this often: a one-second tick commits
                           # every tick, so a kill loses at most the tick under way


class CannotLog(UserError):
    """The run log cannot take a run (a full or read-only data folder): exit 4, as for any
    run that cannot start."""

    exit_code = 4


@dataclass(frozen=True)
class KilnInfo:
    """The oven as the run log and the status name it."""

    name: str
    units: str = "C"
    max_c: float | None = None
    text: str = ""
    """The kiln file as written, kept with the run."""


@dataclass(frozen=True)
class RunSettings:
    """What a run is told besides its device and its profile."""

    kiln: KilnInfo
    limits: Limits
    tick_s: float = 1.0
    """A reading every this many seconds of the device's clock."""
    start_index: int = 0
    """The profile's step to begin with (0: the first)."""
    speed: str = ""
    """The simulator's speed as the person wrote it, for the run log ("" at real time)."""
    auto_continue: bool = False
    """A pause step that waits for a person is answered at once (demos, trials)."""


Listener = Callable[[str, dict[str, Any]], None]
"""Called with ("event", event dict) and ("status", status dict)."""


class RunEngine:
    def __init__(self, device: Device, profile: Profile, settings: RunSettings, *,
                 runlog: RunLog | None = None, sinks: list[Any] | None = None,
                 resume: ResumePlan | None = None, safety: SafetyWiring = DEFAULT_SAFETY,
                 ) -> None:
        """`runlog`: where the run is recorded (None: nowhere); `sinks`: the alert fan-out
        (tuikiln.events.AlertSink); `resume`: carry on this unfinished run (recovery.py)."""
        self.device = device
        self.clock = device.clock
        self.profile = profile
        self.settings = settings
        self.kiln = settings.kiln
        self.watch_only = not device.capabilities.can_write_setpoint
        self.rules = RunRules(profile, settings.limits, max_c=self.kiln.max_c,
                              units=self.kiln.units, start_index=settings.start_index)
        self.runlog = runlog
        self.recorder: RunRecorder | None = None
        self.sinks = list(sinks or [])
        self.listeners: list[Listener] = []
        self.safety = safety
        self.setpoint = SetpointKeeper(device, self.kiln.units, self._emit)
        self.safe_retry = SafeRetry(device, self._emit, self._publish_now,
                                    timeout_s=safety.path_timeout_s)
        self.last = LastReading()
        self._sensor_fault = False
        self.started = 0.0
        self.run_id: int | None = None
        self.outcome: str | None = None
        self.end_words = ""
        self._stop_request: tuple[str, str] | None = None
        self._status_at = 0.0
        self._log_trouble = False
        self._log_queue_near = False
        self.ticks = 0
        self.forecast: LiveForecast | None = None
        """The learned oven's times for the status (tuikiln.ovenmodel_store.live_forecast)."""
        self.resume = resume
        self._resume_pending = resume is not None
        self.held_for_restart = False
        """Hold safe after a restart: heat off, clocks stopped, until `resume` or `ack`."""
        self._tick_began: float | None = None
        self._stalled = False
        self._suspend_request: str | None = None

    @property
    def rearms(self) -> int:
        """How often the controller was armed again (it rebooted, or was changed by hand)."""
        return self.setpoint.rearms

    @property
    def safe_pending(self) -> bool:
        """The run has ended but the heat could not be turned off: retrying until it is."""
        return self.safe_retry.pending

    # ----- outside -----

    def command(self, name: str, arg: str | None = None, source: str = "command") -> dict:
        """Apply a person's command at once; returns {"ok", "message"}."""
        now = self.clock.now()
        if self.safe_pending and name in ("abort", "stop"):
            return self.safe_retry.command(name, source)
        if self.held_for_restart:
            held = self._command_while_held(now, name, arg, source)
            if held is not None:
                self._emit_all(held.events)
                self._publish_status(force=True)
                return {"ok": held.ok, "message": held.message}
        result: CommandResult = self.rules.command(now, name, arg, source)
        self._emit_all(result.events)
        self._publish_status(force=True)
        return {"ok": result.ok, "message": result.message}

    def request_stop(self, outcome: str, reason: str) -> None:
        """From a signal handler: stop at the next tick, driving the device safe."""
        self.safe_retry.ask_stop()
        if self._stop_request is None:
            self._stop_request = (outcome, reason)

    def request_suspend(self, reason: str) -> None:
        """From a service manager's SIGTERM (a reboot, `systemctl stop`): drive the device
        safe at the next tick and leave the run unfinished, to be carried on (per the kiln
        file's on_restart) when the engine starts again."""
        self.safe_retry.ask_stop()
        if self._suspend_request is None and self._stop_request is None:
            self._suspend_request = reason

    def status(self) -> Status:
        now = self.clock.now()
        facts = RunFacts(self.run_id, self.kiln.name, self.started, self.watch_only)
        return build_status(self.rules, facts, now=now, last=self.last,
                            forecast=self.forecast, safe=self.safe_retry.state(now))

    # ----- the run -----

    async def run(self) -> str:
        self.started = self.clock.now()
        try:
            if self.resume is not None:
                await self._run_resumed()
            else:
                self._start_new()
        except (sqlite3.Error, OSError) as exc:
            raise await self._cannot_log(exc) from exc
        loop_task = asyncio.create_task(self._loop())
        watchdog = (asyncio.create_task(self._watchdog(loop_task))
                    if self.safety.watchdog_s else None)
        try:
            try:
                await loop_task
            except asyncio.CancelledError:
                me = asyncio.current_task()
                if not self._stalled or (me is not None and me.cancelling()):
                    raise
                await asyncio.shield(self._end_stalled())
        except BaseException as exc:
            loop_task.cancel()
            cancelled = isinstance(exc, asyncio.CancelledError | KeyboardInterrupt)
            outcome = st.STOPPED_BY_SIGNAL if cancelled else st.ENGINE_FAILED
            reason = ("the run was interrupted" if cancelled else
                      f"the engine failed ({type(exc).__name__}: {exc})")
            if not cancelled:
                log.exception("engine failure")
            decision = self.rules.stop(self.clock.now(), outcome, reason)
            self._emit_all(decision.events)
            if self.outcome is None:
                await asyncio.shield(self._safe_and_end(outcome, reason))
            raise
        finally:
            if watchdog is not None:
                watchdog.cancel()
            if self.recorder is not None:
                # Waits for a locked or full log (up to runlog.CLOSE_WAIT_S), off the loop.
                await asyncio.shield(asyncio.to_thread(self.recorder.close))
        return self.outcome or st.COMPLETED

    async def _cannot_log(self, exc: BaseException) -> UserError:
        """The run log cannot be opened for writing (a full or read-only disk): no run. A
        restarted engine finds an oven its dead predecessor may have left heating: heat off
        first, then say so."""
        path = self.runlog.path if self.runlog is not None else Path(RUNLOG_NAME)
        trouble = log_trouble(path, exc)
        if self.resume is None:
            return CannotLog(f"{trouble}; the run did not start")
        if self.watch_only:
            words = "watching only: switch the oven off at its controller"
        else:
            result = await drive_safe(self.device)
            words = result.words
        return CannotLog(f"{trouble}; run {self.resume.run.id} was not carried on, and the "
                         f"oven was driven safe: {words}")

    def _attach_recorder(self, recorder: RunRecorder) -> None:
        self.recorder = recorder
        self.run_id = recorder.run_id
        recorder.every_s = COMMIT_EVERY_S
        recorder.resume_source = self._resume_point
        recorder.write_in_background()  # SQL off the loop: a locked log never stalls a tick

    def _resume_point(self) -> tuple[float, dict[str, Any]]:
        stepper = self.rules.stepper
        point = recovery.snapshot(stepper)
        point["held_for_restart"] = self.held_for_restart
        t = stepper.last_now if stepper.last_now is not None else self.clock.now()
        return t, point

    async def _run_resumed(self) -> None:
        plan = self.resume
        assert plan is not None
        self.started = plan.run.started
        if self.runlog is not None:
            self._attach_recorder(self.runlog.resume_run(plan.run.id))

    def _start_new(self) -> None:
        if self.runlog is not None:
            p = self.profile
            load = {"material": p.load.material, "thickness_m": p.load.thickness_m,
                    "pieces": p.load.pieces, "wrap": p.load.wrap}
            if p.load.width_text:  # as written, like the thickness; the report shows it
                load["width"] = p.load.width_text
            self._attach_recorder(self.runlog.start_run(
                kiln=self.kiln.name, profile=p.name, started=self.started,
                profile_path=p.path, profile_text=p.source, kiln_text=self.kiln.text,
                load=load, units=self.kiln.units, device=self.device.description,
                speed=self.settings.speed, watch_only=self.watch_only))
        watch = " (watching only: this device cannot take a setpoint)" if self.watch_only else ""
        self._emit(Event(self.started, ev.RUN_START, f"Run started: {self.profile.name} on "
                         f"{self.kiln.name}{watch}", Severity.INFO,
                         {"profile": self.profile.name, "kiln": self.kiln.name,
                          "device": self.device.description, "watch_only": self.watch_only,
                          "speed": self.settings.speed}))

    async def _loop(self) -> None:
        next_t = self.clock.now()
        while True:
            self._tick_began = time.monotonic()
            now = self.clock.now()
            tick_input = await self._read(now)
            if self._resume_pending:
                ending = await self._begin_resume(now, tick_input)
                if ending is not None:
                    decision = ending
                else:
                    decision = self.rules.tick(now, tick_input)
            else:
                decision = self.rules.tick(now, tick_input)
            self.last.core_c = self.rules.core_c
            if self._stop_request is not None and not decision.ended:
                decision = self.rules.stop(now, *self._stop_request)
            elif self._suspend_request is not None and not decision.ended:
                self._emit_all(decision.events)
                self._sample(now, None, True)
                await self._suspend(self._suspend_request)
                return
            self._emit_all(decision.events)
            if self.rules.stepper.waiting_for_operator and self.settings.auto_continue:
                self._emit_all(self.rules.command(now, "ack", None, "auto-continue").events)
            self._sample(now, decision.setpoint_c, decision.heat_off)
            if self.recorder is not None:
                self.recorder.maybe_flush()
            if decision.ended:
                outcome = decision.outcome or st.COMPLETED
                if decision.safe_reason is not None:
                    await self._safe_and_end(outcome, decision.safe_reason)
                else:
                    await self._complete(outcome)
                if self.safe_pending:
                    self._tick_began = None  # no tick under way: the watchdog stands by
                    await self.safe_retry.keep_trying(now, self.settings.tick_s)
                return
            if (decision.setpoint_c is not None and not self.watch_only
                    and not self.held_for_restart):
                await self._write(now, decision.setpoint_c)
            self._check_log(now)
            self._publish_status()
            self.ticks += 1
            self._tick_began = None
            next_t += self.settings.tick_s
            delay = next_t - self.clock.now()
            if delay < -10 * self.settings.tick_s:
                next_t = self.clock.now()  # far behind (a suspended laptop): do not race
                delay = 0.0
            await self.clock.sleep(max(0.0, delay))

    async def _read(self, now: float) -> TickInput:
        reading: Reading | None = None
        link_ok = True
        sensor_fault = False
        # What the device was really sent before this poll: a driver may write a held-back
        # setpoint during the poll itself, after taking the reading.
        sent_c = self.device.written_setpoint_c
        try:
            reading = await self.device.read()
        except SensorFault:
            sensor_fault = True
        except DeviceError as exc:
            link_ok = False
            if isinstance(exc, NoAnswer | LinkLost):  # silent, not garbled: it may reboot
                self.setpoint.unanswered()
        if reading is not None:
            sensor_fault = sensor_fault or reading.sensor_fault
        # Logged as a flag, so a replay (what-if) sees a sensor fault, not a lost link.
        self._sensor_fault = sensor_fault
        if reading is not None:
            chamber = reading.chamber_c
            self.last.chamber_c = chamber
            self.last.load_c = reading.load_c
            self.last.output_pct = reading.output_pct
            self.setpoint.watch(now, reading, sent_c, heat_off=self.rules.stepper.heat_off,
                                held=self.held_for_restart)
        else:
            chamber = None
            self.last.chamber_c = None
            self.last.output_pct = None
        return TickInput(chamber_c=chamber, load_c=None if reading is None else reading.load_c,
                         output_pct=None if reading is None else reading.output_pct,
                         link_ok=link_ok, sensor_fault=sensor_fault)

    async def _write(self, now: float, setpoint_c: float) -> None:
        if not await self.setpoint.write(now, setpoint_c):
            self.watch_only = True
            self._emit(Event(now, ev.DEVICE, "The device refused a setpoint: watching only from "
                             "now on", Severity.WARNING, {"words": "setpoint not supported"}))

    def _sample(self, now: float, setpoint_c: float | None, heat_off: bool) -> None:
        if self.recorder is None and not self.sinks:
            return
        s = self.rules.stepper
        last = self.last
        flags = 0
        if self._sensor_fault:
            flags |= st.FLAG_SENSOR_FAULT  # the device answered: a fault, not silence
        elif last.chamber_c is None:
            flags |= st.FLAG_NO_READING
        if s.paused:
            flags |= st.FLAG_PAUSED
        if self.watch_only:
            flags |= st.FLAG_WATCH_ONLY
        if self.rules.alarms.active:
            flags |= st.FLAG_ALARM
        if last.core_c is not None and last.load_c is None:
            flags |= st.FLAG_CORE_ESTIMATED
        if heat_off:
            flags |= st.FLAG_HEAT_OFF
        step = min(s.index, len(s.steps) - 1)
        state = st.STATE_CODE.get(s.state, 0)
        if self.recorder is not None:
            self.recorder.sample(now, last.chamber_c, last.load_c, last.core_c, setpoint_c,
                                 last.output_pct, step, state, flags)
        if self.sinks:
            sample = {"time": now, "chamber_c": last.chamber_c, "load_c": last.load_c,
                      "core_c": last.core_c, "setpoint_c": setpoint_c,
                      "output_pct": last.output_pct, "step": step, "step_state": s.state}
            for sink in self.sinks:
                _safe_call(sink.reading, sample)

    def _check_log(self, now: float) -> None:
        rec = self.recorder
        if rec is None:
            return
        trouble = rec.trouble is not None
        if trouble != self._log_trouble:
            self._log_trouble = trouble
            words = f"Cannot write the run log ({rec.trouble}): the run goes on" if trouble else ""
            self._emit_all(self.rules.alarms.set_condition("log-trouble", trouble, now, words))
        # read once: the writer thread spills meanwhile, and the warning must say what was seen
        queued, bound = rec.queued, rec.queue_bound
        near = queued >= bound * QUEUE_WARN_FRACTION
        if near != self._log_queue_near:
            self._log_queue_near = near
            if near:
                spill = rec.spill.path if rec.spill is not None else "a spill file"
                self._emit(Event(now, ev.LOG_QUEUE, f"{queued:,} samples wait in memory for "
                                 f"the run log ({queued * 100 // bound} % of the "
                                 f"{bound:,} kept there); past that the oldest go to "
                                 f"{spill}, in order, and are written when the log can be",
                                 Severity.WARNING, {"queued": queued, "bound": bound}))

    # ----- endings -----

    async def _complete(self, outcome: str) -> None:
        now = self.clock.now()
        words = "heat off"
        if not self.watch_only:
            result = await drive_safe(self.device)
            self.safe_retry.pending = result.unreached and not result.done
            words = "heat off" if result.done else result.words + (
                RETRY_WORDS if self.safe_pending else "")
        self._end(now, outcome, f"Run complete: every step is done; {words}")

    async def _safe_and_end(self, outcome: str, reason: str,
                            result: SafeResult | None = None) -> None:
        if result is None:
            result = await drive_safe(self.device)
        now = self.clock.now()
        if self.watch_only:
            result_words = ("watching only: tuikiln cannot turn this oven's heat off. Switch "
                            "it off at its controller")
            done = False
        else:
            result_words, done = result.words, result.done
            if not done and result.unreached:
                self.safe_retry.pending = True
                result_words += RETRY_WORDS
        self._emit(Event(now, ev.SAFE_STATE, f"Safe state: {reason}; {result_words}",
                         (Severity.CRITICAL if not done or outcome != st.ABORTED
                          else Severity.WARNING),
                         {"reason": reason, "done": done, "words": result_words}))
        self._end(now, outcome, f"Run ended ({outcome.replace('-', ' ')}): {reason}")

    def _end(self, now: float, outcome: str, message: str) -> None:
        self.outcome = outcome
        self.end_words = message
        severity = Severity.INFO if outcome == st.COMPLETED else Severity.WARNING
        self._emit(Event(now, ev.RUN_END, message, severity, {"outcome": outcome}))
        if self.recorder is not None:
            self.recorder.end(outcome, now)
        self._publish_status(force=True)

    async def _suspend(self, reason: str) -> None:
        result = await drive_safe(self.device) if not self.watch_only else None
        now = self.clock.now()
        done = result is not None and result.done
        words = result.words if result is not None else "watching only"
        self._emit(Event(now, ev.SAFE_STATE, f"Safe state: {reason}; {words}. The run is left "
                         "unfinished: it is taken up again when the engine starts again",
                         Severity.WARNING if done else Severity.CRITICAL,
                         {"reason": reason, "done": done, "words": words, "suspended": True}))
        self.outcome = SUSPENDED
        self.end_words = f"Run suspended: {reason}"
        if self.recorder is not None:
            await asyncio.to_thread(self.recorder.flush, True)
        self._publish_status(force=True)

    # ----- after a restart -----

    async def _begin_resume(self, now: float, tick: TickInput) -> Decision | None:
        """First tick after a restart: the GAP event, then the policy. Returns the ending
        decision for "end", else None (the rules tick as usual)."""
        plan = self.resume
        assert plan is not None
        self._resume_pending = False
        u = self.kiln.units
        after = tick.chamber_c if tick.link_ok and not tick.sensor_fault else None
        away = max(0.0, now - plan.away_since)
        why = f" ({plan.why})" if plan.why else ""
        self._emit(Event(now, ev.GAP, f"The engine was away {format_duration(away)}: "
                         f"{format_temp(plan.before_c, u)} before, {format_temp(after, u)} now. "
                         f'On restart: "{plan.policy}"{why}', Severity.WARNING,
                         {"seconds": away, "since": plan.away_since, "before_c": plan.before_c,
                          "after_c": after, "policy": plan.policy, "asked": plan.asked,
                          "why": plan.why}))
        stepper = self.rules.stepper
        if plan.policy == RestartPolicy.END:
            return self.rules.stop(now, plan.end_outcome or st.ENDED_AFTER_RESTART,
                                   "the kiln file says on_restart = \"end\"" if not plan.why
                                   else plan.why)
        words = recovery.restore_stepper(stepper, plan, now, after)
        if plan.policy == RestartPolicy.CONTINUE:
            self._emit(Event(now, ev.COMMAND, f"Carrying on after the restart: {words}",
                             Severity.INFO,
                             {"name": "resume", "source": "restart"}))
            return None
        # "hold": heat off now, then wait for a person.
        if stepper.state == st.STARTING:
            stepper.state = st.WAITING_YOU  # frozen until released (paused: nothing moves)
        recovery.hold_safe(stepper, now)
        self.held_for_restart = True
        result = await drive_safe(self.device) if not self.watch_only else None
        done = result is not None and result.done
        safe_words = (result.words if result is not None else "watching only: switch the oven "
                      "off at its controller")
        self._emit(Event(now, ev.SAFE_STATE, f"Safe state after the restart: {safe_words}",
                         Severity.WARNING if done else Severity.CRITICAL,
                         {"reason": "restart", "done": done, "words": safe_words}))
        self._emit(Event(now, ev.OPERATOR_NEEDED, "The engine restarted and holds the oven safe "
                         "(heat off, clocks stopped): `tuikiln resume` carries on with step "
                         f"{min(stepper.index, len(stepper.steps) - 1) + 1} from the "
                         "temperature then, `tuikiln abort` ends the run", Severity.WARNING,
                         {"index": stepper.index, "text": "restart: resume or abort",
                          "reminder": False}))
        return None

    def _command_while_held(self, now: float, name: str, arg: str | None,
                            source: str) -> CommandResult | None:
        """Commands while holding safe after a restart; None: the rules handle it."""
        if name in ("abort", "note") or (name == "ack" and arg not in (None, "", "you")):
            return None
        if name not in ("resume", "ack") or source in REMOTE_SOURCES:
            return CommandResult(False, "the run holds safe after a restart: `tuikiln resume` "
                                 "first (or `tuikiln abort`)", [Event(
                                     now, ev.COMMAND_REFUSED, f"Refused {name}: holding safe "
                                     "after a restart", Severity.INFO,
                                     {"name": name, "source": source, "reason": "held"})])
        plan = self.resume
        assert plan is not None
        self.held_for_restart = False
        words = recovery.restore_stepper(self.rules.stepper, plan, now, self.last.chamber_c)
        self.setpoint.forget()  # write the setpoint (and run) afresh on the next tick
        message = f"Carrying on after the restart: {words}"
        events = [Event(now, ev.COMMAND, message, Severity.INFO, {"name": name, "source": source})]
        events.extend(self.rules.alarms.set_condition("paused-too-long", False, now))
        return CommandResult(True, message, events)

    # ----- the watchdog -----

    async def _watchdog(self, loop_task: asyncio.Task[None]) -> None:
        limit = float(self.safety.watchdog_s or WATCHDOG_S)
        every = min(1.0, limit / 4.0)
        while not loop_task.done():
            await asyncio.sleep(every)
            began = self._tick_began
            if began is not None and time.monotonic() - began > limit:
                log.error("device loop stalled for %.1f s: stopping the heat", limit)
                self._stalled = True
                loop_task.cancel()
                return

    async def _end_stalled(self) -> None:
        limit = float(self.safety.watchdog_s or WATCHDOG_S)
        reason = (f"the device loop stalled: no tick finished within {limit:g} s "
                  "(a device call that hangs)")
        now = self.clock.now()
        self._emit_all(self.rules.stop(now, st.ENGINE_FAILED, reason).events)
        result = await self._stop_heat_separately()
        await self._safe_and_end(st.ENGINE_FAILED, reason, result)

    async def _stop_heat_separately(self) -> SafeResult:
        if self.watch_only:
            return SafeResult(False, "watching only")
        return await stop_heat_separately(self.device, self.safety)

    # ----- telling the world -----

    def _emit_all(self, events: list[Event]) -> None:
        for event in events:
            self._emit(event)

    def post_event(self, event: Event) -> None:
        """Log and fan out an event made outside the engine (an alert sink's own: a failed
        hook, a refused remote command), as the engine's own events are."""
        self._emit(event)

    def _emit(self, event: Event) -> None:
        if event.run_id is None and self.run_id is not None:
            event = Event(event.time, event.kind, event.message, event.severity,
                          event.detail, self.run_id)
        if self.recorder is not None:
            self.recorder.event(event, urgent=event.kind in _URGENT)
        for sink in self.sinks:
            _safe_call(sink.event, event)
        if self.listeners:
            payload = event.as_dict()
            for listener in list(self.listeners):
                _safe_call(listener, "event", payload)

    def _publish_status(self, force: bool = False) -> None:
        if not self.sinks and not self.listeners:
            return
        wall = time.monotonic()
        if not force and wall - self._status_at < STATUS_EVERY_WALL_S:
            return
        self._status_at = wall
        status = self.status()
        for sink in self.sinks:
            _safe_call(sink.state, status)
        for listener in list(self.listeners):
            _safe_call(listener, "status", status)

    def _publish_now(self) -> None:
        self._publish_status(force=True)


_URGENT = frozenset({ev.ALARM_RAISED, ev.SAFE_STATE, ev.RUN_END, ev.OPERATOR_NEEDED,
                     ev.RUN_START})


def _safe_call(fn: Callable[..., Any], *args: Any) -> None:
    try:
        fn(*args)
    except Exception:  # noqa: BLE001 - a sink must never stop the engine
        log.exception("sink failed")
