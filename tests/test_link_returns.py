"""Link returns: a run that ended on no-link-too-long could not turn the heat off; when the
link comes back, the engine writes the safe state then and says so. Never left heating.

The controller is a real pymodbus RTU server on a real pseudo-terminal; the "cable" is
pulled and plugged back (tests/test_drivers_wire.py's PtyWire); wall time, short limits.
"""

from __future__ import annotations

import asyncio

from tests.test_drivers_wire import PtyWire, holding_device, start_serial_server
from tests.test_setpoint_truth import EEPROM_MAP, Events
from tests.waiting import eventually
from tuikiln import events as ev
from tuikiln.drivers.maps import parse_map
from tuikiln.drivers.modbus import ModbusDevice, ModbusSettings
from tuikiln.engine import states as st
from tuikiln.engine.runner import KilnInfo, RunEngine
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


async def test_safe_state_is_written_when_the_link_comes_back(tmp_path) -> None:
    wire = PtyWire(str(tmp_path / "ttyKILN"))
    # chamber 20 °C, setpoint 0, run off; the chamber stays put (no oven needed here)
    server = await start_serial_server(holding_device([200, 0, 0, 0]), wire.device_path)
    sink = Events()
    try:
        settings = ModbusSettings(port=wire.link_path, timeout_s=0.2, retries=0,
                                  reconnect_min_s=0.05, reconnect_max_s=0.2,
                                  setpoint_min_interval_s=0.0)
        device = ModbusDevice(settings, parse_map(EEPROM_MAP, "eeprom.toml"))
        profile = parse_profile(HOT_HOLD, "hot.toml", max_c=1100.0)
        limits = Limits(link_lost=0.3, link_lost_safe=0.6)
        await device.connect()
        engine = RunEngine(device, profile, kiln=KilnInfo("Test oven", "C", 1100.0),
                           limits=limits, sinks=[sink], tick_s=0.1, watchdog_s=None)
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
        await device.close()
    finally:
        await server.shutdown()
        wire.close()


async def test_a_new_stop_request_ends_the_trying_and_says_switch_off(tmp_path) -> None:
    wire = PtyWire(str(tmp_path / "ttyKILN"))
    server = await start_serial_server(holding_device([200, 0, 0, 0]), wire.device_path)
    sink = Events()
    try:
        settings = ModbusSettings(port=wire.link_path, timeout_s=0.2, retries=0,
                                  reconnect_min_s=0.05, reconnect_max_s=0.2)
        device = ModbusDevice(settings, parse_map(EEPROM_MAP, "eeprom.toml"))
        profile = parse_profile(HOT_HOLD, "hot.toml", max_c=1100.0)
        await device.connect()
        engine = RunEngine(device, profile, kiln=KilnInfo("Test oven", "C", 1100.0),
                           limits=Limits(link_lost=0.3, link_lost_safe=0.6), sinks=[sink],
                           tick_s=0.1, watchdog_s=None)
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
        await device.close()
    finally:
        await server.shutdown()
        wire.close()
