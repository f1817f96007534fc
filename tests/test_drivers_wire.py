"""Test parts shared by the driver tests: a serial "cable" made of two real pseudo-terminals,
and a small real pymodbus RTU server on it.

    device side  pty A  <-- relay (optional wire time) -->  pty B  host side (a symlink)

The host side is reached through a symlink, like /dev/serial/by-id/... on a real machine,
so a test can "unplug" the cable (close pty B: the driver's port dies with EIO) and "plug it
back" (a new pty B behind the same symlink). A pseudo-terminal ignores the baud rate; the
relay can hold each chunk back for its time on the wire (10 bits per byte, 8N1, plus the
3.5-character silence before a frame) to mimic a real RS-485 link.
"""

from __future__ import annotations

import asyncio
import contextlib
import os
import tty
from collections.abc import Sequence
from dataclasses import dataclass

from pymodbus.framer import FramerType
from pymodbus.server import ModbusSerialServer, ModbusTcpServer
from pymodbus.simulator import DataType, SimData, SimDevice

from tests.waiting import eventually


def _raw_pty() -> tuple[int, int, str]:
    master, slave = os.openpty()
    tty.setraw(slave)
    os.set_blocking(master, False)
    return master, slave, os.ttyname(slave)


@dataclass
class _Direction:
    busy_until: float = 0.0


class PtyWire:
    """Two pseudo-terminals joined by an in-process relay, host side behind `link_path`."""

    def __init__(self, link_path: str, baud: int | None = None) -> None:
        self.link_path = link_path
        self.baud = baud
        self.loop = asyncio.get_running_loop()
        self.dev_master, self.dev_slave, self.device_path = _raw_pty()
        self.host_master = self.host_slave = -1
        self.corrupt_replies = 0
        self.bytes_up = 0
        """Bytes the host has sent towards the device (a test waits on it: request sent)."""
        """How many device->host chunks to damage (one bit flipped: the CRC fails)."""
        self._dirs = {"up": _Direction(), "down": _Direction()}
        self.loop.add_reader(self.dev_master, self._pump, "down")
        self.plug()

    def plug(self) -> None:
        self.host_master, self.host_slave, path = _raw_pty()
        if os.path.lexists(self.link_path):
            os.unlink(self.link_path)
        os.symlink(path, self.link_path)
        self.loop.add_reader(self.host_master, self._pump, "up")

    def unplug(self) -> None:
        """The USB adapter is pulled: the host side's port vanishes."""
        if self.host_master < 0:
            return
        self.loop.remove_reader(self.host_master)
        os.close(self.host_master)
        os.close(self.host_slave)
        self.host_master = self.host_slave = -1
        if os.path.lexists(self.link_path):
            os.unlink(self.link_path)

    def _pump(self, direction: str) -> None:
        src, dst = ((self.host_master, self.dev_master) if direction == "up"
                    else (self.dev_master, self.host_master))
        try:
            data = os.read(src, 4096)
        except OSError:
            return
        if not data or dst < 0:
            return
        if direction == "up":
            self.bytes_up += len(data)
        if direction == "down" and self.corrupt_replies > 0:
            self.corrupt_replies -= 1
            data = bytes([data[0], data[1] ^ 0x04]) + data[2:] if len(data) > 1 else b"\xff"
        if not self.baud:
            self._write(dst, data)
            return
        state = self._dirs[direction]
        now = self.loop.time()
        start = max(now, state.busy_until)
        if now >= state.busy_until:
            # A new frame after a quiet line: RTU frames are separated by at least 3.5
            # character times of silence (Modbus over Serial Line V1.02, s. 2.5.1.1).
            start += 3.5 * 10.0 / self.baud
        state.busy_until = start + len(data) * 10.0 / self.baud
        self.loop.call_at(state.busy_until, self._write, dst, data, direction)

    def _write(self, dst: int, data: bytes, direction: str | None = None) -> None:
        if direction is not None:  # the host side may have been unplugged meanwhile
            dst = self.host_master if direction == "down" else self.dev_master
        if dst < 0:
            return
        try:
            os.write(dst, data)
        except OSError:
            pass

    def close(self) -> None:
        self.unplug()
        self.loop.remove_reader(self.dev_master)
        os.close(self.dev_master)
        os.close(self.dev_slave)


def holding_device(values: Sequence[int], *, device_id: int = 1, inputs: Sequence[int] = ()
                   ) -> SimDevice:
    """A device whose holding registers 0.. hold `values` (and input registers `inputs`)."""
    hr = [SimData(0, values=list(values), datatype=DataType.REGISTERS)]
    ir = [SimData(0, values=list(inputs) or [0], datatype=DataType.REGISTERS)]
    co = [SimData(0, values=[False] * 16, datatype=DataType.BITS)]
    di = [SimData(0, values=[False] * 16, datatype=DataType.BITS)]
    return SimDevice(device_id, simdata=(co, di, hr, ir))


async def start_serial_server(device: SimDevice, port: str) -> ModbusSerialServer:
    server = ModbusSerialServer(device, framer=FramerType.RTU, port=port, baudrate=9600)
    # serve_forever(background=True) returns once listen() has opened the port (pymodbus
    # server/base.py); a request sent before the server reads waits in the pty.
    await server.serve_forever(background=True)
    assert server.transport is not None
    return server


async def start_tcp_server(device: SimDevice, port: int) -> ModbusTcpServer:
    server = ModbusTcpServer(device, framer=FramerType.RTU, address=("127.0.0.1", port))
    await server.serve_forever(background=True)  # returns listening, as above
    assert server.transport is not None
    return server


def free_port() -> int:
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


async def test_wire_carries_bytes_both_ways_with_wire_time(tmp_path) -> None:
    wire = PtyWire(str(tmp_path / "ttyLINK"), baud=9600)
    host = os.open(wire.link_path, os.O_RDWR | os.O_NOCTTY | os.O_NONBLOCK)
    dev = os.open(wire.device_path, os.O_RDWR | os.O_NOCTTY | os.O_NONBLOCK)
    try:
        t0 = asyncio.get_running_loop().time()
        os.write(host, b"x" * 96)  # (96 + 3.5) bytes * 10 bits / 9600 baud = 0.104 s on the wire
        got = b""

        def all_arrived() -> bool:
            nonlocal got
            with contextlib.suppress(BlockingIOError):
                got += os.read(dev, 4096)
            return len(got) >= 96

        await eventually(all_arrived, timeout=5, what="96 bytes through the wire")
        elapsed = asyncio.get_running_loop().time() - t0
        assert got == b"x" * 96
        assert 0.09 <= elapsed < 0.5
    finally:
        os.close(host)
        os.close(dev)
        wire.close()
