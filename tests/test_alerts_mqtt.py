"""The MQTT publisher against a real mosquitto (tests/mqtt_broker.py), watched by independent
clients: `mosquitto_sub` and a separate aiomqtt client. The engine does not exist yet, so the
publisher is driven directly with Event objects and state dicts."""

from __future__ import annotations

import asyncio
import json
import os
import shutil
import signal
import sys
import textwrap
import time
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

import aiomqtt
import pytest
from aiomqtt.exceptions import MqttConnectError

from tests.waiting import eventually, time_passes
from tuikiln import events as ev
from tuikiln.alerts.mqtt import MqttPublisher
from tuikiln.alerts.settings import MqttSettings, check_mqtt_settings
from tuikiln.events import Event

if TYPE_CHECKING:  # imported by pytest as a plugin, below, so not here
    from tests.mqtt_broker import Broker

MOSQUITTO_SUB = shutil.which("mosquitto_sub")

KILN = "Bench Oven"  # -> id "bench-oven"
BASE = "tuikiln/bench-oven"


def settings_for(broker: Broker, tmp_path: Any, **extra: object) -> MqttSettings:
    """Through the real kiln-file checker, with the password in a file of its own."""
    password_file = tmp_path / "mqtt.pass"
    password_file.write_text(broker.users["kiln"] + "\n")
    password_file.chmod(0o600)  # a password file others can read is refused
    settings, problems = check_mqtt_settings(
        broker.mqtt_table("mqtt.pass", **extra), KILN, str(tmp_path)
    )
    assert problems == []
    assert settings is not None
    return settings


class Watcher:
    """An independent subscriber that records (topic, payload, retain)."""

    def __init__(self, broker: Broker, topics: tuple[str, ...] = ("tuikiln/#",),
                 identifier: str | None = None, clean_session: bool | None = None) -> None:
        self.broker = broker
        self.topics = topics
        self.identifier = identifier
        self.clean_session = clean_session
        self.messages: list[tuple[str, str, bool]] = []
        self._task: asyncio.Task[None] | None = None
        self._ready = asyncio.Event()

    async def __aenter__(self) -> Watcher:
        self._task = asyncio.create_task(self._listen())
        await asyncio.wait_for(self._ready.wait(), 5)
        return self

    async def __aexit__(self, *exc: object) -> None:
        assert self._task is not None
        self._task.cancel()
        await asyncio.gather(self._task, return_exceptions=True)

    async def _listen(self) -> None:
        async with aiomqtt.Client(self.broker.host, self.broker.port, username="watcher",
                                  password=self.broker.users["watcher"], identifier=self.identifier,
                                  clean_session=self.clean_session) as client:
            for topic in self.topics:
                await client.subscribe(topic, qos=1)
            self._ready.set()
            async for message in client.messages:
                payload = message.payload
                text = payload.decode() if isinstance(payload, bytes | bytearray) else str(payload)
                self.messages.append((str(message.topic), text, bool(message.retain)))

    def on(self, topic: str) -> list[str]:
        return [payload for t, payload, _ in self.messages if t == topic]

    async def wait_for(self, check: Callable[[], bool], timeout: float = 15.0,
                       what: str = "the messages awaited") -> None:
        try:
            await eventually(check, timeout, what, every=0.02)
        except AssertionError as exc:
            raise AssertionError(f"{exc}; messages seen: {self.messages[-10:]}") from None


def event(n: int, kind: str = ev.NOTE, severity: str = "info") -> Event:
    return Event(time=1_700_000_000.0 + n, kind=kind, message=f"event {n}", severity=severity,
                 detail={"n": n}, run_id=7)


async def test_events_state_and_readings_reach_an_independent_mosquitto_sub(
    mosquitto: Broker, tmp_path: Any
) -> None:
    if not MOSQUITTO_SUB:
        pytest.skip("mosquitto_sub is not installed (Debian package mosquitto-clients)")
    sub = await asyncio.create_subprocess_exec(
        MOSQUITTO_SUB, "-h", mosquitto.host, "-p", str(mosquitto.port), "-u", "watcher",
        "-P", mosquitto.users["watcher"], "-t", "tuikiln/#", "-v", "-q", "1",
        stdout=asyncio.subprocess.PIPE,
    )
    lines: list[str] = []

    async def read_until(predicate: Callable[[str], bool], timeout: float = 5.0) -> None:
        assert sub.stdout is not None
        async with asyncio.timeout(timeout):
            while True:
                line = (await sub.stdout.readline()).decode().rstrip("\n")
                lines.append(line)
                if predicate(line):
                    return

    try:
        # mosquitto_sub gives no "subscribed" signal: wait for a probe message to come round.
        async with aiomqtt.Client(mosquitto.host, mosquitto.port, username="watcher",
                                  password=mosquitto.users["watcher"]) as probe:
            for _ in range(100):
                await probe.publish("tuikiln/probe", "ping")
                try:
                    await read_until(lambda line: line == "tuikiln/probe ping", timeout=0.1)
                    break
                except TimeoutError:
                    continue
        publisher = MqttPublisher(settings_for(mosquitto, tmp_path))
        await publisher.start()
        assert await publisher.wait_connected(5)
        raised = Event(time=1_700_000_100.5, kind=ev.ALARM_RAISED, message="Overshoot: 1790 °F",
                       severity="critical", detail={"alarm": "over-target", "chamber_c": 976.7},
                       run_id=3)
        publisher.event(raised)
        publisher.state({"profile": "A2", "step_words": "holding", "chamber_c": 976.7,
                         "load_c": float("nan")})
        publisher.reading({"time": 1.0, "chamber_c": 976.7, "setpoint_c": 954.4})
        await read_until(lambda line: line.startswith(f"{BASE}/reading "))
        await publisher.stop()
        await read_until(lambda line: line == f"{BASE}/status offline")
    finally:
        if sub.returncode is None:
            sub.send_signal(signal.SIGTERM)
        await sub.wait()

    seen = {line.split(" ", 1)[0]: line.split(" ", 1)[1] for line in lines if " " in line}
    assert f"{BASE}/status online" in lines
    assert json.loads(seen[f"{BASE}/event"]) == {**raised.as_dict(),
                                                 "time_iso": "2023-11-14T22:15:00.500+00:00"}
    state = json.loads(seen[f"{BASE}/state"])
    assert state["step_words"] == "holding"
    assert state["load_c"] is None  # NaN is not JSON: sent as null
    assert json.loads(seen[f"{BASE}/reading"])["setpoint_c"] == 954.4
    assert lines[-1] == f"{BASE}/status offline"  # a clean exit says goodbye itself


async def test_state_is_retained_throttled_and_status_is_retained(
    mosquitto: Broker, tmp_path: Any
) -> None:
    publisher = MqttPublisher(settings_for(mosquitto, tmp_path, readings=False),
                              state_min_interval=0.5, state_max_interval=1.0)
    await publisher.start()
    assert await publisher.wait_connected(5)
    async with Watcher(mosquitto) as watcher:
        started = time.monotonic()
        for n in range(40):  # 40 changes in about 1 s
            publisher.state({"n": n})
            publisher.reading({"n": n})  # readings = false: nothing sent
            await time_passes(0.025, "the state changes faster than it may be sent (0.5 s)")

        def sent_states() -> list[int]:
            return [json.loads(p)["n"] for p in watcher.on(f"{BASE}/state")]

        # then no change: still republished at least once a second (the last one twice)
        await watcher.wait_for(lambda: sent_states().count(39) >= 2,
                               what="the last state, sent again with no change")
        states = sent_states()
        # At most one state per 0.5 s of the time it really took (a loaded machine
        # stretches the 40 sleeps), plus the first and one in flight: 6 when unloaded.
        most = int((time.monotonic() - started) / 0.5) + 2
        assert 2 <= len(states) <= most, (states, most)
        assert states[-1] == 39
        assert watcher.on(f"{BASE}/reading") == []
    # A late subscriber gets the retained status and state at once.
    async with Watcher(mosquitto) as late:
        await late.wait_for(lambda: bool(late.on(f"{BASE}/state")))
        # The first message on each topic is the retained one the broker hands out at
        # once; the once-a-second republish that may follow on a slow machine is live
        # (MQTT 3.1.1, section 3.3.1.3: RETAIN is 1 for a message sent because of a new
        # subscription, 0 for one matching an established subscription).
        first: dict[str, bool] = {}
        for topic, _, retain in late.messages:
            if topic.startswith(BASE):
                first.setdefault(topic, retain)
        assert first and all(first.values()), first
        assert late.on(f"{BASE}/status") == ["online"]
    await publisher.stop()


async def test_kill_9_makes_the_broker_publish_offline(mosquitto: Broker, tmp_path: Any) -> None:
    settings_for(mosquitto, tmp_path)  # writes the password file
    script = tmp_path / "run_publisher.py"
    script.write_text(textwrap.dedent("""
        import asyncio, json, sys
        from tuikiln.alerts.mqtt import MqttPublisher
        from tuikiln.alerts.settings import check_mqtt_settings

        async def main():
            settings, problems = check_mqtt_settings(json.loads(sys.argv[1]), "Bench Oven",
                                                     sys.argv[2])
            assert not problems, problems
            publisher = MqttPublisher(settings)
            await publisher.start()
            publisher.state({"step_words": "heating"})
            print("connected" if await publisher.wait_connected(10) else "failed", flush=True)
            await asyncio.sleep(3600)

        asyncio.run(main())
    """))
    table = mosquitto.mqtt_table("mqtt.pass", keepalive=2)
    async with Watcher(mosquitto, topics=(f"{BASE}/status",)) as watcher:
        child = await asyncio.create_subprocess_exec(
            sys.executable, str(script), json.dumps(table), str(tmp_path),
            stdout=asyncio.subprocess.PIPE, cwd=os.getcwd(),
        )
        try:
            assert child.stdout is not None
            assert (await asyncio.wait_for(child.stdout.readline(), 10)).strip() == b"connected"
            await watcher.wait_for(lambda: watcher.on(f"{BASE}/status") == ["online"])
            killed_at = time.monotonic()
            child.send_signal(signal.SIGKILL)
            await watcher.wait_for(lambda: watcher.on(f"{BASE}/status")[-1:] == ["offline"],
                                   timeout=6)
            took = time.monotonic() - killed_at
        finally:
            if child.returncode is None:
                child.kill()
            await child.wait()
    print(f"offline (Last Will) seen {took:.2f} s after kill -9")
    assert took < 4.0


async def test_broker_outage_queues_events_in_order_and_republishes_state(
    mosquitto_factory: Callable[..., Broker], tmp_path: Any
) -> None:
    # A 3 s outage stands for the minutes a real broker may be away. The broker keeps the
    # watcher's session across its restart (persistence on), so the watcher sees what the
    # publisher delivers after reconnecting however the two race to reconnect.
    broker = mosquitto_factory(persistence=True)
    emitted: list[Event] = []
    publisher = MqttPublisher(settings_for(broker, tmp_path), emit=emitted.append,
                              retry_min=0.25, retry_max=0.5)
    await publisher.start()
    assert await publisher.wait_connected(5)
    watch = dict(topics=(f"{BASE}/event", f"{BASE}/state"), identifier="watcher-outage",
                 clean_session=False)
    async with Watcher(broker, **watch) as watcher:
        publisher.state({"phase": "before"})
        publisher.event(event(0))
        await watcher.wait_for(lambda: len(watcher.on(f"{BASE}/event")) == 1)

    broker.stop()
    await eventually(lambda: not publisher.connected, 15,
                     "the publisher to see the broker gone", every=0.02)
    # The calls never wait on the broker: each event is in the outbox when event() returns
    # (plain calls, no await). What they cost is a figure: tests/bench/mqtt_outage.py.
    outage_end = time.monotonic() + 3.0
    n = 1
    while time.monotonic() < outage_end:
        before = publisher.queued
        publisher.event(event(n))
        assert publisher.queued == before + 1, "event() did not hold the event at once"
        publisher.reading({"n": n})
        publisher.state({"phase": "during", "n": n})
        n += 1
        await time_passes(0.05, "events come in through the outage, 20 a second")
    last = n - 1
    assert publisher.queued >= last  # still held, nothing lost
    broker.start()
    assert await publisher.wait_connected(5)

    async with Watcher(broker, **watch) as watcher:
        await watcher.wait_for(
            lambda: len(watcher.on(f"{BASE}/event")) >= last
            and any(json.loads(p).get("n") == last for p in watcher.on(f"{BASE}/state")),
            timeout=8,
        )
        numbers = [json.loads(p)["detail"].get("n") for p in watcher.on(f"{BASE}/event")]
    assert numbers[:last] == list(range(1, last + 1))  # every one, in order
    async with Watcher(broker, topics=(f"{BASE}/state",)) as fresh:
        await fresh.wait_for(lambda: bool(fresh.on(f"{BASE}/state")))
        assert json.loads(fresh.on(f"{BASE}/state")[-1]) == {"phase": "during", "n": last}
    await publisher.stop()
    failures = [e for e in emitted if e.kind == ev.ALERT_FAILED]
    assert len(failures) == 1 and failures[0].detail["channel"] == "mqtt"
    print(f"outage: {last} events queued and delivered in order")


async def test_outbox_drops_oldest_readings_first_and_caps_events(tmp_path: Any) -> None:
    settings = MqttSettings(host="127.0.0.1", port=9, id="x")  # never started: all queued
    publisher = MqttPublisher(settings, event_cap=5, reading_cap=3)
    for n in range(10):
        publisher.reading({"n": n})
    for n in range(8):
        publisher.event(event(n))
    assert publisher.dropped == (3, 7)
    kept = [json.loads(i.payload) for i in publisher._outbox.peek(100)]
    assert [k["n"] for k in kept[:3]] == [7, 8, 9]  # newest readings, still before the events
    assert [k["detail"]["n"] for k in kept[3:]] == [3, 4, 5, 6, 7]


async def test_anonymous_and_wrong_password_clients_are_refused(
    mosquitto: Broker, tmp_path: Any
) -> None:
    with pytest.raises(MqttConnectError):
        async with aiomqtt.Client(mosquitto.host, mosquitto.port):
            pass
    with pytest.raises(MqttConnectError):
        async with aiomqtt.Client(mosquitto.host, mosquitto.port, username="kiln",
                                  password="not-the-password"):
            pass
    # The publisher with a wrong password says so once, keeps trying, and never raises.
    (tmp_path / "wrong.pass").write_text("not-the-password\n")
    (tmp_path / "wrong.pass").chmod(0o600)
    settings, problems = check_mqtt_settings(mosquitto.mqtt_table("wrong.pass"), KILN,
                                             str(tmp_path))
    assert settings is not None and not problems
    emitted: list[Event] = []
    publisher = MqttPublisher(settings, emit=emitted.append, retry_min=0.1, retry_max=0.2)
    refused_before = mosquitto.refused_logins()
    await publisher.start()
    # it keeps trying: three logins refused (the broker's log counts them)
    await eventually(lambda: mosquitto.refused_logins() >= refused_before + 3, 15,
                     "the publisher to try its wrong login three times", every=0.02)
    publisher.event(event(1))
    assert not publisher.connected
    await publisher.stop()
    assert [e.kind for e in emitted] == [ev.ALERT_FAILED]
    assert "refused the login" in emitted[0].message


async def test_remote_commands_only_make_things_safer(mosquitto: Broker, tmp_path: Any) -> None:
    calls: list[tuple[str, dict, str]] = []
    emitted: list[Event] = []

    async def on_command(name: str, args: dict, source: str) -> None:
        calls.append((name, args, source))

    publisher = MqttPublisher(settings_for(mosquitto, tmp_path, commands=True),
                              emit=emitted.append, on_command=on_command)
    await publisher.start()
    assert await publisher.wait_connected(5)
    topic = f"{BASE}/command"
    sent = [
        b'{"command": "resume"}',           # adds heat: refused
        b'{"command": "setpoint", "value": 1800}',
        b"\xff\xfe not json",               # garbage
        b"[1, 2, 3]",                       # JSON, but not an object
        json.dumps({"command": "note", "text": "x" * 5000}).encode(),  # over 4 KiB
        b'{"command": "launch"}',           # unknown
        b'{"command": "note"}',             # missing its text
        b'{"command": "abort"}',            # allowed
        b'{"command": "note", "text": "checked from the phone"}',  # allowed
    ]
    async with aiomqtt.Client(mosquitto.host, mosquitto.port, username="watcher",
                              password=mosquitto.users["watcher"]) as remote:
        for payload in sent:
            await remote.publish(topic, payload, qos=1)
        # the allowed two come last: every refusal is in by then
        await eventually(lambda: len(calls) == 2, 15, "the two allowed commands", every=0.02)
    await publisher.stop()

    assert calls == [("abort", {}, "mqtt"), ("note", {"text": "checked from the phone"}, "mqtt")]
    refused = [e for e in emitted if e.kind == ev.COMMAND_REFUSED]
    assert [e.detail["name"] for e in refused] == ["resume", "setpoint", "?", "?", "?",
                                                   "launch", "note"]
    assert "add heat" in refused[0].message
    assert "4096" in refused[4].message
    assert all(e.detail["source"] == "mqtt" for e in refused)
    # A command left retained on the broker would fire again at every (re)connect: ignored.
    async with aiomqtt.Client(mosquitto.host, mosquitto.port, username="watcher",
                              password=mosquitto.users["watcher"]) as remote:
        await remote.publish(topic, b'{"command": "abort"}', qos=1, retain=True)
        publisher2 = MqttPublisher(settings_for(mosquitto, tmp_path, commands=True),
                                   emit=emitted.append, on_command=on_command)
        await publisher2.start()
        assert await publisher2.wait_connected(5)
        await eventually(lambda: len(emitted) > len(refused), 15,
                         "the retained command to be refused", every=0.02)
        await publisher2.stop()
        await remote.publish(topic, b"", qos=1, retain=True)  # clear it from the broker
    assert len(calls) == 2
    assert emitted[-1].kind == ev.COMMAND_REFUSED and "retained" in emitted[-1].message


async def test_discovery_configs_are_retained_and_point_at_state(
    mosquitto: Broker, tmp_path: Any
) -> None:
    publisher = MqttPublisher(settings_for(mosquitto, tmp_path, discovery=True))
    await publisher.start()
    assert await publisher.wait_connected(5)
    async with Watcher(mosquitto, topics=("homeassistant/#",)) as watcher:
        await watcher.wait_for(lambda: len(watcher.messages) >= 4)
    await publisher.stop()
    configs = {t: json.loads(p) for t, p, retain in watcher.messages if retain}
    # Topic layout and fields of the open MQTT discovery convention
    # (home-assistant.io/integrations/mqtt, "Discovery messages"; sensor.mqtt).
    chamber = configs["homeassistant/sensor/bench-oven/chamber/config"]
    assert chamber["state_topic"] == f"{BASE}/state"
    assert chamber["availability_topic"] == f"{BASE}/status"
    assert chamber["device_class"] == "temperature"
    assert chamber["unit_of_measurement"] == "°C"
    assert chamber["device"]["identifiers"] and chamber["device"]["name"] == KILN
    assert {"homeassistant/sensor/bench-oven/setpoint/config",
            "homeassistant/sensor/bench-oven/step/config",
            "homeassistant/sensor/bench-oven/alarm/config"} <= set(configs)
    assert len({c["unique_id"] for c in configs.values()}) == len(configs)


async def test_state_is_published_again_after_the_broker_forgot_it(
    mosquitto: Broker, tmp_path: Any
) -> None:
    # No persistence: a restarted broker has lost every retained message. The heartbeat is
    # set to a minute, so only the reconnect itself can bring the state back in time.
    publisher = MqttPublisher(settings_for(mosquitto, tmp_path), retry_min=0.2, retry_max=0.2,
                              state_max_interval=60.0)
    await publisher.start()
    assert await publisher.wait_connected(5)
    publisher.state({"step_words": "soaking"})
    async with Watcher(mosquitto, topics=(f"{BASE}/state",)) as watcher:
        await watcher.wait_for(lambda: bool(watcher.on(f"{BASE}/state")))
    mosquitto.stop()
    mosquitto.start()
    async with Watcher(mosquitto, topics=(f"{BASE}/state", f"{BASE}/status")) as watcher:
        await watcher.wait_for(lambda: bool(watcher.on(f"{BASE}/state")), timeout=5)
        await watcher.wait_for(lambda: watcher.on(f"{BASE}/status")[-1:] == ["online"])
    assert json.loads(watcher.on(f"{BASE}/state")[-1]) == {"step_words": "soaking"}
    assert publisher.connects == 2
    await publisher.stop()
