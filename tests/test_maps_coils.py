"""Coils and discrete inputs in map files (fc 1/2 read, fc 5/15 write), checked against a
real pymodbus RTU server on real pseudo-terminals.

Function codes and their limits: Modbus Application Protocol Specification V1.1b3
(modbus.org), sections 6.1 (01 Read Coils, 1-2000 bits), 6.2 (02 Read Discrete Inputs),
6.5 (05 Write Single Coil: 0xFF00 on, 0x0000 off) and 6.11 (15 Write Multiple Coils).
"""

from __future__ import annotations

import pytest
from pymodbus.simulator import DataType, SimData, SimDevice

from tests.test_drivers_wire import PtyWire, start_serial_server
from tuikiln.drivers.maps import MapError, parse_map, plan_blocks
from tuikiln.drivers.modbus import ModbusDevice, ModbusSettings

COIL_MAP = """
name = "coil controller"
[read]
chamber = { fc = 4, address = 0, units = "C" }
setpoint = { fc = 3, address = 0, units = "C" }
run = { fc = 1, address = 3, on = 1 }
status = { fc = 2, address = 8, bits = { sensor_fault = 0, door = 2 } }
[write]
setpoint = { fc = 6, address = 0, units = "C", min = 0, max = 1100 }
run = { fc = 5, address = 3, on = 1, off = 0 }
"""


def coil_device(*, coils: list[bool], inputs: list[bool], holding: list[int],
                input_regs: list[int]) -> SimDevice:
    return SimDevice(1, simdata=(
        [SimData(0, values=coils, datatype=DataType.BITS)],
        [SimData(0, values=inputs, datatype=DataType.BITS)],
        [SimData(0, values=holding, datatype=DataType.REGISTERS)],
        [SimData(0, values=input_regs, datatype=DataType.REGISTERS)],
    ))


def settings(port: str) -> ModbusSettings:
    return ModbusSettings(port=port, timeout_s=0.3, retries=0, setpoint_min_interval_s=0.0)


@pytest.fixture
async def rig(tmp_path):
    wire = PtyWire(str(tmp_path / "ttyCOIL"))
    # discrete inputs 8.. = [fault off, -, door on]; input register 0 = 412 °C (whole degrees)
    device = coil_device(coils=[False] * 16, inputs=[False] * 8 + [False, True, True] + [False] * 5,
                         holding=[25] * 8, input_regs=[412] + [0] * 7)
    server = await start_serial_server(device, wire.device_path)
    yield wire, server
    await server.shutdown()
    wire.close()


def test_coil_and_discrete_entries_parse() -> None:
    m = parse_map(COIL_MAP, "coil.toml")
    assert m.reads["run"].is_bit and m.reads["run"].count == 1
    assert m.reads["status"].count == 3  # offsets 0..2 from address 8
    assert m.writes["run"].fc == 5
    # bits and registers never share a request, even at the same address
    blocks = plan_blocks(m.all_reads)
    assert sorted((b.fc, b.address, b.count) for b in blocks) == [
        (1, 3, 1), (2, 8, 3), (3, 0, 1), (4, 0, 1)]


@pytest.mark.parametrize("line, needle", [
    ('chamber = { fc = 1, address = 0, units = "C" }',
     "[read.chamber] units: fc = 1 is a coil or discrete input (one bit)"),
    ('chamber = { fc = 2, address = 0 }', "[read.chamber] fc: chamber is a number"),
    ('status = { fc = 2, address = 0, bits = { a = 0 }, scale = 0.1 }',
     "[read.status] scale: fc = 2 is a coil or discrete input (one bit)"),
    ('run = { fc = 1, address = 0, on = 2 }', "a coil is 0 or 1, not 2"),
    ('run = { fc = 7, address = 0, on = 1 }', "1 (coils), 2 (discrete inputs)"),
])
def test_bad_bit_reads_are_located(line: str, needle: str) -> None:
    text = f'[read]\nchamber = {{ fc = 3, address = 0, units = "C" }}\n{line}\n'
    if line.startswith("chamber"):
        text = f"[read]\n{line}\n"
    with pytest.raises(MapError) as err:
        parse_map(text, "bad.toml")
    message = str(err.value)
    assert needle in message, message
    line_no = 2 if line.startswith("chamber") else 3
    assert f"bad.toml:{line_no}:" in message


@pytest.mark.parametrize("line, needle", [
    ('setpoint = { fc = 5, address = 0, on = 1 }', "[write.setpoint] fc: setpoint is a number"),
    ('run = { fc = 15, address = 0, on = 1 }', "needs both on = ... and off = ..."),
    ('run = { fc = 5, address = 0, on = 255, off = 0 }', "a coil is 0 or 1, not 255"),
])
def test_bad_coil_writes_are_located(line: str, needle: str) -> None:
    text = f'[read]\nchamber = {{ fc = 3, address = 0, units = "C" }}\n[write]\n{line}\n'
    with pytest.raises(MapError) as err:
        parse_map(text, "bad.toml")
    assert needle in str(err.value) and "bad.toml:4:" in str(err.value), str(err.value)


async def test_reads_run_coil_and_discrete_status(rig) -> None:
    wire, server = rig
    await server.async_setValues(1, 5, 3, [True])  # the panel has the run coil on
    device = ModbusDevice(settings(wire.link_path), parse_map(COIL_MAP, "coil.toml"))
    async with device:
        reading = await device.read()
        assert reading.chamber_c == 412.0 and reading.running is True
        assert reading.sensor_fault is False and reading.status == {"door": True}
        await server.async_setValues(1, 5, 3, [False])
        await server.async_setValues(1, 2, 8, [True])  # the controller flags its sensor
        reading = await device.read()
    assert reading.running is False and reading.sensor_fault is True
    assert reading.chamber_c is None  # the controller's own flag voids its reading


@pytest.mark.parametrize("fc", [5, 15])
async def test_start_switches_the_coil_on_and_safe_state_off(rig, fc: int) -> None:
    wire, server = rig
    text = COIL_MAP.replace("run = { fc = 5,", f"run = {{ fc = {fc},")
    device = ModbusDevice(settings(wire.link_path), parse_map(text, "coil.toml"))
    async with device:
        assert (await server.async_getValues(1, 1, 3, 1)) == [False]
        await device.write_setpoint(300.0)
        assert (await server.async_getValues(1, 3, 0, 1)) == [300]
        assert (await server.async_getValues(1, 1, 3, 1)) == [True]
        assert (await device.read()).running is True
        await device.stop_heating()
        assert (await server.async_getValues(1, 3, 0, 1)) == [0]  # the map's min
        assert (await server.async_getValues(1, 1, 3, 1)) == [False]
        # neighbouring coils untouched (a write of several coils wrote only its own)
        assert (await server.async_getValues(1, 1, 0, 8)) == [False] * 8


# ---- the simulator's responder speaks the bit function codes as the spec writes them ----

def _frame(hex_pdu: str) -> bytes:
    from tuikiln.simulator.modbus_rtu import with_crc

    return with_crc(bytes.fromhex("01" + hex_pdu))


def test_responder_bit_functions_by_the_spec_bytes() -> None:
    from tuikiln.simulator.kiln import SimulatedKiln
    from tuikiln.simulator.layouts import WholeDegreeCoil
    from tuikiln.simulator.modbus_rtu import RtuResponder

    kiln = SimulatedKiln()
    responder = RtuResponder(kiln, layout=WholeDegreeCoil())

    def ask(hex_pdu: str) -> str:
        reply = responder.reply(_frame(hex_pdu))
        assert reply is not None
        return reply[1:-2].hex()

    assert ask("01" "0000" "0001") == "01" "01" "00"        # fc 1: coil 0 off, one byte
    # fc 5 (spec 6.5): FF00 = on, echoed; any other value but 0000 is exception 3
    assert ask("05" "0000" "ff00") == "05" "0000" "ff00"
    assert kiln.controller.running is True
    assert ask("01" "0000" "0001") == "01" "01" "01"
    assert ask("05" "0000" "1234") == "85" "03"
    assert ask("05" "0001" "ff00") == "85" "02"              # no coil 1 in this layout
    # fc 15 (spec 6.11): count 1, one byte of bits, LSB first; reply echoes start and count
    assert ask("0f" "0000" "0001" "01" "00") == "0f" "0000" "0001"
    assert kiln.controller.running is False
    assert ask("02" "0000" "0001") == "02" "01" "00"        # fc 2: no sensor fault
    assert ask("02" "0000" "0002") == "82" "02"              # discrete input 1 is not there
    assert ask("04" "0000" "0003")[:4] == "0406"              # fc 4: three input registers
