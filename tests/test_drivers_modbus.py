"""The generic Modbus driver against a real pymodbus RTU server on real pseudo-terminals
(and over TCP with RTU framing), writes checked by an independent master (Debian mbpoll)."""

from __future__ import annotations

import asyncio
import shutil
import struct

import pytest

from tests.test_drivers_wire import (
    PtyWire,
    free_port,
    holding_device,
    start_serial_server,
    start_tcp_server,
)
from tests.waiting import eventually, time_passes
from tuikiln.drivers.base import Reading
from tuikiln.drivers.errors import BadReply, LinkLost, NoAnswer, SettingsError
from tuikiln.drivers.maps import parse_map
from tuikiln.drivers.modbus import ModbusDevice, ModbusSettings

# Raw words the test server holds, and what they mean under TEST_MAP.
#   0: chamber  8523 *0.1 = 852.3 °C        1: setpoint 8500 -> 850.0 °C
#   2: output   456 *0.1 = 45.6 %           3: status bits 0b10 -> running, no fault
#   4: run      1                           5: load -12.5 °C as int16 (-125 = 0xFF83)
#   6-7: float32 1562.0 °F big word order (high word first) = 850.0 °C
#   8-9: float32 21.5 °C little word order (low word first)
#   10: uint16 65000 (no sign) -> 6500.0 scaled 0.1 as a "channel" in C
FLOAT_F_BIG = struct.unpack(">HH", struct.pack(">f", 1562.0))
FLOAT_C_LITTLE = tuple(reversed(struct.unpack(">HH", struct.pack(">f", 21.5))))
REGISTERS = [8523, 8500, 456, 0b10, 1, 0xFF83, *FLOAT_F_BIG, *FLOAT_C_LITTLE, 65000, 0, 0, 0]

TEST_MAP = """
name = "test controller"
[read]
chamber = { fc = 3, address = 0, scale = 0.1, signed = true, units = "C", open = [32767] }
setpoint = { fc = 3, address = 1, scale = 0.1, signed = true, units = "C" }
output = { fc = 3, address = 2, scale = 0.1 }
status = { fc = 3, address = 3, bits = { sensor_fault = 0, running = 1, alarm = 2 } }
run = { fc = 3, address = 4, on = 1 }
load = { fc = 3, address = 5, decimals = 1, signed = true, units = "C", open = [32767] }
[read.channels]
roof = { fc = 3, address = 6, type = "float32", word_order = "big", units = "F" }
door = { fc = 3, address = 8, type = "float32", word_order = "little", units = "C" }
wide = { fc = 3, address = 10, scale = 0.1, units = "C" }
[write]
setpoint = { fc = 6, address = 1, scale = 0.1, signed = true, units = "C", min = 0, max = 1200 }
run = { fc = 6, address = 4, on = 1, off = 0 }
"""


def settings(port: str, **kw: object) -> ModbusSettings:
    base: dict[str, object] = dict(port=port, timeout_s=0.3, retries=0,
                                   reconnect_min_s=0.05, reconnect_max_s=0.2)
    base.update(kw)
    return ModbusSettings(**base)  # type: ignore[arg-type]


@pytest.fixture
async def rig(tmp_path):
    wire = PtyWire(str(tmp_path / "ttyKILN"))
    server = await start_serial_server(holding_device(REGISTERS), wire.device_path)
    yield wire, server
    await server.shutdown()
    wire.close()


async def test_reads_scale_sign_float_word_order_and_bits(rig) -> None:
    wire, _ = rig
    device = ModbusDevice(settings(wire.link_path), parse_map(TEST_MAP, "test.toml"))
    async with device:
        reading = await device.read()
    assert reading.chamber_c == pytest.approx(852.3)
    assert reading.setpoint_c == pytest.approx(850.0)
    assert reading.output_pct == pytest.approx(45.6)
    assert reading.load_c == pytest.approx(-12.5)  # two's complement int16
    assert reading.running is True and reading.sensor_fault is False
    assert reading.status == {"alarm": False}
    # (1562 °F - 32) * 5/9 = 850 °C exactly (the Fahrenheit definition, ITS-90 °C)
    assert reading.channels["roof"] == pytest.approx(850.0, abs=1e-4)
    assert reading.channels["door"] == pytest.approx(21.5)
    assert reading.channels["wide"] == pytest.approx(6500.0)  # unsigned: no wrap to negative
    # registers 0..10 are contiguous: one request per poll
    assert len(device.blocks) == 1 and device.blocks[0].count == 11


async def test_open_thermocouple_value_means_sensor_fault(rig) -> None:
    wire, server = rig
    await server.async_setValues(1, 3, 0, [32767])
    device = ModbusDevice(settings(wire.link_path), parse_map(TEST_MAP, "test.toml"))
    async with device:
        reading = await device.read()
        assert reading.chamber_c is None and reading.sensor_fault is True
        await server.async_setValues(1, 3, 0, [8000, 8000, 0, 0b01])  # flag bit, value fine
        reading = await device.read()
        assert reading.sensor_fault is True and reading.chamber_c is None
        assert reading.running is False


async def _mbpoll(port: str, address: int, count: int) -> list[int]:
    proc = await asyncio.create_subprocess_exec(
        "mbpoll", "-m", "rtu", "-b", "9600", "-P", "none", "-a", "1", "-0",
        "-r", str(address), "-c", str(count), "-1", "-o", "1", port,
        stdout=asyncio.subprocess.PIPE, stderr=asyncio.subprocess.PIPE,
    )
    try:
        out, err = await asyncio.wait_for(proc.communicate(), 10)
    finally:
        if proc.returncode is None:
            proc.kill()
            await proc.wait()
    values = []
    for line in out.decode().splitlines():
        if line.startswith("[") and "]:" in line:
            values.append(int(line.split("]:")[1].split()[0]))
    assert values, (out, err)
    return values


@pytest.mark.skipif(shutil.which("mbpoll") is None, reason="Debian mbpoll not installed")
async def test_writes_seen_by_an_independent_master(rig) -> None:
    wire, _ = rig
    device = ModbusDevice(settings(wire.link_path), parse_map(TEST_MAP, "test.toml"))
    async with device:
        await device.write_setpoint(-5.0)  # below the map's min = 0: clamped
        await device.write_setpoint(500.0)  # the first after the safe value: written at once
        assert device.guard.pending_c is None
        await device.write_setpoint(912.34)  # held back by the guard's interval
        assert device.guard.pending_c == pytest.approx(912.34)
    device = ModbusDevice(settings(wire.link_path, setpoint_min_interval_s=0.0),
                          parse_map(TEST_MAP, "test.toml"))
    async with device:
        await device.write_setpoint(912.34)
    # 912.34 °C at scale 0.1 is 9123 in the register (rounded to the controller's step)
    assert await _mbpoll(wire.link_path, 1, 1) == [9123]
    async with device:
        await device.stop_heating()
    assert await _mbpoll(wire.link_path, 1, 4) == [0, 456, 0b10, 0]  # setpoint 0, run off


async def test_slow_ramp_through_the_driver_writes_rarely_and_stop_at_once(rig) -> None:
    from tuikiln.drivers.fake import ManualClock

    wire, server = rig
    clock = ManualClock()
    device = ModbusDevice(settings(wire.link_path), parse_map(TEST_MAP, "test.toml"), clock)
    async with device:
        writes_before = device.guard.writes
        for _ in range(60):  # a 1 °C/h ramp, polled every 2 s for 2 minutes
            clock.advance(2.0)
            await device.write_setpoint(800.0 + clock.now() / 3600.0)
            await device.read()
        # 2 min at 1 °C/h moves 0.033 °C, under the 0.1 °C step: only the first write
        assert device.guard.writes - writes_before == 1
        clock.advance(0.5)
        await device.stop_heating()
        reading = await device.read()
    assert reading.setpoint_c == 0.0
    assert (await server.async_getValues(1, 3, 4, 1))[0] == 0  # run register off


async def test_silent_device_is_no_answer_with_a_hint(tmp_path) -> None:
    wire = PtyWire(str(tmp_path / "ttyQUIET"))  # nothing on the other end
    try:
        device = ModbusDevice(settings(wire.link_path), parse_map(TEST_MAP, "test.toml"))
        with pytest.raises(NoAnswer) as caught:
            await device.connect()
        assert "A/B" in caught.value.hint and "baud" in caught.value.hint
        await device.close()
    finally:
        wire.close()


async def test_missing_port_is_a_settings_error(tmp_path) -> None:
    device = ModbusDevice(settings(str(tmp_path / "ttyNONE")), parse_map(TEST_MAP, "t.toml"))
    with pytest.raises(SettingsError) as caught:
        await device.connect()
    assert "no serial port" in str(caught.value)


async def test_unplug_mid_poll_reports_link_lost_then_recovers_by_itself(tmp_path) -> None:
    # 1200 baud: the 11-register reply takes about 0.25 s on the wire, time to pull the plug
    wire = PtyWire(str(tmp_path / "ttyUSBLIKE"), baud=1200)
    server = await start_serial_server(holding_device(REGISTERS), wire.device_path)
    device = ModbusDevice(settings(wire.link_path, timeout_s=0.6),
                          parse_map(TEST_MAP, "test.toml"))
    ticks = 0

    async def ticker() -> None:  # proves the event loop keeps running meanwhile
        nonlocal ticks
        while True:
            ticks += 1
            await time_passes(0.01, "a ticker's period: it counts while the loop runs")

    task = asyncio.create_task(ticker())
    try:
        async with device:
            sent = wire.bytes_up
            in_flight = asyncio.create_task(device.read())
            await eventually(lambda: wire.bytes_up > sent, what="the request on the wire")
            wire.unplug()
            with pytest.raises(LinkLost):
                await in_flight
            with pytest.raises(LinkLost):
                await device.read()  # still unplugged: says so without waiting
            wire.plug()

            async def answered() -> Reading | None:
                try:
                    return await device.read()
                except (LinkLost, NoAnswer):
                    return None

            reading = await eventually(answered, what="a reading once plugged in again")
            assert reading.chamber_c == pytest.approx(852.3)
            assert device.reconnects == 1
    finally:
        task.cancel()
        await server.shutdown()
        wire.close()
    assert ticks > 20


async def test_damaged_replies_are_counted_and_survived(rig) -> None:
    wire, _ = rig
    device = ModbusDevice(settings(wire.link_path), parse_map(TEST_MAP, "test.toml"))
    async with device:
        wire.corrupt_replies = 2
        for _ in range(2):
            with pytest.raises(BadReply) as caught:
                await device.read()
            assert "damaged" in str(caught.value) and "parity" in caught.value.hint
        assert device.garbled == 2
        assert (await device.read()).chamber_c == pytest.approx(852.3)


async def test_rtu_over_tcp(tmp_path) -> None:
    port = free_port()
    server = await start_tcp_server(holding_device(REGISTERS), port)
    try:
        device = ModbusDevice(settings(f"tcp://127.0.0.1:{port}", setpoint_min_interval_s=0),
                              parse_map(TEST_MAP, "test.toml"))
        async with device:
            assert (await device.read()).chamber_c == pytest.approx(852.3)
            await device.write_setpoint(700.0)
            assert (await device.read()).setpoint_c == pytest.approx(700.0)
    finally:
        await server.shutdown()


async def test_tcp_refused_is_link_lost() -> None:
    device = ModbusDevice(settings(f"tcp://127.0.0.1:{free_port()}"),
                          parse_map(TEST_MAP, "test.toml"))
    with pytest.raises(LinkLost):
        await device.connect()
    await device.close()


def test_ram_setpoint_register_is_preferred_and_not_rate_limited() -> None:
    text = TEST_MAP.replace(
        "[write]\n", '[write]\nram_setpoint = { fc = 16, address = 20, type = "float32", '
        'units = "C" }\n')
    device = ModbusDevice(settings("/dev/null"), parse_map(text, "test.toml"))
    # RAM does not wear out (the EEPROM guard interval is for the EEPROM setpoint)
    assert device.guard.min_interval_s == 0.0
    assert device.capabilities.setpoint_resolution_c == pytest.approx(0.01)
    assert device.guard.request(850.0, 0.0)
