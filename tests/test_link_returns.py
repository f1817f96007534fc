"""Link returns: a run that ended on no-link-too-long could not turn the heat off; when the
link comes back, the engine writes the safe state then and says so. Never left heating.

The controller is a real pymodbus RTU server on a real pseudo-terminal; the "cable" is
pulled and plugged back (tests/test_drivers_wire.py's PtyWire); wall time, short limits.
"""

from __future__ import annotations

import asyncio

from tests.conftest import oven_settings
from tests.test_drivers_wire import PtyWire, holding_device, start_serial_server
from tests.test_setpoint_truth import EEPROM_MAP, Events
from tests.waiting import eventually
from tuikiln import events as ev
from tuikiln.drivers.maps import parse_map
from tuikiln.drivers.modbus import ModbusDevice, ModbusSettings
from tuikiln.engine import states as st
from tuikiln.engine.runner import RunEngine
from tuikiln.engine.safety import SafetyWiring
from tuikiln.limits import Limits
from tuikiln.profile import parse_profile

HOT_HOLD = """
name = "hot hold"
units = "C"
[[step]]
ramp = "max"
to = 400
[[step]]
hold = "2h"
"""
WAIT_S = 30.0  # a bound so a broken engine fails the test instead of hanging it


async def until(condition, what: str) -> None:  # noqa: ANN001
    await eventually(condition, WAIT_S, what)



async def hot_hold_engine(wire: PtyWire, sink: object, **link: float) -> RunEngine:
    """A connected engine on the pty's controller holding HOT_HOLD, quick to call the link
    lost (0.3 s) and to want the safe state (0.6 s)."""
    settings = ModbusSettings(port=wire.link_path, timeout_s=0.2, retries=0,
                              reconnect_min_s=0.05, reconnect_max_s=0.2, **link)
    device = ModbusDevice(settings, parse_map(EEPROM_MAP, "eeprom.toml"))
    await device.connect()
    return RunEngine(device, parse_profile(HOT_HOLD, "hot.toml", max_c=1100.0),
                     oven_settings(limits=Limits(link_lost=0.3, link_lost_safe=0.6), tick_s=0.1),
                     sinks=[sink], safety=SafetyWiring(watchdog_s=None))

async def test_safe_state_is_written_when_the_link_comes_back(tmp_path) -> None:
    wire = PtyWire(str(tmp_path / "ttyKILN"))
    # chamber 20 °C, setpoint 0, run off; the chamber stays put (no oven needed here)
    server = await start_serial_server(holding_device([200, 0, 0, 0]), wire.device_path)
    sink = Events()
    try:
        engine = await hot_hold_engine(wire, sink, setpoint_min_interval_s=0.0)
        run = asyncio.create_task(engine.run())

        async def registers() -> list[int]:
            return list(await server.async_getValues(1, 3, 1, 2))

        async def heating() -> bool:
            return await registers() == [4000, 1]  # setpoint 400.0 °C, run on

        await until(heating, "the controller takes the setpoint")
        wire.unplug()

        async def ended() -> bool:
            return any(e.kind == ev.RUN_END for e in sink.events)

        await until(ended, "the run ends on the lost link")
        safe = [e for e in sink.events if e.kind == ev.SAFE_STATE]
        assert safe and safe[0].detail["done"] is False
        assert "keeps trying" in safe[0].message
        assert await heating()  # nothing reached the controller: it still heats
        assert not run.done()  # the engine keeps trying
        wire.plug()

        async def safe_now() -> bool:
            return await registers() == [0, 0]  # setpoint 0, run off

        await until(safe_now, "the safe state is written once the link answers")
        outcome = await asyncio.wait_for(run, WAIT_S)
        assert outcome == st.STOPPED_BY_ALARM
        back = [e for e in sink.events if e.kind == ev.SAFE_STATE and e.detail.get("after_end")]
        assert back and back[-1].detail["done"] is True
        assert "answers again" in back[-1].message
        await engine.device.close()
    finally:
        await server.shutdown()
        wire.close()


async def test_a_new_stop_request_ends_the_trying_and_says_switch_off(tmp_path) -> None:
    wire = PtyWire(str(tmp_path / "ttyKILN"))
    server = await start_serial_server(holding_device([200, 0, 0, 0]), wire.device_path)
    sink = Events()
    try:
        engine = await hot_hold_engine(wire, sink)
        run = asyncio.create_task(engine.run())

        async def heating() -> bool:
            return list(await server.async_getValues(1, 3, 1, 2)) == [4000, 1]

        await until(heating, "the controller takes the setpoint")
        wire.unplug()

        async def ended() -> bool:
            return any(e.kind == ev.RUN_END for e in sink.events)

        await until(ended, "the run ends on the lost link")
        engine.request_stop(st.STOPPED_BY_SIGNAL, "Ctrl-C")
        await asyncio.wait_for(run, WAIT_S)
        last = [e for e in sink.events if e.kind == ev.SAFE_STATE][-1]
        assert last.severity == "critical" and "by hand" in last.message
        await engine.device.close()
    finally:
        await server.shutdown()
        wire.close()


class States(Events):
    """Keeps the status dicts the engine publishes (what the MQTT `state` topic carries)."""

    def __init__(self) -> None:
        super().__init__()
        self.states: list[dict] = []

    def state(self, state) -> None:  # noqa: ANN001
        self.states.append(dict(state))


async def test_status_shows_the_retrying_and_a_socket_abort_ends_it(tmp_path) -> None:
    """After the run ended on a pulled cable: `status` (socket) and the published state say
    "retrying", critical, with the attempts and the time since; `abort` through the control
    socket ends the trying with the same "switch it off by hand" words as Ctrl-C."""
    from tuikiln import control
    from tuikiln.alerts.payloads import state_and_attributes
    from tuikiln.commands.ctl import status_words

    wire = PtyWire(str(tmp_path / "ttyKILN"))
    server = await start_serial_server(holding_device([200, 0, 0, 0]), wire.device_path)
    sink = States()
    try:
        engine = await hot_hold_engine(wire, sink)
        sock = control.ControlServer(engine, tmp_path / "ctl" / "kiln.sock")
        await sock.start()
        run = asyncio.create_task(engine.run())

        async def heating() -> bool:
            return list(await server.async_getValues(1, 3, 1, 2)) == [4000, 1]

        await until(heating, "the controller takes the setpoint")
        assert engine.status()["safe_state"] is None  # nothing to say while all is well
        wire.unplug()

        def status() -> dict:
            return control.request(str(sock.path), "status")["status"]

        async def retried_twice() -> dict | None:
            got = (await asyncio.to_thread(status)).get("safe_state")
            return got if got and got["attempts"] >= 3 else None

        safe = await eventually(retried_twice, WAIT_S, "the status shows the retrying")
        assert safe["state"] == "retrying" and safe["severity"] == "critical"
        assert "switch it off by hand" in safe["words"] and safe["since_s"] > 0
        assert not run.done()
        text = status_words(await asyncio.to_thread(status))
        assert "CRITICAL" in text and "not yet confirmed the heater is off" in text
        published = [s["safe_state"] for s in sink.states if s.get("safe_state")]
        assert published and published[-1]["severity"] == "critical"
        short, attributes = state_and_attributes(sink.states[-1])
        assert short["safe_state"]["state"] == "retrying"
        assert "by hand" in attributes["safe_state_words"]

        # A remote abort cannot end the trying: giving up never makes an oven safer.
        refused = engine.command("abort", None, "mqtt")
        assert refused["ok"] is False and engine.safe_pending

        answer = await asyncio.to_thread(control.request, str(sock.path), "abort")
        assert answer["ok"] and "by hand" in answer["message"]
        await asyncio.wait_for(run, WAIT_S)  # the retry wait is cut short by the abort
        last = [e for e in sink.events if e.kind == ev.SAFE_STATE][-1]
        assert last.severity == "critical" and "by hand" in last.message
        assert engine.status()["safe_state"] is None
        assert await heating()  # nothing reached the controller: the words were true
        await sock.close()
        await engine.device.close()
    finally:
        await server.shutdown()
        wire.close()


async def test_the_retrying_is_a_critical_mqtt_state_and_a_remote_abort_is_refused(
        tmp_path, mosquitto) -> None:  # noqa: ANN001
    """The same pulled cable, with a real mosquitto: the retained `state` carries
    `safe_state` "retrying" (critical) and its words reach the `attributes`; an `abort`
    sent to the command topic does not end the trying (giving up never makes it safer)."""
    import json

    import aiomqtt

    from tests.test_alerts_mqtt import BASE, Watcher, settings_for
    from tuikiln.alerts.mqtt import MqttPublisher

    wire = PtyWire(str(tmp_path / "ttyKILN"))
    server = await start_serial_server(holding_device([200, 0, 0, 0]), wire.device_path)
    box: list[RunEngine] = []
    publisher = MqttPublisher(settings_for(mosquitto, tmp_path, commands=True),
                              on_command=lambda name, args, source: box[0].command(
                                  name, None, source),
                              state_min_interval=0.1, state_max_interval=0.5)
    await publisher.start()
    try:
        assert await publisher.wait_connected(5)
        engine = await hot_hold_engine(wire, publisher)
        box.append(engine)
        run = asyncio.create_task(engine.run())
        async with Watcher(mosquitto) as watcher:

            async def heating() -> bool:
                return list(await server.async_getValues(1, 3, 1, 2)) == [4000, 1]

            await until(heating, "the controller takes the setpoint")
            wire.unplug()

            def retrying() -> list[dict]:
                states = [json.loads(p) for p in watcher.on(f"{BASE}/state")]
                return [s["safe_state"] for s in states if s.get("safe_state")]

            await watcher.wait_for(lambda: len(retrying()) >= 2, WAIT_S)
            first, later = retrying()[0], retrying()[-1]
            assert first["state"] == "retrying" and first["severity"] == "critical"
            assert later["attempts"] > first["attempts"]  # the count moves on the broker
            await watcher.wait_for(lambda: any(
                "by hand" in json.loads(p).get("safe_state_words", "")
                for p in watcher.on(f"{BASE}/attributes")), WAIT_S)
            events = [json.loads(p) for p in watcher.on(f"{BASE}/event")]
            assert any(e["kind"] == ev.SAFE_STATE and e["severity"] == "critical"
                       for e in events)

            async with aiomqtt.Client(mosquitto.host, mosquitto.port, username="watcher",
                                      password=mosquitto.users["watcher"]) as remote:
                await remote.publish(f"{BASE}/command", b'{"command": "abort"}', qos=1)

            def refused() -> bool:
                return any(json.loads(p)["kind"] == ev.COMMAND_REFUSED
                           for p in watcher.on(f"{BASE}/event"))

            await watcher.wait_for(refused, WAIT_S)
            assert engine.safe_pending and not run.done()
        engine.request_stop(st.STOPPED_BY_SIGNAL, "Ctrl-C")  # the local way out
        await asyncio.wait_for(run, WAIT_S)
        await engine.device.close()
    finally:
        await publisher.stop()
        await server.shutdown()
        wire.close()
