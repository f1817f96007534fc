"""A fault-injecting serial "cable" of our own, between two real pseudo-terminals.

    responder (sim serve, pymodbus, a meter)        driver (tuikiln's Modbus / line driver)
        its pty  <== device fd ==>  FaultRelay  <== host pty master ==>  host pty slave
                                                                         behind `link_path`

The driver opens `link_path`, a symlink (like /dev/serial/by-id/...), so `unplug()` can make
the port vanish (the host pty is closed: the driver's open port fails with EIO, the path is
gone) and `plug()` can bring it back as a new pty behind the same path.

Faults are armed by setting counters; each one counts in `injected` when it really happened:

    garbage_now(n)        n random bytes to the driver, out of the blue (line noise)
    prefix_garbage = k    the next k replies are led by random bytes
    flip_bits = k         the next k replies have one bit flipped (the CRC fails)
    truncate = k          the next k replies lose their second half (a partial frame)
    delay_replies = k     the next k replies are held back `delay_s` seconds (past a timeout)
    silent = True         nothing passes either way until set False (a dead link)
    garbage_to_device(n)  n random bytes to the responder (noise on the request side)
    unplug() / plug()     the port vanishes and comes back

All work happens in loop callbacks (add_reader / call_later): the relay never blocks the
event loop it shares with the driver under test.
"""

from __future__ import annotations

import asyncio
import os
import random
import tty
from collections import Counter


def raw_pty() -> tuple[int, int, str]:
    """A pseudo-terminal in raw mode: (master, slave, slave path)."""
    master, slave = os.openpty()
    tty.setraw(slave)  # no echo, no line editing, no CR/LF translation: bytes pass as they are
    os.set_blocking(master, False)
    return master, slave, os.ttyname(slave)


class FaultRelay:
    """Copies bytes both ways between a responder's port and a driver's port, with faults."""

    def __init__(self, device_path: str, link_path: str, *, seed: int = 0,
                 delay_s: float = 0.5) -> None:
        self.loop = asyncio.get_running_loop()
        self.link_path = link_path
        self.delay_s = delay_s
        self.random = random.Random(seed)
        self.device_fd = os.open(device_path, os.O_RDWR | os.O_NOCTTY | os.O_NONBLOCK)
        try:
            tty.setraw(self.device_fd)
        except OSError:
            pass  # not a tty (a FIFO or socket pair in a test of the relay itself)
        self.host_master = self.host_slave = -1
        self.prefix_garbage = 0
        self.flip_bits = 0
        self.truncate = 0
        self.delay_replies = 0
        self.silent = False
        self.injected: Counter[str] = Counter()
        """What was really done: fault kind -> times."""
        self.passed: Counter[str] = Counter()
        """Chunks copied untouched: "up" (to the responder) and "down" (to the driver)."""
        self.loop.add_reader(self.device_fd, self._down)
        self.plug()

    # ---- the cable ---------------------------------------------------------------

    def plug(self) -> None:
        """A (new) host-side port appears behind `link_path`."""
        if self.host_master >= 0:
            return
        self.host_master, self.host_slave, path = raw_pty()
        if os.path.lexists(self.link_path):
            os.unlink(self.link_path)
        os.symlink(path, self.link_path)
        self.loop.add_reader(self.host_master, self._up)
        if self.injected["unplug"]:
            self.injected["replug"] += 1

    def unplug(self, *, counted: bool = True) -> None:
        """The USB adapter is pulled: the driver's port dies and its path vanishes."""
        if self.host_master < 0:
            return
        self.loop.remove_reader(self.host_master)
        os.close(self.host_master)
        os.close(self.host_slave)
        self.host_master = self.host_slave = -1
        if os.path.lexists(self.link_path):
            os.unlink(self.link_path)
        if counted:
            self.injected["unplug"] += 1

    def close(self) -> None:
        self.unplug(counted=False)
        self.loop.remove_reader(self.device_fd)
        os.close(self.device_fd)

    # ---- faults on command -------------------------------------------------------

    def noise(self, count: int) -> bytes:
        return bytes(self.random.randrange(256) for _ in range(count))

    def garbage_now(self, count: int = 16) -> None:
        """Random bytes to the driver, unasked for."""
        if self._write(self.host_master, self.noise(count)):
            self.injected["garbage"] += 1

    def garbage_to_device(self, count: int = 16) -> None:
        """Random bytes to the responder, as if the request line picked up noise."""
        if self._write(self.device_fd, self.noise(count)):
            self.injected["garbage_to_device"] += 1

    def healthy(self) -> None:
        """Disarm every fault that is still waiting (the cable is good again)."""
        self.prefix_garbage = self.flip_bits = self.truncate = self.delay_replies = 0
        self.silent = False

    # ---- pumps -------------------------------------------------------------------

    @staticmethod
    def _read(fd: int) -> bytes:
        try:
            return os.read(fd, 4096)
        except (BlockingIOError, InterruptedError):
            return b""
        except OSError:
            return b""  # EIO: the other side of that pty is closed right now

    def _write(self, fd: int, data: bytes) -> bool:
        if fd < 0 or not data:
            return False
        try:
            os.write(fd, data)
            return True
        except OSError:
            return False

    def _up(self) -> None:
        """Driver -> responder (requests)."""
        data = self._read(self.host_master)
        if not data:
            return
        if self.silent:
            self.injected["silenced_up"] += 1
            return
        self.passed["up"] += 1
        self._write(self.device_fd, data)

    def _down(self) -> None:
        """Responder -> driver (replies), where most faults strike."""
        data = self._read(self.device_fd)
        if not data:
            return
        if self.silent:
            self.injected["silenced_down"] += 1
            return
        touched = False
        if self.truncate > 0 and len(data) > 1:
            self.truncate -= 1
            data = data[: len(data) // 2]
            self.injected["truncated"] += 1
            touched = True
        if self.flip_bits > 0:
            self.flip_bits -= 1
            index = self.random.randrange(len(data))
            data = data[:index] + bytes([data[index] ^ (1 << self.random.randrange(8))]) + (
                data[index + 1:])
            self.injected["flipped"] += 1
            touched = True
        if self.prefix_garbage > 0:
            self.prefix_garbage -= 1
            data = self.noise(self.random.randrange(1, 12)) + data
            self.injected["prefixed"] += 1
            touched = True
        if self.delay_replies > 0:
            self.delay_replies -= 1
            self.injected["delayed"] += 1
            # looked up when it fires: the host side may have been replugged meanwhile
            self.loop.call_later(self.delay_s, lambda: self._write(self.host_master, data))
            return
        if not touched:
            self.passed["down"] += 1
        self._write(self.host_master, data)
