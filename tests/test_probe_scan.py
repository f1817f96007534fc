"""`tuikiln probe --scan`: raw ranges read several times, changes shown, refused addresses
found by halving. Against `tuikiln sim serve --layout ...` (our responder, a separate
process on a real pty) and against pymodbus's server (an independent implementation)."""

from __future__ import annotations

import asyncio
import json
import os
import subprocess
import sys
from pathlib import Path

from pymodbus import FramerType
from pymodbus.client import AsyncModbusSerialClient
from pymodbus.simulator import DataType, SimData, SimDevice

from tests.simserve import ServedSim
from tests.test_drivers_wire import PtyWire, start_serial_server
from tuikiln.commands.probe_scan import ScanRange, ScanResult, report_lines, scan_pass
from tuikiln.drivers.maps import load_map
from tuikiln.drivers.modbus import ModbusDevice, ModbusSettings

ROOT = Path(__file__).resolve().parents[1]


def _probe(kiln: Path, *extra: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "tuikiln", "probe", "--kiln", str(kiln), *extra],
        capture_output=True, text=True, timeout=60, cwd=ROOT,
        env={**os.environ, "PYTHONWARNINGS": "ignore"})


def _kiln(tmp_path: Path, port: str, map_name: str) -> Path:
    kiln = tmp_path / "kiln.toml"
    kiln.write_text(f'name = "scan test"\nmax = 1100\n[device]\nkind = "modbus"\n'
                    f'port = "{port}"\nmap = "{map_name}"\ntimeout = 0.5\n')
    return kiln


async def _start_heating(port: str) -> None:
    """Setpoint 800 °C and the run coil on, with a plain pymodbus client (not our driver)."""
    client = AsyncModbusSerialClient(port, framer=FramerType.RTU, baudrate=9600, timeout=1,
                                     retries=1)
    assert await client.connect()
    try:
        assert not (await client.write_register(256, 800, device_id=1)).isError()
        assert not (await client.write_coil(0, True, device_id=1)).isError()
    finally:
        client.close()


async def test_scan_shows_what_changes_on_a_heating_whole_degree_controller(tmp_path):
    with ServedSim("--pty", "--speed", "120", "--layout", "whole-degree-coil",
                   "--no-load") as served:
        await _start_heating(served.where)
        kiln = _kiln(tmp_path, served.where, "whole-degree-coil")
        done = await asyncio.to_thread(
            _probe, kiln, "--scan", "4:0-7", "--scan", "1:0-3", "--count", "3", "--every",
            "1", "--json")
    assert done.returncode == 0, done.stderr
    inputs, coils = (json.loads(line) for line in done.stdout.splitlines())
    # the layout holds input registers 0-2 (chamber, load, output) and coil 0 (run)
    assert sorted(map(int, inputs["values"])) == [0, 1, 2]
    assert inputs["refused"] == [3, 4, 5, 6, 7]
    assert 0 in inputs["changed"]  # 2 s of wall time = 4 simulated minutes of full heat
    chamber = inputs["values"]["0"]
    assert chamber[-1] > chamber[0]
    assert coils["values"] == {"0": [1, 1, 1]} and coils["changed"] == []
    assert coils["refused"] == [1, 2, 3]


async def test_scan_halves_refused_ranges_against_pymodbus(tmp_path):
    wire = PtyWire(str(tmp_path / "ttySCAN"))
    # holding registers exist at 0-3 and 10-11 only; 4-9 and 12-15 are refused (exception 2)
    device_model = SimDevice(1, simdata=(
        [SimData(0, values=[False] * 8, datatype=DataType.BITS)],
        [SimData(0, values=[False] * 8, datatype=DataType.BITS)],
        [SimData(0, values=[215, 0, 7, 0xFF83], datatype=DataType.REGISTERS),
         SimData(10, values=[1, 2], datatype=DataType.REGISTERS)],
        [SimData(0, values=[0], datatype=DataType.REGISTERS)],
    ))
    server = await start_serial_server(device_model, wire.device_path)
    try:
        device = ModbusDevice(ModbusSettings(port=wire.link_path, timeout_s=0.5, retries=0),
                              load_map("sim"))
        result = ScanResult(ScanRange(3, 0, 15))
        await device.open_link()
        try:
            await scan_pass(device, result)
            await server.async_setValues(1, 3, 0, [230])
            await scan_pass(device, result)
        finally:
            await device.close()
    finally:
        await server.shutdown()
        wire.close()
    assert result.answered() == [0, 1, 2, 3, 10, 11]
    assert result.refused == {4, 5, 6, 7, 8, 9, 12, 13, 14, 15}
    assert result.values_of(0) == [215, 230]
    text = "\n".join(report_lines(result))
    assert "changed: 0" in text and "refused by the controller (no such address): 4-9, 12-15" \
        in text
    assert "-125" in text  # 0xFF83 shown signed too (two's complement)


def test_bad_scan_range_is_one_line_and_exit_1(tmp_path):
    kiln = _kiln(tmp_path, str(tmp_path / "ttyNONE"), "sim")
    for spec, words in (("7:0-3", "function code 7 does not read"),
                        ("3:9-2", "FIRST must not be after"),
                        ("holding", "give FC:FIRST-LAST")):
        done = _probe(kiln, "--scan", spec)
        assert done.returncode == 1, done.stderr
        assert words in done.stderr and "Traceback" not in done.stderr
        assert len([line for line in done.stderr.splitlines() if line.strip()]) == 1, done.stderr
