"""After a run that ended without reaching the controller (a lost link): keep trying the safe
state, so that an oven whose link comes back is not left heating.

    retry = SafeRetry(device, emit, publish)
    retry.pending = not result.done and result.unreached   # at the run's end
    await retry.keep_trying(since=now, first_wait_s=tick_s)

The tries come ever further apart (from the tick up to SAFE_RETRY_MAX_S); each says so in the
status (`state`: the attempts and the time since). A new stop request (a signal, Ctrl-C, a
local `abort`: `ask_stop`) ends the trying at once; a remote `abort` cannot (`refuse`), since
giving up on the safe state never makes the oven safer.
"""

from __future__ import annotations

import asyncio
from collections.abc import Callable

from tuikiln import events as ev
from tuikiln.drivers.base import Device
from tuikiln.engine.rules import REMOTE_SOURCES
from tuikiln.engine.safety import SAFE_PATH_TIMEOUT_S, drive_safe
from tuikiln.engine.status import SafeState, safe_state
from tuikiln.events import Event, Severity
from tuikiln.units import format_duration

SAFE_RETRY_MAX_S = 30.0     # after a run ended unable to stop the heat: retry at least this often

STOPPED_TRYING_WORDS = ("Stopped trying to turn the heat off: the oven may still be heating. "
                        "Switch it off by hand now")

RETRY_WORDS = ("; tuikiln keeps trying to turn it off while it runs, and says so when the "
               "controller answers")


class SafeRetry:
    def __init__(self, device: Device, emit: Callable[[Event], None],
                 publish: Callable[[], None], timeout_s: float = SAFE_PATH_TIMEOUT_S) -> None:
        """`emit` logs and fans out an event; `publish` sends the status at once."""
        self.device = device
        self.clock = device.clock
        self.emit = emit
        self.publish = publish
        self.timeout_s = timeout_s
        self.pending = False
        """The run has ended but the heat could not be turned off: retrying until it is."""
        self.attempts = 0  # tries at the safe state since the run ended unable to
        self._since: float | None = None  # ... reach the controller, and since when
        self._stop_asks = 0  # signals and stop requests so far: a new one ends the trying
        self._stop_asked: asyncio.Event | None = None  # wakes the trying at a stop request

    def ask_stop(self) -> None:
        """A signal or a stop request: it ends the trying (when it comes during it)."""
        self._stop_asks += 1
        if self._stop_asked is not None:
            self._stop_asked.set()

    def state(self, now: float) -> SafeState | None:
        """The status's `safe_state`: None unless retrying."""
        if not self.pending or self._since is None:
            return None
        return safe_state(self._since, self.attempts, now)

    def command(self, name: str, source: str) -> dict:
        """`abort` (or `stop`) while retrying: a local one ends the trying (as Ctrl-C does)
        and says to switch off by hand; a remote one is refused."""
        if source in REMOTE_SOURCES:
            message = (f"Refused {name} from {source}: the run has ended and tuikiln keeps "
                       "trying to turn the heat off; only a local abort ends that")
            self.emit(Event(self.clock.now(), ev.COMMAND_REFUSED, message, Severity.WARNING,
                            {"command": name, "source": source}))
            return {"ok": False, "message": message}
        self.ask_stop()
        return {"ok": True, "message": STOPPED_TRYING_WORDS}

    async def keep_trying(self, since: float, first_wait_s: float) -> None:
        """Try the safe state again and again from `since` (the run's end, whose own try
        counts as the first) until the controller answers or a stop request comes."""
        asks = self._stop_asks
        self._stop_asked = asyncio.Event()
        self._since = since
        self.attempts = 1  # the try at the run's end
        self.publish()
        wait = max(first_wait_s, 0.1)
        while self._stop_asks == asks:
            await self._sleep_unless_stopped(wait)
            wait = min(wait * 2.0, SAFE_RETRY_MAX_S)
            if self._stop_asks != asks:
                break
            self.attempts += 1
            try:
                result = await asyncio.wait_for(drive_safe(self.device, attempts=1),
                                                self.timeout_s)
            except TimeoutError:
                self.publish()
                continue
            if not result.done:
                self.publish()  # the attempts and the time since, over MQTT
            if result.done:
                self.pending = False
                now = self.clock.now()
                self.emit(Event(now, ev.SAFE_STATE, "The controller answers again: "
                                f"{result.words}, {format_duration(now - since)} after the run "
                                "ended", Severity.WARNING,
                                {"reason": "link back", "done": True, "words": result.words,
                                 "after_end": True}))
                self.publish()
                return
        self.pending = False
        self.emit(Event(self.clock.now(), ev.SAFE_STATE, STOPPED_TRYING_WORDS,
                        Severity.CRITICAL, {"reason": "stopped trying", "done": False,
                                     "words": "not reached", "after_end": True,
                                     "attempts": self.attempts}))
        self.publish()

    async def _sleep_unless_stopped(self, seconds: float) -> None:
        """The wait between tries (up to SAFE_RETRY_MAX_S), cut short by a stop request."""
        assert self._stop_asked is not None
        nap = asyncio.ensure_future(self.clock.sleep(seconds))
        stop = asyncio.ensure_future(self._stop_asked.wait())
        try:
            await asyncio.wait({nap, stop}, return_when=asyncio.FIRST_COMPLETED)
        finally:
            nap.cancel()
            stop.cancel()
