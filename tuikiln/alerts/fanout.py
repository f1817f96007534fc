"""One AlertSink over many: the engine talks to AlertFanout, which passes everything on to
the terminal, MQTT and the hooks, each isolated from the others and from the engine.
"""

from __future__ import annotations

import asyncio
import logging
import sys
import time
from collections.abc import Callable, Iterable, Mapping
from typing import Any, TextIO

from tuikiln import events as ev
from tuikiln.engine.states import TERMINAL_BELL
from tuikiln.events import AlertSink, Event, Severity
from tuikiln.plaintext import plain

log = logging.getLogger(__name__)
TERMINAL_MARK: dict[str, str] = {Severity.CRITICAL: "!!", Severity.WARNING: "! "}



class AlertFanout:
    """Passes each call to every sink; a sink that raises is logged once and never propagates."""

    def __init__(self, sinks: Iterable[AlertSink], stop_timeout: float = 20.0) -> None:
        self.sinks = list(sinks)
        self._stop_timeout = stop_timeout
        self._complained: set[tuple[int, str]] = set()
        self.errors = 0

    def _call(self, method: str, *args: Any) -> None:
        for sink in self.sinks:
            try:
                getattr(sink, method)(*args)
            except Exception:
                self._complain(sink, method)

    def _complain(self, sink: AlertSink, method: str) -> None:
        self.errors += 1
        key = (id(sink), method)
        if key not in self._complained:
            self._complained.add(key)
            log.exception("alert sink %s failed in %s() (further failures not logged)",
                          type(sink).__name__, method)

    def event(self, event: Event) -> None:
        self._call("event", event)

    def state(self, state: Mapping[str, Any]) -> None:
        self._call("state", state)

    def reading(self, sample: Mapping[str, Any]) -> None:
        self._call("reading", sample)

    async def start(self) -> None:
        for sink in self.sinks:
            try:
                await sink.start()
            except Exception:
                self._complain(sink, "start")

    async def stop(self) -> None:
        async def one(sink: AlertSink) -> None:
            try:
                await asyncio.wait_for(sink.stop(), self._stop_timeout)
            except Exception:
                self._complain(sink, "stop")

        await asyncio.gather(*(one(sink) for sink in self.sinks))


class EventsOnlySink:
    """An AlertSink that wants only events: the other calls do nothing (subclass it)."""

    def event(self, event: Event) -> None:
        raise NotImplementedError

    def state(self, state: Mapping[str, Any]) -> None:
        pass

    def reading(self, sample: Mapping[str, Any]) -> None:
        pass

    async def start(self) -> None:
        pass

    async def stop(self) -> None:
        pass


class TerminalSink(EventsOnlySink):
    """One line per event on a stream (for `tuikiln run --headless`); a bell on alarms and
    operator prompts when `bell` is on."""

    def __init__(
        self,
        stream: TextIO | None = None,
        *,
        bell: bool = False,
        clock_format: Callable[[float], str] | None = None,
        skip: Iterable[str] = (ev.STEP_STATE,),
    ) -> None:
        self._stream = stream
        self.bell = bell
        self._format_time = clock_format or (lambda t: time.strftime("%H:%M:%S", time.localtime(t)))
        self._skip = frozenset(skip)

    def event(self, event: Event) -> None:
        if event.kind in self._skip:
            return
        stream = self._stream or sys.stdout
        mark = TERMINAL_MARK.get(event.severity, "  ")
        ring = "\a" if self.bell and event.kind in TERMINAL_BELL else ""
        try:
            stream.write(f"{ring}{self._format_time(event.time)} {mark} {plain(event.message)}\n")
            stream.flush()
        except (OSError, ValueError):
            pass  # a closed terminal must not stop the run
