"""The real-controller check: a pymodbus RTU device with a foreign layout on a pty, run
through a fast ramp by the engine with a kiln file pointing at the pty and a shipped map.

The device is pymodbus's own server (an independent Modbus implementation), laid out as
drivers/maps/whole-degree-coil.toml says, with a tiny oven in the test: it heats only while
the run coil is on, so the run can only complete if tuikiln switches the coil on; at the
end the coil must be off again (the safe state).
"""

from __future__ import annotations

import asyncio
import struct

import pytest
from pymodbus.simulator import DataType, SimData, SimDevice

from tests.test_drivers_wire import PtyWire, start_serial_server
from tests.waiting import time_passes
from tuikiln import events as ev
from tuikiln.drivers.factory import open_device
from tuikiln.drivers.maps import load_map
from tuikiln.drivers.modbus import ModbusDevice, ModbusSettings
from tuikiln.engine import states as st
from tuikiln.engine.host import settings_for
from tuikiln.engine.runner import RunEngine
from tuikiln.kiln import parse_kiln
from tuikiln.profile import parse_profile
from tuikiln.runlog import RunLog

ROOM_C = 20.0
FAST_RAMP = """
name = "fast ramp"
units = "C"
[[step]]
ramp = "600/min"
to = 80
[[step]]
hold = "3s"
"""


def whole_degree_device() -> SimDevice:
    """Layout of drivers/maps/whole-degree-coil.toml, everything cold and off."""
    return SimDevice(1, simdata=(
        [SimData(0, values=[False] * 8, datatype=DataType.BITS)],       # coils: 0 run
        [SimData(0, values=[False] * 8, datatype=DataType.BITS)],       # inputs: 0 fault
        [SimData(250, values=[0] * 16, datatype=DataType.REGISTERS)],   # 256 setpoint
        [SimData(0, values=[int(ROOM_C), int(ROOM_C), 0, 0], datatype=DataType.REGISTERS)],
    ))


class TinyOven:
    """Heats at up to 30 °C/s towards the setpoint while the run coil is on; else cools."""

    def __init__(self, server) -> None:
        self.server = server
        self.chamber = ROOM_C
        self.coil_seen_on = False
        self.peak = ROOM_C
        self.stop = asyncio.Event()

    async def run(self) -> None:
        step_s = 0.05
        while not self.stop.is_set():
            coil = (await self.server.async_getValues(1, 1, 0, 1))[0]
            setpoint = (await self.server.async_getValues(1, 3, 256, 1))[0]
            if coil:
                self.coil_seen_on = True
                self.chamber += max(-2.0 * step_s, min(setpoint - self.chamber, 30.0 * step_s))
                output = 100 if setpoint > self.chamber else 0
            else:
                self.chamber -= min(self.chamber - ROOM_C, 2.0 * step_s)
                output = 0
            self.peak = max(self.peak, self.chamber)
            await self.server.async_setValues(1, 4, 0, [round(self.chamber), round(self.chamber),
                                                        output])
            await time_passes(step_s, "the tiny oven's own time step (real time)")


@pytest.fixture
async def rig(tmp_path):
    wire = PtyWire(str(tmp_path / "ttyFOREIGN"))
    server = await start_serial_server(whole_degree_device(), wire.device_path)
    yield wire, server
    await server.shutdown()
    wire.close()


class Events:
    def __init__(self) -> None:
        self.events: list = []

    def event(self, event) -> None:
        self.events.append(event)

    def state(self, state) -> None:
        pass

    def reading(self, sample) -> None:
        pass


async def test_foreign_controller_runs_a_fast_ramp_through_its_run_coil(rig, tmp_path):
    wire, server = rig
    kiln = parse_kiln(
        f'name = "Bench oven"\nunits = "C"\nmax = 1100\n[device]\nkind = "modbus"\n'
        f'port = "{wire.link_path}"\nmap = "whole-degree-coil"\npoll = 0.2\ntimeout = 0.5\n'
        f'setpoint_min_interval = 0.5\n', str(tmp_path / "kiln.toml"))
    profile = parse_profile(FAST_RAMP, "fast.toml", max_c=kiln.max_c)
    device = open_device(kiln.device, kiln.base_dir)
    oven = TinyOven(server)
    oven_task = asyncio.create_task(oven.run())
    sink = Events()
    try:
        async with device:
            assert (await device.read()).running is False  # off until tuikiln starts it
            engine = RunEngine(device, profile, settings_for(kiln, profile, auto_continue=True),
                               runlog=RunLog.in_folder(tmp_path), sinks=[sink])
            outcome = await asyncio.wait_for(engine.run(), 120)
    finally:
        oven.stop.set()
        await oven_task
    assert outcome == st.COMPLETED, [e.kind for e in sink.events]
    # a whole-degree readback of our own setpoint is not "the controller holds another one"
    assert engine.rearms == 0
    assert oven.coil_seen_on  # the coil was switched on, or the oven would never heat
    assert oven.peak >= 78.0  # it heated to the ramp's target (80 °C, within a degree or two)
    assert (await server.async_getValues(1, 1, 0, 1)) == [False]  # safe state: coil off
    assert (await server.async_getValues(1, 3, 256, 1)) == [0]    # and setpoint at the map's min
    ends = [e for e in sink.events if e.kind == ev.RUN_END]
    assert [e.detail["outcome"] for e in ends] == [st.COMPLETED]


def float_device(chamber_f: float, setpoint_f: float, load_f: float) -> SimDevice:
    """Layout of drivers/maps/fahrenheit-float.toml (float32, low word first)."""

    def low_first(value: float) -> list[int]:
        high, low = struct.unpack(">HH", struct.pack(">f", value))
        return [low, high]

    holding = ([0] * 1000 + low_first(chamber_f) + low_first(setpoint_f) + low_first(load_f)
               + [725, 0b100001] + [0] * 120)
    return SimDevice(1, simdata=(
        [SimData(0, values=[False] * 8, datatype=DataType.BITS)],
        [SimData(0, values=[False] * 8, datatype=DataType.BITS)],
        [SimData(0, values=holding, datatype=DataType.REGISTERS)],
        [SimData(0, values=[0] * 8, datatype=DataType.REGISTERS)],
    ))


async def test_fahrenheit_float_map_reads_converts_and_stops(tmp_path):
    wire = PtyWire(str(tmp_path / "ttyF"))
    # 1562 °F = 850 °C and 212 °F = 100 °C by the Fahrenheit scale's definition
    # (°C = (°F - 32) * 5/9); 1472 °F = 800 °C
    server = await start_serial_server(float_device(1562.0, 1472.0, 212.0), wire.device_path)
    try:
        device = ModbusDevice(ModbusSettings(port=wire.link_path, timeout_s=0.5, retries=0),
                              load_map("fahrenheit-float"))
        async with device:
            reading = await device.read()
            assert reading.chamber_c == pytest.approx(850.0)
            assert reading.setpoint_c == pytest.approx(800.0)
            assert reading.load_c == pytest.approx(100.0)
            assert reading.output_pct == pytest.approx(72.5)
            # 0b100001: bit 0 running, bit 5 alarm, bit 3 (sensor fault) clear
            assert reading.running is True and reading.sensor_fault is False
            assert reading.status == {"alarm": True}
            await server.async_setValues(1, 3, 1007, [0b001000])  # sensor fault, stopped
            reading = await device.read()
            assert reading.sensor_fault is True and reading.chamber_c is None
            assert reading.running is False
            await device.write_setpoint(500.0)  # 932 °F
            words = await server.async_getValues(1, 3, 1100, 2)
            assert struct.unpack(">f", struct.pack(">HH", words[1], words[0]))[0] == 932.0
            assert (await server.async_getValues(1, 3, 1110, 1)) == [2]  # mode: run
            await device.stop_heating()
            words = await server.async_getValues(1, 3, 1100, 2)
            assert struct.unpack(">f", struct.pack(">HH", words[1], words[0]))[0] == 32.0
            assert (await server.async_getValues(1, 3, 1110, 1)) == [1]  # mode: standby
    finally:
        await server.shutdown()
        wire.close()


# ---- the simulator's personalities, each read through its shipped map -----------------

@pytest.mark.parametrize("layout", ["sim", "whole-degree-coil", "fahrenheit-float"])
async def test_sim_serve_layouts_heat_through_their_maps(layout: str) -> None:
    from tests.simserve import ServedSim

    with ServedSim("--pty", "--speed", "60", "--layout", layout, "--no-load") as served:
        device = ModbusDevice(ModbusSettings(port=served.where, timeout_s=1.0, retries=1,
                                             setpoint_min_interval_s=0.0), load_map(layout))
        async with device:
            first = await device.read()
            # room 20 °C by default; a whole-degree layout rounds it
            assert first.chamber_c == pytest.approx(20.0, abs=2.0)
            assert first.running is False  # every layout powers up stopped
            await device.write_setpoint(400.0)
            reading = await device.read()
            assert reading.running is True
            assert reading.setpoint_c == pytest.approx(400.0, abs=0.5)
            loop = asyncio.get_running_loop()
            deadline = loop.time() + 30.0
            while reading.chamber_c is not None and reading.chamber_c < first.chamber_c + 20:
                assert loop.time() < deadline, f"{layout}: no heat, {reading}"
                reading = await device.read()
            await device.stop_heating()
            stopped = await device.read()
        assert stopped.running is False
        assert stopped.setpoint_c == pytest.approx(0.0, abs=0.5)


def test_readme_worked_examples_are_the_shipped_maps() -> None:
    import tomllib
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    text = (root / "README.md").read_text(encoding="utf-8")
    section = text.split("## Your controller", 1)[1].split("\n## ", 1)[0]
    blocks = [part.split("```", 1)[0] for part in section.split("```toml")[1:]]
    shown = [tomllib.loads(block) for block in blocks]
    for name, example in zip(("whole-degree-coil", "fahrenheit-float"), shown, strict=True):
        shipped = tomllib.loads((root / "drivers" / "maps" / f"{name}.toml").read_text())
        assert example == {"read": shipped["read"], "write": shipped["write"]}, name
