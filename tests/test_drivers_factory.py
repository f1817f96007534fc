"""Device settings checks, the factory, and the in-process simulator adapter."""

from __future__ import annotations

import time

import pytest

from tuikiln.drivers.errors import BadReply, NoAnswer, SettingsError
from tuikiln.drivers.factory import check_device_settings, open_device
from tuikiln.drivers.lines import LineThermometer
from tuikiln.drivers.modbus import ModbusDevice
from tuikiln.drivers.simdevice import SimulatorDevice


def test_unknown_keys_wrong_types_and_bad_values() -> None:
    problems = dict(check_device_settings({
        "kind": "modbus", "port": "/dev/ttyUSB0", "baud": 9601, "parity": "X",
        "adress": 3, "map": "generic-pid", "timeout": "1s", "stopbits": 3,
    }, "."))
    assert problems[("device", "adress")] == 'unknown key "adress" (did you mean "address"?)'
    assert "did you mean 9600" in problems[("device", "baud")]
    assert '"N", "E", "O"' in problems[("device", "parity")]
    assert "must be a number" in problems[("device", "timeout")]
    assert "from 1 to 2" in problems[("device", "stopbits")]


def test_kind_and_map_problems() -> None:
    problems = check_device_settings({"device": {"kind": "modbud"}}, ".")
    assert problems == [(("device", "kind"),
                         '"kind" must be one of "sim", "modbus", "lines", not \'modbud\' '
                         '(did you mean "modbus"?)')]
    problems = dict(check_device_settings({"kind": "modbus", "port": "tcp://h:1",
                                           "map": "nope"}, "."))
    assert "no such register map" in problems[("device", "map")]


def test_map_file_errors_carry_their_own_file_and_line(tmp_path) -> None:
    (tmp_path / "mine.toml").write_text('[read]\nchamber = { fc = 3, units = "C" }\n')
    problems = check_device_settings(
        {"kind": "modbus", "port": "/dev/ttyUSB0", "map": "mine.toml"}, str(tmp_path))
    assert problems == [(("device", "map"), "register map: mine.toml:2: [read.chamber] "
                         "address: missing: give the register number, e.g. address = 0")]


def test_line_settings_checked() -> None:
    problems = dict(check_device_settings({
        "kind": "lines", "port": "/dev/ttyUSB0", "format": "regex", "pattern": "T=(?P<t>\\S+)",
        "channels": {"chamber": {"field": "x"}, "load": {"field": "t", "unit": "mV"}},
    }, "."))
    assert 'no group named "x"' in problems[("device", "channels", "chamber", "field")]
    assert "needs the type" in problems[("device", "channels", "load", "thermocouple")]
    assert check_device_settings({
        "kind": "lines", "port": "/dev/ttyUSB0", "format": "csv",
        "channels": {"chamber": {"field": 0, "unit": "mV", "thermocouple": "k",
                                 "cold_junction_field": 1}},
    }, ".") == []


def test_sim_settings_use_the_simulators_checker() -> None:
    problems = check_device_settings({"kind": "sim", "heater": 1800}, ".")
    assert problems and problems[0][0] == ("device", "heater")
    assert check_device_settings({}, ".") == []


def test_open_device_builds_each_kind() -> None:
    assert isinstance(open_device({}, "."), SimulatorDevice)
    modbus = open_device({"kind": "modbus", "port": "tcp://127.0.0.1:1502", "map": "generic-pid",
                          "poll": 5}, ".")
    assert isinstance(modbus, ModbusDevice) and modbus.poll_s == 5
    lines = open_device({"kind": "lines", "port": "/dev/ttyUSB0", "format": "json",
                         "channels": {"chamber": {"field": "t"}}}, ".")
    assert isinstance(lines, LineThermometer) and not lines.capabilities.can_write_setpoint
    with pytest.raises(SettingsError) as caught:
        open_device({"kind": "modbus"}, ".")
    assert "port" in str(caught.value)


async def test_simulator_device_clock_and_heating() -> None:
    device = open_device({"kind": "sim"}, ".", speed=0)
    assert isinstance(device, SimulatorDevice) and device.clock.speed is None
    async with device:
        start = device.clock.now()
        first = await device.read()
        await device.write_setpoint(500.0)
        wall = time.monotonic()
        for _ in range(60):
            await device.clock.sleep(60.0)  # an hour of simulated time
        assert time.monotonic() - wall < 5.0
        hot = await device.read()
        assert device.clock.now() - start == pytest.approx(3600.0)
        assert hot.time - first.time == pytest.approx(3600.0)
        assert hot.setpoint_c == 500.0 and hot.running
        # the default oven reaches 1000 °C empty in about an hour (simulator/config.py);
        # within an hour at a 500 °C setpoint it is near the setpoint
        assert hot.chamber_c is not None and abs(hot.chamber_c - 500.0) < 25.0
        assert device.capabilities.has_load_thermocouple and hot.load_c is not None
        await device.stop_heating()
        stopped = await device.read()
        assert stopped.setpoint_c == 0.0 and stopped.running is False


async def test_simulator_speed_sleeps_real_time() -> None:
    device = open_device({"kind": "sim"}, ".", speed=100.0)
    async with device:
        wall = time.monotonic()
        await device.clock.sleep(10.0)  # 10 s at 100x: 0.1 s real
        elapsed = time.monotonic() - wall
    assert 0.08 <= elapsed < 1.0
    assert device.clock.now() - device.clock.start == pytest.approx(10.0)
    assert abs(device.clock.start - time.time()) < 60  # a simulated run is logged today


async def test_simulator_faults_map_to_device_errors() -> None:
    from tuikiln.simulator import SimConfig, SimulatedKiln

    kiln = SimulatedKiln(SimConfig(), seed=0)
    device = SimulatorDevice(kiln, None)
    kiln.inject("link-drop", for_s=30.0)
    with pytest.raises(NoAnswer):
        await device.read()
    await device.clock.sleep(31.0)
    assert (await device.read()).chamber_c is not None
    kiln.inject("line-noise", for_s=100.0, share=1.0)
    with pytest.raises(BadReply):
        await device.read()
    await device.clock.sleep(101.0)
    kiln.inject("tc-open", for_s=30.0)
    reading = await device.read()
    assert reading.sensor_fault and reading.chamber_c is None
