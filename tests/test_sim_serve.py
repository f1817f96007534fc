"""`tuikiln sim serve` as a real Modbus RTU device: real pty, real TCP, mbpoll and pymodbus."""

from __future__ import annotations

import os
import select
import subprocess
import sys
import time
from collections.abc import Callable
from pathlib import Path

import pytest
from pymodbus import FramerType
from pymodbus.client import AsyncModbusSerialClient, AsyncModbusTcpClient
from pymodbus.exceptions import ModbusException
from pymodbus.framer.rtu import FramerRTU

from tests.simserve import ServedSim
from tests.waiting import eventually, wait_until
from tuikiln.simulator.modbus_rtu import crc16, with_crc

REPO = Path(__file__).resolve().parents[1]
MBPOLL = "/usr/bin/mbpoll"


def test_crc_matches_pymodbus_and_the_spec_example() -> None:
    # Modbus over Serial Line v1.02, 6.2.2 (from memory): the request 01 03 00 00 00 01 is
    # sent with CRC bytes 84 0A; pymodbus's FramerRTU is a second, independent implementation.
    assert with_crc(bytes.fromhex("010300000001"))[-2:] == bytes.fromhex("840a")
    for frame in (b"\x01\x03\x00\x00\x00\x06", b"\x11\x06\x00\x01\x13\x88", bytes(range(40))):
        assert crc16(frame).to_bytes(2, "little") == FramerRTU.compute_CRC(frame).to_bytes(2, "big")


@pytest.fixture
def served(request: pytest.FixtureRequest, served_sim: Callable[..., ServedSim]) -> ServedSim:
    return served_sim(*getattr(request, "param", ("--pty", "--speed", "60")))


def _mbpoll(*args: str) -> str:
    done = subprocess.run([MBPOLL, "-m", "rtu", "-b", "9600", "-P", "none", "-a", "1", *args],
                          capture_output=True, text=True, timeout=10)
    assert done.returncode == 0, done.stdout + done.stderr
    return done.stdout


def _values(output: str) -> dict[int, int]:
    values = {}
    for line in output.splitlines():
        if line.startswith("[") and "]:" in line:
            ref, value = line.split("]:")
            values[int(ref.strip("[ "))] = int(value.split()[0])
    return values


@pytest.mark.skipif(not os.path.exists(MBPOLL), reason="mbpoll is not installed (Debian mbpoll)")
def test_mbpoll_reads_writes_and_the_oven_heats(served: ServedSim) -> None:
    assert served.where.startswith("/dev/")
    first = _values(_mbpoll("-r", "1", "-c", "6", "-1", served.where))
    assert set(first) == {1, 2, 3, 4, 5, 6}
    assert 100 <= first[1] <= 400  # room temperature in tenths of a degree
    assert first[2] == 0 and first[5] == 0 and first[4] & 2 == 0
    assert "Written 1 references" in _mbpoll("-r", "2", served.where, "5000")
    assert "Written 1 references" in _mbpoll("-r", "5", served.where, "1")

    def warmer() -> dict[int, int] | None:
        values = _values(_mbpoll("-r", "1", "-c", "6", "-1", served.where))
        return values if values[1] > first[1] + 150 else None

    # At 60x the oven heats 15 °C in well under two seconds of wall time.
    later = wait_until(warmer, timeout=20, what="the oven to heat 15 °C")
    assert later[2] == 5000 and later[5] == 1 and later[4] & 2
    assert later[3] > 500  # output in tenths of a percent: heating hard
    assert later[1] > first[1] + 150  # more than 15 °C warmer already


async def test_pymodbus_client_over_the_pty(served: ServedSim) -> None:
    client = AsyncModbusSerialClient(served.where, framer=FramerType.RTU, baudrate=9600,
                                     timeout=1, retries=1)
    assert await client.connect()
    try:
        regs = (await client.read_holding_registers(0, count=6, device_id=1)).registers
        assert len(regs) == 6 and regs[5] != 32767
        assert not (await client.write_register(1, 6000, device_id=1)).isError()
        assert (await client.read_holding_registers(1, count=1, device_id=1)).registers == [6000]
        refused = await client.write_register(0, 1, device_id=1)  # the reading is read-only
        assert refused.isError() and refused.exception_code == 2
        # Wire time: 8 + 17 bytes at 9600 baud 8N1 is 26 ms per 6-register read.
        start = time.monotonic()
        for _ in range(8):
            await client.read_holding_registers(0, count=6, device_id=1)
        assert time.monotonic() - start >= 8 * 0.9 * 25 * 10 / 9600
    finally:
        client.close()


@pytest.mark.parametrize("served", [("--tcp", "0", "--speed", "max", "--no-load-tc")],
                         indirect=True)
async def test_pymodbus_client_over_tcp_at_full_speed(served: ServedSim) -> None:
    port = int(served.where.rsplit(":", 1)[1])
    client = AsyncModbusTcpClient("127.0.0.1", port=port, framer=FramerType.RTU, timeout=1,
                                  retries=1)
    assert await client.connect()
    try:
        refused = await client.write_registers(1, [4000, 0, 0, 1], device_id=1)
        assert refused.isError() and refused.exception_code == 2  # 2 and 3 are read-only
        assert (await client.read_holding_registers(1, count=1, device_id=1)).registers == [0]
        assert not (await client.write_registers(1, [4000], device_id=1)).isError()
        assert not (await client.write_registers(4, [1], device_id=1)).isError()
        first = (await client.read_holding_registers(0, count=6, device_id=1)).registers
        assert first[5] == 32767  # no load thermocouple: over-range

        async def holding() -> list[int] | None:
            regs = (await client.read_holding_registers(0, count=6, device_id=1)).registers
            return regs if abs(regs[0] - 4000) < 30 and regs[2] < 1000 else None

        # "max" runs hours per second: the oven soon holds 400 °C with output to spare.
        await eventually(holding, timeout=20, what="the oven to hold 400 °C")
    finally:
        client.close()


@pytest.mark.parametrize("served", [("--pty", "--fault", "link-drop@0+1h")], indirect=True)
async def test_link_drop_on_the_wire(served: ServedSim) -> None:
    client = AsyncModbusSerialClient(served.where, framer=FramerType.RTU, baudrate=9600,
                                     timeout=0.3, retries=0)
    assert await client.connect()
    try:
        with pytest.raises(ModbusException):
            await client.read_holding_registers(0, count=6, device_id=1)
    finally:
        client.close()


@pytest.mark.parametrize("served", [("--pty", "--fault", "line-noise@0", "--seed", "3")],
                         indirect=True)
def test_line_noise_on_the_wire(served: ServedSim) -> None:
    fd = os.open(served.where, os.O_RDWR | os.O_NOCTTY)
    try:
        import tty

        tty.setraw(fd)
        bad = 0
        for _ in range(12):
            os.write(fd, with_crc(bytes([1, 3, 0, 0, 0, 6])))
            reply = b""
            deadline = time.monotonic() + 0.15
            while time.monotonic() < deadline:
                ready, _, _ = select.select([fd], [], [], 0.05)
                if ready:
                    reply += os.read(fd, 256)
                elif reply:
                    break
            if len(reply) < 4 or crc16(reply[:-2]) != int.from_bytes(reply[-2:], "little"):
                bad += 1
        assert 2 <= bad <= 10  # about half garbled by default
    finally:
        os.close(fd)


def test_bad_option_is_a_plain_message() -> None:
    done = subprocess.run(
        [sys.executable, "-m", "tuikiln", "sim", "serve", "--fault", "door@5m"],
        cwd=REPO, capture_output=True, text=True, timeout=20,
    )
    assert done.returncode == 2
    assert 'did you mean "door-open"' in done.stderr and "Traceback" not in done.stderr



def _mbpoll_refused(*args: str) -> str:
    done = subprocess.run([MBPOLL, "-m", "rtu", "-b", "9600", "-P", "none", "-a", "1", *args],
                          capture_output=True, text=True, timeout=10)
    assert done.returncode != 0, done.stdout
    return done.stderr


@pytest.mark.skipif(not os.path.exists(MBPOLL), reason="mbpoll is not installed (Debian mbpoll)")
def test_the_kiln_files_layout_is_served_and_the_command_line_wins(
        served_sim: Callable[..., ServedSim], kiln_file: Callable[..., Path]) -> None:
    """`layout` in [device] picks the registers `sim serve` answers; `--layout` overrides it.
    On whole-degree-coil the temperatures are input registers (fc 4): a holding read (fc 3,
    mbpoll's default table) of reference 1 is refused with exception 2, as the README's
    table says. Exception 2 is "Illegal data address" in the Modbus Application Protocol
    v1.1b3, section 7 (from memory); mbpoll prints libmodbus's words for it."""
    kiln = kiln_file('[device]\nkind = "sim"\nlayout = "whole-degree-coil"\n')
    with served_sim("--pty", "--config", str(kiln)) as sim:
        inputs = _values(_mbpoll("-t", "3", "-r", "1", "-c", "3", "-1", sim.where))
        assert set(inputs) == {1, 2, 3} and 0 < inputs[1] < 60  # whole °C, a cold oven
        assert "Illegal data address" in _mbpoll_refused("-r", "1", "-c", "2", "-1", sim.where)
        assert set(_values(_mbpoll("-r", "257", "-c", "1", "-1", sim.where))) == {257}
        assert _values(_mbpoll("-t", "0", "-r", "1", "-c", "1", "-1", sim.where)) == {1: 0}
    with served_sim("--pty", "--config", str(kiln), "--layout", "sim") as sim:
        assert set(_values(_mbpoll("-r", "1", "-c", "6", "-1", sim.where))) == set(range(1, 7))
        assert "Illegal data address" in _mbpoll_refused("-t", "3", "-r", "1", "-1", sim.where)


# The README's table of what each layout answers ("Your controller"): reads (fc 1-4) at
# each listed address answer; one past either end, and any other table, is exception 2.
LAYOUT_READS = {
    "sim": {3: [range(0, 6)], 4: [], 1: [], 2: []},
    "whole-degree-coil": {3: [range(256, 257)], 4: [range(0, 3)], 1: [range(0, 1)],
                          2: [range(0, 1)]},
    "fahrenheit-float": {3: [range(1000, 1008), range(1100, 1102), range(1110, 1111)],
                         4: [], 1: [], 2: []},
}


@pytest.mark.parametrize("layout", sorted(LAYOUT_READS))
def test_each_layout_answers_the_function_codes_the_readme_lists(layout: str) -> None:
    from tuikiln.simulator.kiln import SimulatedKiln
    from tuikiln.simulator.layouts import LAYOUTS
    from tuikiln.simulator.modbus_rtu import RtuResponder

    responder = RtuResponder(SimulatedKiln(), layout=LAYOUTS[layout]())

    def function_of_reply(fc: int, start: int, count: int = 1) -> int:
        reply = responder.reply(with_crc(bytes([1, fc]) + start.to_bytes(2, "big")
                                         + count.to_bytes(2, "big")))
        assert reply is not None  # never silent: an answer or an exception
        return reply[1] if reply[1] == fc else reply[1] << 8 | reply[2]

    def refused(fc: int) -> int:  # exception 2, illegal data address
        return (fc | 0x80) << 8 | 2

    for fc, blocks in LAYOUT_READS[layout].items():
        for block in blocks:
            assert function_of_reply(fc, block.start, len(block)) == fc, (fc, block)
            assert function_of_reply(fc, block.stop) == refused(fc), (fc, block.stop)
        if not blocks:
            assert function_of_reply(fc, 0) == refused(fc), fc
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    assert f"| `{layout}` |" in readme
