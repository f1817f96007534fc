"""The run loop: read the device, apply the rules, write the setpoint, log, tell the sinks.

    engine = RunEngine(device, profile, kiln=KilnInfo(...), limits=limits, runlog=log)
    outcome = await engine.run()          # the device must be connected already

Time comes from `device.clock` (wall time for real ovens, simulated time for the in-process
simulator), so a simulated day runs in seconds. Every tick: one read, one `RunRules.tick`,
at most one setpoint write, one sample. Commands (`engine.command(...)`) come from the
control socket in the same event loop and act at once on the rules.

Anything unexpected inside the loop drives the device safe, records the failure and is
raised again: a bug must never leave an oven heating unattended.
"""

from __future__ import annotations

import asyncio
import logging
import math
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from drivers.base import Device, Reading
from drivers.errors import DeviceError, NotSupported, SensorFault
from tuikiln import events as ev
from tuikiln.engine import states as st
from tuikiln.engine.rules import CommandResult, RunRules, TickInput
from tuikiln.engine.safety import drive_safe
from tuikiln.engine.status import LastReading, build_status
from tuikiln.events import Event
from tuikiln.limits import Limits
from tuikiln.profile import Profile
from tuikiln.runlog import RunLog, RunRecorder

log = logging.getLogger(__name__)

STATUS_EVERY_WALL_S = 1.0
REWRITE_AFTER_S = 5.0      # a moving setpoint is written at most this often ...
REWRITE_STEP_C = 1.0       # ... unless it moved at least this much
DEVICE_DRIFT_C = 1.0       # the device holds another setpoint than ours: write it again


@dataclass(frozen=True)
class KilnInfo:
    name: str
    units: str = "C"
    max_c: float | None = None
    text: str = ""


Listener = Callable[[str, dict[str, Any]], None]
"""Called with ("event", event dict) and ("status", status dict)."""


class RunEngine:
    def __init__(
        self,
        device: Device,
        profile: Profile,
        *,
        kiln: KilnInfo,
        limits: Limits,
        runlog: RunLog | None = None,
        sinks: list[Any] | None = None,
        tick_s: float = 1.0,
        start_index: int = 0,
        speed: str = "",
        auto_continue: bool = False,
    ) -> None:
        self.device = device
        self.clock = device.clock
        self.profile = profile
        self.kiln = kiln
        self.limits = limits
        self.tick_s = tick_s
        self.watch_only = not device.capabilities.can_write_setpoint
        self.rules = RunRules(profile, limits, max_c=kiln.max_c, units=kiln.units,
                              start_index=start_index)
        self.runlog = runlog
        self.recorder: RunRecorder | None = None
        self.sinks = list(sinks or [])
        self.listeners: list[Listener] = []
        self.speed = speed
        self.auto_continue = auto_continue
        self.last = LastReading()
        self.started = 0.0
        self.run_id: int | None = None
        self.outcome: str | None = None
        self.end_words = ""
        self._stop_request: tuple[str, str] | None = None
        self._written_c: float | None = None
        self._written_at = -math.inf
        self._drift_ticks = 0
        self._status_at = 0.0
        self._log_trouble = False
        self.ticks = 0

    # ----- outside -----

    def command(self, name: str, arg: str | None = None, source: str = "command") -> dict:
        """Apply a person's command at once; returns {"ok", "message"}."""
        now = self.clock.now()
        result: CommandResult = self.rules.command(now, name, arg, source)
        self._emit_all(result.events)
        self._publish_status(force=True)
        return {"ok": result.ok, "message": result.message}

    def request_stop(self, outcome: str, reason: str) -> None:
        """From a signal handler: stop at the next tick, driving the device safe."""
        if self._stop_request is None:
            self._stop_request = (outcome, reason)

    def status(self) -> dict[str, Any]:
        return build_status(self.rules, run_id=self.run_id, kiln=self.kiln.name,
                            now=self.clock.now(), started=self.started, last=self.last,
                            watch_only=self.watch_only)

    # ----- the run -----

    async def run(self) -> str:
        self.started = self.clock.now()
        if self.runlog is not None:
            p = self.profile
            load = {"material": p.load.material, "thickness_m": p.load.thickness_m,
                    "pieces": p.load.pieces}
            self.recorder = self.runlog.start_run(
                kiln=self.kiln.name, profile=p.name, started=self.started,
                profile_path=p.path, profile_text=p.source, kiln_text=self.kiln.text,
                load=load, units=self.kiln.units, device=self.device.description,
                speed=self.speed, watch_only=self.watch_only)
            self.run_id = self.recorder.run_id
        watch = " (watching only: this device cannot take a setpoint)" if self.watch_only else ""
        self._emit(Event(self.started, ev.RUN_START, f"Run started: {self.profile.name} on "
                         f"{self.kiln.name}{watch}", "info",
                         {"profile": self.profile.name, "kiln": self.kiln.name,
                          "device": self.device.description, "watch_only": self.watch_only,
                          "speed": self.speed}))
        try:
            await self._loop()
        except BaseException as exc:
            cancelled = isinstance(exc, asyncio.CancelledError | KeyboardInterrupt)
            outcome = st.STOPPED_BY_SIGNAL if cancelled else st.ENGINE_FAILED
            reason = ("the run was interrupted" if cancelled else
                      f"the engine failed ({type(exc).__name__}: {exc})")
            if not cancelled:
                log.exception("engine failure")
            decision = self.rules.stop(self.clock.now(), outcome, reason)
            self._emit_all(decision.events)
            await asyncio.shield(self._safe_and_end(outcome, reason))
            raise
        finally:
            if self.recorder is not None:
                self.recorder.close()
        return self.outcome or st.COMPLETED

    async def _loop(self) -> None:
        next_t = self.clock.now()
        while True:
            now = self.clock.now()
            tick_input = await self._read(now)
            decision = self.rules.tick(now, tick_input)
            self.last.core_c = self.rules.core_c
            if self._stop_request is not None and not decision.ended:
                decision = self.rules.stop(now, *self._stop_request)
            self._emit_all(decision.events)
            if self.rules.stepper.waiting_for_operator and self.auto_continue:
                self._emit_all(self.rules.command(now, "ack", None, "auto-continue").events)
            self._sample(now, decision.setpoint_c, decision.heat_off)
            if decision.ended:
                outcome = decision.outcome or st.COMPLETED
                if decision.safe_reason is not None:
                    await self._safe_and_end(outcome, decision.safe_reason)
                else:
                    await self._complete(outcome)
                return
            if decision.setpoint_c is not None and not self.watch_only:
                await self._write(now, decision.setpoint_c)
            self._check_log(now)
            self._publish_status()
            self.ticks += 1
            next_t += self.tick_s
            delay = next_t - self.clock.now()
            if delay < -10 * self.tick_s:
                next_t = self.clock.now()  # far behind (a suspended laptop): do not race
                delay = 0.0
            await self.clock.sleep(max(0.0, delay))

    async def _read(self, now: float) -> TickInput:
        reading: Reading | None = None
        link_ok = True
        sensor_fault = False
        try:
            reading = await self.device.read()
        except SensorFault:
            sensor_fault = True
        except DeviceError:
            link_ok = False
        if reading is not None:
            sensor_fault = sensor_fault or reading.sensor_fault
            chamber = reading.chamber_c
            self.last.chamber_c = chamber
            self.last.load_c = reading.load_c
            self.last.output_pct = reading.output_pct
            self._watch_device_setpoint(reading)
        else:
            chamber = None
            self.last.chamber_c = None
            self.last.output_pct = None
        return TickInput(chamber_c=chamber, load_c=None if reading is None else reading.load_c,
                         output_pct=None if reading is None else reading.output_pct,
                         link_ok=link_ok, sensor_fault=sensor_fault)

    def _watch_device_setpoint(self, reading: Reading) -> None:
        """A controller that rebooted or was changed by hand holds another setpoint."""
        if self._written_c is None or reading.setpoint_c is None:
            return
        if abs(reading.setpoint_c - self._written_c) > DEVICE_DRIFT_C:
            self._drift_ticks += 1
            if self._drift_ticks >= 3:
                self._written_c = None  # write ours again on this tick
                self._drift_ticks = 0
        else:
            self._drift_ticks = 0

    async def _write(self, now: float, setpoint_c: float) -> None:
        resolution = self.device.capabilities.setpoint_resolution_c
        last = self._written_c
        if last is not None:
            change = abs(setpoint_c - last)
            if change < resolution * 0.5:
                return
            if change < REWRITE_STEP_C and now - self._written_at < REWRITE_AFTER_S:
                return
        try:
            await self.device.write_setpoint(setpoint_c)
        except NotSupported:
            self.watch_only = True
            self._emit(Event(now, ev.DEVICE, "The device refused a setpoint: watching only from "
                             "now on", "warning", {"words": "setpoint not supported"}))
            return
        except DeviceError:
            return  # the next tick tries again; lost links are the alarms' business
        self._written_c = setpoint_c
        self._written_at = now

    def _sample(self, now: float, setpoint_c: float | None, heat_off: bool) -> None:
        if self.recorder is None and not self.sinks:
            return
        s = self.rules.stepper
        last = self.last
        flags = 0
        if last.chamber_c is None:
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

    # ----- endings -----

    async def _complete(self, outcome: str) -> None:
        now = self.clock.now()
        words = "heat off"
        if not self.watch_only:
            result = await drive_safe(self.device)
            words = "heat off" if result.done else result.words
        self._end(now, outcome, f"Run complete: every step is done; {words}")

    async def _safe_and_end(self, outcome: str, reason: str) -> None:
        result = await drive_safe(self.device)
        now = self.clock.now()
        if self.watch_only:
            result_words = ("watching only: tuikiln cannot turn this oven's heat off. Switch "
                            "it off at its controller")
            done = False
        else:
            result_words, done = result.words, result.done
        self._emit(Event(now, ev.SAFE_STATE, f"Safe state: {reason}; {result_words}",
                         "critical" if not done or outcome != st.ABORTED else "warning",
                         {"reason": reason, "done": done, "words": result_words}))
        self._end(now, outcome, f"Run ended ({outcome.replace('-', ' ')}): {reason}")

    def _end(self, now: float, outcome: str, message: str) -> None:
        self.outcome = outcome
        self.end_words = message
        severity = "info" if outcome == st.COMPLETED else "warning"
        self._emit(Event(now, ev.RUN_END, message, severity, {"outcome": outcome}))
        if self.recorder is not None:
            self.recorder.end(outcome, now)
        self._publish_status(force=True)

    # ----- telling the world -----

    def _emit_all(self, events: list[Event]) -> None:
        for event in events:
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


_URGENT = frozenset({ev.ALARM_RAISED, ev.SAFE_STATE, ev.RUN_END, ev.OPERATOR_NEEDED,
                     ev.RUN_START})


def _safe_call(fn: Callable[..., Any], *args: Any) -> None:
    try:
        fn(*args)
    except Exception:  # noqa: BLE001 - a sink must never stop the engine
        log.exception("sink failed")
