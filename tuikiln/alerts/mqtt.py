"""The MQTT publisher: the run's status, events and readings on a broker, and (when enabled)
the few remote commands that can only make things safer or quieter.

Topics, under `{prefix}/{id}/`:

    status   "online" / "offline", retained; "offline" is also the Last Will, so a crash or a
             lost link shows as offline within about the keepalive
    state    the engine's status dict as JSON, retained; at most about once a second while it
             changes, at least every 5 s, and again after every reconnect. Text values at
             most 255 characters (tuikiln.alerts.payloads); `time_iso`, `started_iso`
             (ISO 8601 UTC) beside the epoch seconds
    attributes  the state's whole texts (step words, profile, alarms), retained, sent with
             the state when they change; the dashboard entities' attributes
    event    one JSON object per event (Event.as_dict() and `time_iso`), QoS 1
    reading  one JSON object per sample, with `time_iso` (turn off with readings = false)
    command  (subscribed, only with commands = true) see tuikiln.alerts.remote

Shape of the work: `event()`, `state()` and `reading()` are plain calls that serialise, queue
and return (never block, never raise). One background task owns the connection:

    _run:  while not closing: connect (backoff 1 s doubling to 30 s) -> _session
    _session: online, discovery, subscribe, then two tasks until one ends:
        _send:    state when due, then the outbox in order (a window of QoS 1 publishes)
        _receive: incoming commands; raises MqttError when the link drops

While the broker is away the outbox keeps events (up to EVENT_CAP, oldest dropped and
counted) and readings (up to READING_CAP, oldest dropped first). An item leaves the outbox
only once the broker has taken it, so delivery is at least once and in order.
"""

from __future__ import annotations

import asyncio
import inspect
import json
import logging
import math
import os
import threading
import time
from collections import deque
from collections.abc import Awaitable, Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

import aiomqtt
from aiomqtt.exceptions import MqttConnectError

from tuikiln import events as ev
from tuikiln.alerts.discovery import discovery_messages
from tuikiln.alerts.payloads import state_and_attributes, with_iso_times
from tuikiln.alerts.remote import Refusal, RemoteCommand, parse_command
from tuikiln.alerts.settings import MqttSettings, read_password
from tuikiln.events import Event, Severity

log = logging.getLogger(__name__)

CommandCallback = Callable[[str, dict, str], Awaitable[None] | None]
EmitCallback = Callable[[Event], None]

EVENT_CAP = 10_000
READING_CAP = 2_000
WINDOW = 16              # QoS 1 publishes in flight at once (paho's own limit is 20)
REFUSALS_PER_MINUTE = 20  # so a flood of garbage cannot flood the run log
_AUTH_CODES = (4, 5, 134, 135)  # MQTT 3.1.1 and 5 "bad user name or password" / "not authorised"


def to_json(value: Any) -> str:
    """JSON that every parser reads: NaN and infinities become null, numpy scalars numbers."""
    return json.dumps(_clean(value), ensure_ascii=False, separators=(",", ":"), default=_fallback)


def _clean(value: Any) -> Any:
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, Mapping):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_clean(v) for v in value]
    return value


def _fallback(value: Any) -> Any:
    if hasattr(value, "item"):  # numpy scalar
        return _clean(value.item())
    if hasattr(value, "tolist"):
        return _clean(value.tolist())
    return str(value)


@dataclass(eq=False)
class _Item:
    seq: int
    topic: str
    payload: str
    qos: int


@dataclass
class _Outbox:
    """Events and readings waiting for the broker, kept in one order across both."""

    event_cap: int = EVENT_CAP
    reading_cap: int = READING_CAP
    events: deque[_Item] = field(default_factory=deque)
    readings: deque[_Item] = field(default_factory=deque)
    dropped_events: int = 0
    dropped_readings: int = 0
    _seq: int = 0

    def add(self, topic: str, payload: str, qos: int, is_event: bool) -> None:
        self._seq += 1
        item = _Item(self._seq, topic, payload, qos)
        if is_event:
            if len(self.events) >= self.event_cap:
                self.events.popleft()
                self.dropped_events += 1
                if self.dropped_events == 1 or self.dropped_events % 1000 == 0:
                    log.warning("MQTT outbox full: %d oldest events dropped so far",
                                self.dropped_events)
            self.events.append(item)
        else:
            if len(self.readings) >= self.reading_cap:
                self.readings.popleft()
                self.dropped_readings += 1
            self.readings.append(item)

    def peek(self, count: int) -> list[_Item]:
        out: list[_Item] = []
        i = j = 0
        events, readings = self.events, self.readings
        while len(out) < count and (i < len(events) or j < len(readings)):
            if j >= len(readings) or (i < len(events) and events[i].seq < readings[j].seq):
                out.append(events[i])
                i += 1
            else:
                out.append(readings[j])
                j += 1
        return out

    def remove(self, item: _Item) -> None:
        # Only the head can have been sent; a head dropped meanwhile for room is already gone.
        for queue in (self.events, self.readings):
            if queue and queue[0] is item:
                queue.popleft()
                return

    def __len__(self) -> int:
        return len(self.events) + len(self.readings)


class MqttPublisher:
    """An AlertSink that publishes to an MQTT broker (see the module docstring)."""

    def __init__(
        self,
        settings: MqttSettings,
        *,
        emit: EmitCallback | None = None,
        on_command: CommandCallback | None = None,
        clock: Callable[[], float] = time.time,
        retry_min: float = 1.0,
        retry_max: float = 30.0,
        state_min_interval: float = 1.0,
        state_max_interval: float = 5.0,
        event_cap: int = EVENT_CAP,
        reading_cap: int = READING_CAP,
        timeout: float = 5.0,
    ) -> None:
        self.settings = settings
        self._emit_callback = emit
        self._on_command = on_command
        self._clock = clock
        self._retry_min = retry_min
        self._retry_max = retry_max
        self._state_min = state_min_interval
        self._state_max = state_max_interval
        self._timeout = timeout
        self._outbox = _Outbox(event_cap=event_cap, reading_cap=reading_cap)
        self._topics = {leaf: settings.topic(leaf)
                        for leaf in ("status", "state", "attributes", "event", "reading",
                                     "command")}
        self._state_payload: str | None = None
        self._attributes_payload: str | None = None
        self._attributes_sent: str | None = None
        self._state_version = 0
        self._state_sent_version = -1
        self._state_sent_at: float | None = None
        self._wake = asyncio.Event()
        self._closing = asyncio.Event()
        self._online = asyncio.Event()
        self._task: asyncio.Task[None] | None = None
        self._loop: asyncio.AbstractEventLoop | None = None
        self._loop_thread: int | None = None
        self._run_id: int | None = None
        self._outage_reported = False
        self._login_reported = False
        self._dropped_reported = 0
        self._refusals: deque[float] = deque()
        self._refusals_hidden = 0
        self._sink_errors = 0
        self.connects = 0
        self.published = 0

    # -- AlertSink: plain calls, never block, never raise -------------------------------

    def event(self, event: Event) -> None:
        try:
            if event.run_id is not None:
                self._run_id = event.run_id
            self._outbox.add(self._topics["event"], to_json(with_iso_times(event.as_dict())),
                             1, True)
            self._poke()
        except Exception:
            self._note_sink_error("event")

    def state(self, state: Mapping[str, Any]) -> None:
        try:
            short, attributes = state_and_attributes(state)
            self._state_payload = to_json(short)
            self._attributes_payload = to_json(attributes)
            self._state_version += 1
            self._poke()
        except Exception:
            self._note_sink_error("state")

    def reading(self, sample: Mapping[str, Any]) -> None:
        if not self.settings.readings:
            return
        try:
            self._outbox.add(self._topics["reading"], to_json(with_iso_times(sample)), 0, False)
            self._poke()
        except Exception:
            self._note_sink_error("reading")

    async def start(self) -> None:
        if self._task is None:
            self._loop = asyncio.get_running_loop()
            self._loop_thread = threading.get_ident()
            self._task = asyncio.create_task(self._run(), name="tuikiln-mqtt")

    async def stop(self, timeout: float = 3.0) -> None:
        """Send what can be sent within `timeout`, publish 'offline', disconnect cleanly."""
        task, self._task = self._task, None
        self._closing.set()
        self._wake.set()
        if task is None:
            return
        done, _ = await asyncio.wait({task}, timeout=timeout)
        if not done:
            task.cancel()
            await asyncio.wait({task}, timeout=1.0)
        elif not task.cancelled() and task.exception():
            log.warning("MQTT publisher ended with %r", task.exception())

    # -- for the engine and tests --------------------------------------------------------

    @property
    def connected(self) -> bool:
        return self._online.is_set()

    async def wait_connected(self, timeout: float) -> bool:
        try:
            await asyncio.wait_for(self._online.wait(), timeout)
            return True
        except TimeoutError:
            return False

    @property
    def queued(self) -> int:
        return len(self._outbox)

    @property
    def dropped(self) -> tuple[int, int]:
        """(events, readings) dropped because the outbox was full while the broker was away."""
        return self._outbox.dropped_events, self._outbox.dropped_readings

    # -- inside ----------------------------------------------------------------------------

    def _poke(self) -> None:
        if self._loop is None or threading.get_ident() == self._loop_thread:
            self._wake.set()
        else:
            self._loop.call_soon_threadsafe(self._wake.set)

    def _note_sink_error(self, what: str) -> None:
        self._sink_errors += 1
        if self._sink_errors == 1:
            log.exception("MQTT publisher could not queue a %s (further errors counted)", what)

    def _emit(self, kind: str, message: str, severity: str = Severity.WARNING,
              **detail: Any) -> None:
        event = Event(time=self._clock(), kind=kind, message=message, severity=severity,
                      detail=detail, run_id=self._run_id)
        log.warning("%s", message)
        if self._emit_callback is None:
            return
        try:
            self._emit_callback(event)
        except Exception:
            log.exception("the engine's emit callback failed")

    def _failed(self, words: str) -> None:
        self._emit(ev.ALERT_FAILED, words, channel="mqtt", words=words)

    def _where(self) -> str:
        return f"{self.settings.host}:{self.settings.port}"

    def _client(self) -> aiomqtt.Client:
        s = self.settings
        password = read_password(s) if s.username else None
        tls = None
        if s.tls:
            tls = aiomqtt.TLSParameters(
                ca_certs=s.tls if isinstance(s.tls, str) else None,
                certfile=s.tls_cert, keyfile=s.tls_key,
            )
        return aiomqtt.Client(
            s.host, s.port, username=s.username, password=password,
            identifier=f"tuikiln-{s.id}-{os.getpid()}", keepalive=s.keepalive,
            timeout=self._timeout, tls_params=tls,
            will=aiomqtt.Will(self._topics["status"], "offline", qos=1, retain=True),
        )

    async def _run(self) -> None:
        delay = self._retry_min
        while not self._closing.is_set():
            try:
                async with self._client() as client:
                    self.connects += 1
                    delay = self._retry_min
                    await self._session(client)
                return
            except MqttConnectError as exc:
                code = getattr(exc.rc, "value", exc.rc)
                if code in _AUTH_CODES:
                    if not self._login_reported:
                        self._login_reported = True
                        self._failed(
                            f"the MQTT broker {self._where()} refused the login ({exc}): check "
                            f'"username" and the password; tuikiln keeps trying every '
                            f"{self._retry_max:.0f} s"
                        )
                    delay = self._retry_max
                else:
                    self._report_outage(f"the MQTT broker {self._where()} refused: {exc}")
            except aiomqtt.MqttError as exc:
                self._report_outage(f"cannot reach the MQTT broker {self._where()}: {exc}")
            except OSError as exc:
                self._report_outage(f"cannot read the MQTT password file: {exc.strerror or exc}")
                delay = self._retry_max
            except asyncio.CancelledError:
                raise
            except Exception as exc:  # never let the network task die quietly
                log.exception("unexpected MQTT failure")
                self._report_outage(f"MQTT failed unexpectedly: {exc!r}")
            finally:
                self._online.clear()
            try:
                await asyncio.wait_for(self._closing.wait(), delay)
            except TimeoutError:
                pass
            delay = min(max(delay * 2, self._retry_min), self._retry_max)

    def _report_outage(self, words: str) -> None:
        if self._outage_reported:
            log.info("%s", words)
            return
        self._outage_reported = True
        queued = "alerts are kept and sent when it is back" if not self._closing.is_set() else ""
        self._failed(f"{words}; {queued}" if queued else words)

    async def _session(self, client: aiomqtt.Client) -> None:
        status = self._topics["status"]
        await client.publish(status, "online", qos=1, retain=True)
        if self.settings.discovery:
            for topic, payload in discovery_messages(self.settings):
                await client.publish(topic, payload, qos=1, retain=True)
        if self.settings.commands:
            await client.subscribe(self._topics["command"], qos=1)
        self._state_sent_at = None  # a broker without persistence forgot the retained state
        self._attributes_sent = None
        self._online.set()
        if self._outage_reported or self._login_reported:
            log.info("MQTT broker %s reachable again", self._where())
        self._outage_reported = self._login_reported = False
        dropped = self._outbox.dropped_events
        if dropped > self._dropped_reported:
            self._failed(f"{dropped - self._dropped_reported} events were dropped (oldest first) "
                         f"while the MQTT broker was away: the outbox holds at most "
                         f"{self._outbox.event_cap}")
            self._dropped_reported = dropped
        sender = asyncio.create_task(self._send(client))
        receiver = asyncio.create_task(self._receive(client))
        try:
            done, _ = await asyncio.wait({sender, receiver}, return_when=asyncio.FIRST_COMPLETED)
        finally:
            for task in (sender, receiver):
                task.cancel()
            await asyncio.gather(sender, receiver, return_exceptions=True)
        for task in done:
            if not task.cancelled() and task.exception() is not None:
                raise task.exception()  # type: ignore[misc]

    def _state_due(self, now: float) -> bool:
        if self._state_payload is None:
            return False
        if self._state_sent_at is None:
            return True
        age = now - self._state_sent_at
        changed = self._state_version != self._state_sent_version
        return (changed and age >= self._state_min) or age >= self._state_max

    def _state_wait(self, now: float) -> float | None:
        if self._state_payload is None:
            return None
        if self._state_sent_at is None:
            return 0.0
        changed = self._state_version != self._state_sent_version
        due = self._state_sent_at + (self._state_min if changed else self._state_max)
        return max(0.0, due - now)

    async def _publish_state(self, client: aiomqtt.Client) -> None:
        payload, version = self._state_payload, self._state_version
        attributes = self._attributes_payload
        if attributes is not None and attributes != self._attributes_sent:
            # Before the state, so a dashboard that reads both never shows a cut text
            # without its whole one.
            await client.publish(self._topics["attributes"], attributes, qos=1, retain=True)
            self._attributes_sent = attributes
        await client.publish(self._topics["state"], payload, qos=1, retain=True)
        self._state_sent_version = version
        self._state_sent_at = time.monotonic()
        self.published += 1

    async def _send(self, client: aiomqtt.Client) -> None:
        while True:
            self._wake.clear()
            if self._state_due(time.monotonic()):
                await self._publish_state(client)
            batch = self._outbox.peek(WINDOW)
            if batch:
                results = await asyncio.gather(
                    *(client.publish(i.topic, i.payload, qos=i.qos) for i in batch),
                    return_exceptions=True,
                )
                for item, result in zip(batch, results, strict=True):
                    if isinstance(result, BaseException):
                        # Keep this and later items: they go again, in order, after reconnect.
                        raise aiomqtt.MqttError(f"publish failed: {result}") from result
                    self._outbox.remove(item)
                    self.published += 1
                continue
            if self._closing.is_set():
                unsent = self._state_version != self._state_sent_version
                if self._state_payload is not None and unsent:
                    await self._publish_state(client)
                await client.publish(self._topics["status"], "offline", qos=1, retain=True)
                return
            try:
                await asyncio.wait_for(self._wake.wait(), self._state_wait(time.monotonic()))
            except TimeoutError:
                pass

    async def _receive(self, client: aiomqtt.Client) -> None:
        # Iterating also notices a dropped link at once (it raises MqttError), commands or not.
        async for message in client.messages:
            if self.settings.commands and str(message.topic) == self._topics["command"]:
                payload = message.payload if isinstance(message.payload, bytes | bytearray | str) \
                    else str(message.payload).encode()
                await self._handle_command(parse_command(payload, retained=message.retain))

    async def _handle_command(self, parsed: RemoteCommand | Refusal) -> None:
        if isinstance(parsed, Refusal):
            self._refuse(parsed.name, parsed.reason)
            return
        if self._on_command is None:
            self._refuse(parsed.name, "nothing is listening for remote commands")
            return
        try:
            outcome = self._on_command(parsed.name, dict(parsed.args), "mqtt")
            if inspect.isawaitable(outcome):
                await asyncio.wait_for(outcome, 10.0)
        except Exception as exc:
            self._failed(f'the remote command "{parsed.name}" failed: {exc}')

    def _refuse(self, name: str, reason: str) -> None:
        now = time.monotonic()
        while self._refusals and now - self._refusals[0] > 60.0:
            self._refusals.popleft()
        if len(self._refusals) >= REFUSALS_PER_MINUTE:
            self._refusals_hidden += 1
            log.info("remote command refused (not logged as an event): %s", reason)
            return
        self._refusals.append(now)
        hidden, self._refusals_hidden = self._refusals_hidden, 0
        more = f" ({hidden} more refused before this one)" if hidden else ""
        self._emit(ev.COMMAND_REFUSED, f"Remote command refused: {reason}{more}",
                   name=name, source="mqtt", reason=reason)
