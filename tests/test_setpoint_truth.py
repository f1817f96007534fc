"""A sound controller must heat: the engine knows what the controller really holds.

A controller that keeps its setpoint in EEPROM (a plain `setpoint` write in the map) has its
writes spaced by the write guard. A write the guard holds back is not on the controller, so
the engine must not count it as written: otherwise its drift check sees the controller
"holding another setpoint", re-arms it (stop, then setpoint), and the setpoint after the stop
is held back in turn -- the controller sits at 0 and never heats.

The controller here is a real pymodbus RTU server on a real pseudo-terminal whose setpoint
register reads back what was written (a sound controller); a small oven in the test's clock
moves the chamber register towards the setpoint while the run register says "on".
"""

from __future__ import annotations

import math

import pytest

from tests.conftest import oven_settings
from tests.test_drivers_wire import PtyWire, holding_device, start_serial_server
from tests.waiting import time_passes
from tuikiln import events as ev
from tuikiln.drivers.maps import parse_map
from tuikiln.drivers.modbus import ModbusDevice, ModbusSettings
from tuikiln.engine import states as st
from tuikiln.engine.runner import KilnInfo, RunEngine, RunSettings
from tuikiln.engine.safety import SafetyWiring
from tuikiln.limits import Limits
from tuikiln.profile import parse_profile

# Holding registers: 0 chamber, 1 setpoint (read back = written), 2 run (1 on, 0 off).
EEPROM_MAP = """
name = "eeprom controller (test)"
[read]
chamber = { fc = 3, address = 0, scale = 0.1, signed = true, units = "C" }
setpoint = { fc = 3, address = 1, scale = 0.1, signed = true, units = "C" }
run = { fc = 3, address = 2, on = 1 }
[write]
setpoint = { fc = 6, address = 1, scale = 0.1, signed = true, units = "C", min = 0, max = 1200 }
run = { fc = 6, address = 2, on = 1, off = 0 }
"""

FAST_RAMP = """
name = "fast ramp"
units = "C"
[[step]]
ramp = "600/h"
to = 150
[[step]]
hold = "2m"
"""

ROOM_C = 20.0
OVEN_TAU_S = 30.0  # invented for the test: an oven that follows its setpoint closely


class OvenClock:
    """Simulated time for the engine and driver; each sleep moves the test oven on, in the
    server's own registers (the controller's heating is the oven's business, not ours)."""

    def __init__(self, server) -> None:  # noqa: ANN001 - a pymodbus server
        self.time = 1_000_000.0
        self.server = server
        self.chamber_c = ROOM_C
        self.highest_setpoint_c = -math.inf
        self.setpoints_seen: list[float] = []
        self.give_up_at = self.time + 2 * 3600.0
        self.engine: RunEngine | None = None

    def now(self) -> float:
        return self.time

    async def sleep(self, seconds: float) -> None:
        seconds = max(0.0, seconds)
        self.time += seconds
        if self.engine is not None and self.time > self.give_up_at:
            # The run should be over well before this: stop it rather than wait for ever.
            self.engine.request_stop(st.ABORTED, "the test gave up: the oven never got there")
        raw = await self.server.async_getValues(1, 3, 1, 2)
        setpoint_c = (raw[0] - 65536 if raw[0] >= 32768 else raw[0]) / 10.0
        running = raw[1] == 1
        self.setpoints_seen.append(setpoint_c)
        self.highest_setpoint_c = max(self.highest_setpoint_c, setpoint_c)
        target = max(setpoint_c, ROOM_C) if running else ROOM_C
        self.chamber_c = target + (self.chamber_c - target) * math.exp(-seconds / OVEN_TAU_S)
        await self.server.async_setValues(1, 3, 0, [round(self.chamber_c * 10) & 0xFFFF])
        await time_passes(0, "a simulated sleep still gives the loop a turn, as a real one")


class Events:
    def __init__(self) -> None:
        self.events: list = []

    def event(self, event) -> None:  # noqa: ANN001
        self.events.append(event)

    def state(self, state) -> None:  # noqa: ANN001
        pass

    def reading(self, sample) -> None:  # noqa: ANN001
        pass


@pytest.fixture
async def controller(tmp_path):
    wire = PtyWire(str(tmp_path / "ttyKILN"))
    server = await start_serial_server(holding_device([200, 0, 0, 0]), wire.device_path)
    yield wire, server
    await server.shutdown()
    wire.close()


async def test_fast_ramp_on_an_eeprom_setpoint_heats_and_completes(controller) -> None:
    wire, server = controller
    clock = OvenClock(server)
    settings = ModbusSettings(port=wire.link_path, timeout_s=0.5, retries=1,
                              setpoint_min_interval_s=10.0)
    device = ModbusDevice(settings, parse_map(EEPROM_MAP, "eeprom.toml"), clock=clock)
    profile = parse_profile(FAST_RAMP, "fast.toml", max_c=1100.0)
    sink = Events()
    limits = Limits()
    async with device:
        engine = RunEngine(device, profile, RunSettings(KilnInfo("EEPROM oven", "C", 1100.0),
                                                        limits),
                           sinks=[sink], safety=SafetyWiring(watchdog_s=None))
        clock.engine = engine
        outcome = await engine.run()
        guard = device.guard
    messages = [e.message for e in sink.events]
    assert outcome == st.COMPLETED, messages
    # The controller's own setpoint register rose to the ramp's target ...
    assert clock.highest_setpoint_c == pytest.approx(150.0, abs=0.5)
    # ... and the oven heated with it (the hold needs the band: 8 °C by default).
    hold_start = next(e for e in sink.events if e.kind == ev.STEP_STATE
                      and e.detail.get("index") == 1 and e.detail.get("state") == st.HOLDING)
    assert hold_start is not None
    # A sound controller is re-armed at most once (here: never).
    assert engine.rearms <= 1, messages
    assert not [m for m in messages if "re-armed" in m or "rebooted" in m]
    # The guard still spaced the EEPROM writes: a 13-minute ramp at most one write per
    # 10 s interval, plus the first write and the stop at the end.
    ramp_s = (150.0 - 20.0) / (600.0 / 3600.0)
    assert guard.writes <= ramp_s / 10.0 + 3
    assert guard.held_back > 0  # the guard did hold writes back: the case under test


async def test_a_held_back_write_is_not_reported_as_written(controller) -> None:
    wire, server = controller
    clock = OvenClock(server)
    settings = ModbusSettings(port=wire.link_path, timeout_s=0.5, retries=1,
                              setpoint_min_interval_s=10.0)
    device = ModbusDevice(settings, parse_map(EEPROM_MAP, "eeprom.toml"), clock=clock)
    async with device:
        assert device.written_setpoint_c is None  # nothing written since connecting
        await device.write_setpoint(100.0)
        assert device.written_setpoint_c == pytest.approx(100.0)
        await device.write_setpoint(101.5)  # within the interval: held back
        assert device.written_setpoint_c == pytest.approx(100.0)
        reading = await device.read()
        assert reading.setpoint_c == pytest.approx(100.0)  # the controller agrees
        clock.time += 10.0
        await device.read()  # due now: the driver writes the pending value
        assert device.written_setpoint_c == pytest.approx(101.5)
        assert (await device.read()).setpoint_c == pytest.approx(101.5)


async def test_after_a_stop_the_next_setpoint_is_written_at_once(controller) -> None:
    # A re-arm is a stop and then the setpoint: held back by the interval, the controller
    # would sit at 0 until the next write came due.
    wire, server = controller
    clock = OvenClock(server)
    settings = ModbusSettings(port=wire.link_path, timeout_s=0.5, retries=1,
                              setpoint_min_interval_s=10.0)
    device = ModbusDevice(settings, parse_map(EEPROM_MAP, "eeprom.toml"), clock=clock)
    async with device:
        await device.write_setpoint(300.0)
        await device.stop_heating()
        assert (await device.read()).setpoint_c == pytest.approx(0.0)
        await device.write_setpoint(300.0)
        reading = await device.read()
        assert reading.setpoint_c == pytest.approx(300.0)
        assert reading.running is True


# The map reads the setpoint from a register the controller never changes (a mistake in a
# map, or a controller that shows another setpoint): it never agrees with what was written.
DISAGREEING_MAP = EEPROM_MAP.replace(
    'setpoint = { fc = 3, address = 1,', 'setpoint = { fc = 3, address = 3,')


async def test_a_controller_that_never_agrees_is_not_re_armed_every_few_ticks(controller) -> None:
    wire, server = controller
    clock = OvenClock(server)
    settings = ModbusSettings(port=wire.link_path, timeout_s=0.5, retries=1,
                              setpoint_min_interval_s=10.0)
    device = ModbusDevice(settings, parse_map(DISAGREEING_MAP, "bad.toml"), clock=clock)
    profile = parse_profile(FAST_RAMP, "fast.toml", max_c=1100.0)
    sink = Events()
    async with device:
        engine = RunEngine(device, profile, oven_settings(kiln=KilnInfo("Odd oven", "C", 1100.0)),
                           sinks=[sink], safety=SafetyWiring(watchdog_s=None))
        clock.engine = engine
        outcome = await engine.run()
    assert outcome == st.COMPLETED, [e.message for e in sink.events]
    # About 15 minutes of run: re-arms 60, 120, 240, 480 s apart leave room for five at most
    # (every third tick would be about 300).
    assert 1 <= engine.rearms <= 5
    assert clock.highest_setpoint_c == pytest.approx(150.0, abs=0.5)
