"""Command hooks: `[[hook]]` entries in the kiln file run a program when chosen events happen.

    [[hook]]
    on = ["alarm", "operator", "end"]      # event kinds, or the groups in HOOK_GROUPS
    run = ["curl", "-s", "-d", "{kiln}: {message}", "https://push.example/YOUR-TOPIC"]
    timeout = "20s"                        # default 30 s; then the hook and its children stop

Programs run directly (asyncio.create_subprocess_exec), never through a shell. Placeholders
({kiln} {event} {message} {temperature} {severity} {run} {step}) are filled in *inside* each
argument, so a value with spaces, quotes or `;` stays one argument and can never become a
new one; a filled-in argument that would start with "-" gets a leading space so it cannot be
read as an option. The same values are in the environment as TUIKILN_KILN, TUIKILN_EVENT,
TUIKILN_MESSAGE, TUIKILN_TEMPERATURE, TUIKILN_SEVERITY, TUIKILN_RUN, TUIKILN_STEP, and the
whole event as JSON in TUIKILN_EVENT_JSON.

Hooks run in the background, at most CONCURRENCY at once, each hook's runs in event order.
A hook that fails, cannot start or outlives its timeout becomes an ALERT_FAILED event
(channel "hook"), never a crash. Those events never start hooks themselves, so a broken hook
cannot loop.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import logging
import os
import signal
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from tuikiln import events as ev
from tuikiln.alerts.settings import (
    DEFAULT_PASSWORD_ENV,
    PLACEHOLDERS,
    HookSpec,
    fill_placeholders,
)
from tuikiln.events import Event, Severity
from tuikiln.units import format_temp

log = logging.getLogger(__name__)

CONCURRENCY = 4
QUEUE_CAP = 100
MAX_VALUE = 4000          # characters per placeholder value
STDERR_KEEP = 4096        # bytes of a hook's error output kept for the message
KILL_GRACE = 1.0          # seconds between SIGTERM and SIGKILL


@dataclass(frozen=True)
class _Job:
    hook: HookSpec
    values: dict[str, str]
    event_json: str


def build_argv(run: Sequence[str], values: Mapping[str, str]) -> list[str]:
    """The program untouched, then each argument filled in on its own."""
    argv = [run[0]]
    for template in run[1:]:
        argument = fill_placeholders(template, values).replace("\0", "")  # exec refuses NUL
        if argument.startswith("-") and not template.startswith("-"):
            argument = " " + argument
        argv.append(argument)
    return argv


def _result_or_empty(task: asyncio.Task[str]) -> str:
    if task.done() and not task.cancelled() and task.exception() is None:
        return task.result()
    return ""


def _clean_value(value: Any) -> str:
    text = "" if value is None else str(value)
    return text.replace("\0", "")[:MAX_VALUE]


class HookRunner:
    """An AlertSink that runs the kiln file's hooks for matching events."""

    def __init__(
        self,
        hooks: Sequence[HookSpec],
        *,
        kiln_name: str,
        emit: Callable[[Event], None] | None = None,
        units: str = "C",
        clock: Callable[[], float] = time.time,
        concurrency: int = CONCURRENCY,
        queue_cap: int = QUEUE_CAP,
        stop_grace: float = 15.0,
        secret_env: Sequence[str] = (),
    ) -> None:
        self.hooks = list(hooks)
        # The MQTT password may live in the engine's environment: a hook is someone else's
        # program, so it never inherits it.
        self._secret_env = {DEFAULT_PASSWORD_ENV, *secret_env}
        self._kiln = kiln_name
        self._emit_callback = emit
        self._units = units
        self._clock = clock
        self._concurrency = max(1, concurrency)
        self._queue_cap = queue_cap
        self._stop_grace = stop_grace
        self._queue: asyncio.Queue[_Job] = asyncio.Queue()
        self._workers: list[asyncio.Task[None]] = []
        self._last_c: float | None = None
        self._last_step: Any = None
        # One hook sees its events in order (raised before cleared); different hooks overlap.
        self._hook_locks: dict[int, asyncio.Lock] = {}
        self.dropped = 0
        self.finished = 0

    # -- AlertSink ---------------------------------------------------------------------

    def event(self, event: Event) -> None:
        try:
            if event.kind == ev.ALERT_FAILED and event.detail.get("channel") == "hook":
                return
            matching = [hook for hook in self.hooks if event.kind in hook.on]
            if not matching:
                return
            values = self._values(event)
            event_json = json.dumps(event.as_dict(), ensure_ascii=False, default=str)
            for hook in matching:
                if self._queue.qsize() >= self._queue_cap:
                    self._queue.get_nowait()
                    self._queue.task_done()
                    self.dropped += 1
                    log.warning("hook queue full: %d oldest hook runs dropped", self.dropped)
                self._queue.put_nowait(_Job(hook, values, event_json))
        except Exception:
            log.exception("could not queue a hook")

    def state(self, state: Mapping[str, Any]) -> None:
        self._remember(state)

    def reading(self, sample: Mapping[str, Any]) -> None:
        self._remember(sample)

    async def start(self) -> None:
        if not self._workers and self.hooks:
            self._workers = [asyncio.create_task(self._work(), name=f"tuikiln-hook-{n}")
                             for n in range(self._concurrency)]

    async def stop(self) -> None:
        """Let queued and running hooks finish for up to stop_grace seconds, then stop them."""
        if not self._workers:
            return
        with contextlib.suppress(TimeoutError):
            await asyncio.wait_for(self._queue.join(), self._stop_grace)
        for worker in self._workers:
            worker.cancel()
        await asyncio.gather(*self._workers, return_exceptions=True)
        self._workers = []

    async def drain(self, timeout: float) -> bool:
        """Wait until every queued hook has run (for tests and the end of a run)."""
        try:
            await asyncio.wait_for(self._queue.join(), timeout)
            return True
        except TimeoutError:
            return False

    # -- inside ------------------------------------------------------------------------

    def _remember(self, values: Mapping[str, Any]) -> None:
        try:
            chamber = values.get("chamber_c")
            if isinstance(chamber, int | float):
                self._last_c = float(chamber)
            if "step" in values:
                self._last_step = values.get("step")
        except Exception:
            pass

    def _values(self, event: Event) -> dict[str, str]:
        detail = event.detail or {}
        temperature_c = next((detail[k] for k in ("chamber_c", "temperature_c", "core_c")
                              if isinstance(detail.get(k), int | float)), self._last_c)
        step = detail.get("index", self._last_step)
        if isinstance(step, int) and not isinstance(step, bool):
            step = step + 1  # people count steps from 1
        values = {
            "kiln": self._kiln,
            "event": event.kind,
            "message": event.message,
            "temperature": format_temp(temperature_c, self._units) if temperature_c is not None
            else "",
            "severity": event.severity,
            "run": "" if event.run_id is None else event.run_id,
            "step": "" if step is None else step,
        }
        return {key: _clean_value(values[key]) for key in PLACEHOLDERS}

    def _failed(self, job: _Job, words: str) -> None:
        message = f"{job.hook.label}: {words}"
        log.warning("%s", message)
        event = Event(time=self._clock(), kind=ev.ALERT_FAILED, message=message,
                      severity=Severity.WARNING, detail={"channel": "hook", "hook": job.hook.index,
                                                  "words": words},
                      run_id=int(job.values["run"]) if job.values["run"].isdigit() else None)
        if self._emit_callback is not None:
            try:
                self._emit_callback(event)
            except Exception:
                log.exception("the engine's emit callback failed")

    async def _work(self) -> None:
        while True:
            job = await self._queue.get()
            lock = self._hook_locks.setdefault(id(job.hook), asyncio.Lock())
            try:
                async with lock:  # asyncio locks are first come, first served
                    await self._run(job)
            except asyncio.CancelledError:
                raise
            except Exception as exc:
                self._failed(job, f"could not run: {exc!r}")
            finally:
                self.finished += 1
                self._queue.task_done()

    async def _run(self, job: _Job) -> None:
        argv = build_argv(job.hook.run, job.values)
        env = {key: value for key, value in os.environ.items() if key not in self._secret_env}
        env.update({f"TUIKILN_{key.upper()}": value for key, value in job.values.items()})
        env["TUIKILN_EVENT_JSON"] = job.event_json
        try:
            process = await asyncio.create_subprocess_exec(
                *argv, stdin=asyncio.subprocess.DEVNULL, stdout=asyncio.subprocess.DEVNULL,
                stderr=asyncio.subprocess.PIPE, env=env, start_new_session=True,
            )
        except FileNotFoundError:
            self._failed(job, f'cannot start "{argv[0]}": no such program')
            return
        except PermissionError:
            self._failed(job, f'cannot start "{argv[0]}": permission denied (not executable?)')
            return
        except OSError as exc:
            self._failed(job, f'cannot start "{argv[0]}": {exc.strerror or exc}')
            return
        errors = asyncio.create_task(self._read_errors(process))
        try:
            await asyncio.wait_for(process.wait(), job.hook.timeout)
        except TimeoutError:
            await self._kill_group(process)
            self._failed(job, f"did not finish within {job.hook.timeout:g} s: stopped it "
                         "(and everything it started)")
            return
        except asyncio.CancelledError:
            await self._kill_group(process)
            raise
        finally:
            # A child that keeps stderr open must not keep us waiting once the hook is done.
            with contextlib.suppress(TimeoutError, asyncio.CancelledError):
                await asyncio.wait_for(asyncio.shield(errors), 0.2)
            errors.cancel()
        if process.returncode:
            tail = _result_or_empty(errors).strip().splitlines()[-1:]
            code = process.returncode
            how = f"was stopped by signal {-code}" if code < 0 else f"failed with exit code {code}"
            self._failed(job, how + (f": {tail[0][:300]}" if tail else ""))

    @staticmethod
    async def _read_errors(process: asyncio.subprocess.Process) -> str:
        kept = bytearray()
        assert process.stderr is not None
        while chunk := await process.stderr.read(4096):
            kept += chunk
            del kept[:-STDERR_KEEP]
        return kept.decode("utf-8", "replace")

    @staticmethod
    async def _kill_group(process: asyncio.subprocess.Process) -> None:
        # start_new_session made the hook a group leader: its children share its group id.
        for sig in (signal.SIGTERM, signal.SIGKILL):
            with contextlib.suppress(ProcessLookupError, PermissionError):
                os.killpg(process.pid, sig)
            if sig == signal.SIGTERM:
                with contextlib.suppress(TimeoutError):
                    await asyncio.wait_for(process.wait(), KILL_GRACE)
        with contextlib.suppress(TimeoutError):
            await asyncio.wait_for(process.wait(), KILL_GRACE)
