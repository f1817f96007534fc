"""A small Modbus RTU responder for the simulated controller, in one of its layouts.

Modbus Application Protocol v1.1b3 and Modbus over Serial Line v1.02 (modbus.org): an RTU
frame is address, function code, data, CRC-16 (polynomial 0xA001 reflected, initial 0xFFFF,
low byte first). Supported: 1 (read coils), 2 (read discrete inputs), 3 (read holding
registers), 4 (read input registers), 5 (write single coil: 0xFF00 on, 0x0000 off),
6 (write single register), 15 (write multiple coils), 16 (write multiple registers);
anything else gets exception 1 (illegal function). Where the values live is the layout's
business (simulator/layouts.py). A request to another address is ignored; address 0
(broadcast) writes without answering.

Written by hand rather than with pymodbus's server so faults can act on the wire itself: a
dropped link swallows requests, line noise corrupts replies, and the reply waits for the
time the bytes would take on a real line at the configured baud rate.
"""

from __future__ import annotations

import random

from tuikiln.simulator.kiln import RegisterError, SimulatedKiln
from tuikiln.simulator.layouts import COILS, DISCRETE, HOLDING, INPUT, Layout

READ_COILS = 1
READ_DISCRETE = 2
READ_HOLDING = 3
READ_INPUT = 4
WRITE_COIL = 5
WRITE_SINGLE = 6
WRITE_COILS = 15
WRITE_MULTIPLE = 16
MAX_READ = 125
MAX_READ_BITS = 2000  # Modbus Application Protocol v1.1b3, 6.1 and 6.2: 1 to 2000 bits
MAX_WRITE_BITS = 1968  # ... 6.11: 1 to 1968 coils
READ_TABLES = {READ_COILS: COILS, READ_DISCRETE: DISCRETE, READ_HOLDING: HOLDING,
               READ_INPUT: INPUT}


def crc16(data: bytes) -> int:
    """Modbus CRC-16 of `data` (send low byte first)."""
    crc = 0xFFFF
    for byte in data:
        crc ^= byte
        for _ in range(8):
            crc = (crc >> 1) ^ 0xA001 if crc & 1 else crc >> 1
    return crc


def with_crc(frame: bytes) -> bytes:
    return frame + crc16(frame).to_bytes(2, "little")


def crc_ok(frame: bytes) -> bool:
    return len(frame) >= 4 and crc16(frame[:-2]) == int.from_bytes(frame[-2:], "little")


def wire_seconds(n_bytes: int, baud: int) -> float:
    """Time n bytes take on an 8N1 line (start + 8 data + stop = 10 bits each)."""
    return n_bytes * 10.0 / baud


def expected_length(buffer: bytes) -> int | None:
    """Length of the request frame at the start of `buffer`, None if not known yet."""
    if len(buffer) < 2:
        return None
    function = buffer[1]
    if function in (READ_HOLDING, WRITE_SINGLE, 1, 2, 4, 5):
        return 8
    if function in (WRITE_MULTIPLE, 15):
        return 9 + buffer[6] if len(buffer) >= 7 else None
    return None


class RtuResponder:
    """Turns request frames into reply frames for one `SimulatedKiln`."""

    def __init__(self, kiln: SimulatedKiln, address: int = 1, baud: int = 9600,
                 rng: random.Random | None = None, layout: Layout | None = None) -> None:
        self.kiln = kiln
        self.layout = layout or Layout()
        self.address = address
        self.baud = baud
        self.rng = rng or random.Random(kiln.config.seed + 1)
        self.requests = 0
        self.replies = 0

    def split_frames(self, buffer: bytearray, flush: bool = False) -> list[bytes]:
        """Take whole request frames off the front of `buffer`.

        Bytes that cannot start a good frame are dropped one at a time until a frame with a
        good CRC lines up (a receiver resynchronising after noise). With `flush` (the line
        has been quiet), whatever is left is tried as one frame of unknown function.
        """
        frames: list[bytes] = []
        while buffer:
            length = expected_length(bytes(buffer[:7]))
            if length is None:
                if flush and len(buffer) >= 4:
                    frames.append(bytes(buffer))
                    buffer.clear()
                elif flush:
                    buffer.clear()
                break
            if len(buffer) < length:
                if flush:
                    del buffer[0]
                    continue
                break
            frame = bytes(buffer[:length])
            if crc_ok(frame):
                frames.append(frame)
                del buffer[:length]
            else:
                del buffer[0]
        return frames

    def reply(self, frame: bytes) -> bytes | None:
        """The bytes to send back for one request (None: stay silent), faults applied."""
        if not crc_ok(frame):
            return None  # a real slave ignores a frame with a bad CRC
        address = frame[0]
        if address not in (0, self.address):
            return None
        if not self.kiln.line_answers:
            return None
        self.requests += 1
        answer = self._answer(frame[1:-2])
        if address == 0:
            return None
        out = with_crc(bytes([self.address]) + answer)
        share = self.kiln.line_noise_share
        if share > 0.0 and self.rng.random() < share:
            out = self._garble(out)
        self.replies += 1
        return out

    def _garble(self, frame: bytes) -> bytes:
        # Flip a few bits and sometimes lose or add a byte, as noise on an RS-485 pair does.
        data = bytearray(frame)
        for _ in range(self.rng.randint(1, 3)):
            data[self.rng.randrange(len(data))] ^= 1 << self.rng.randrange(8)
        roll = self.rng.random()
        if roll < 0.2 and len(data) > 3:
            del data[self.rng.randrange(len(data))]
        elif roll < 0.4:
            data.insert(self.rng.randrange(len(data) + 1), self.rng.randrange(256))
        if crc_ok(bytes(data)):  # the flips happened to keep the CRC good: break it
            data[-1] ^= 0xFF
        return bytes(data)

    def _answer(self, pdu: bytes) -> bytes:
        function = pdu[0]
        try:
            if function in READ_TABLES and len(pdu) == 5:
                return self._read(function, int.from_bytes(pdu[1:3], "big"),
                                  int.from_bytes(pdu[3:5], "big"))
            if function == WRITE_COIL and len(pdu) == 5:
                address, value = int.from_bytes(pdu[1:3], "big"), int.from_bytes(pdu[3:5], "big")
                if value not in (0xFF00, 0x0000):
                    return _exception(function, 3)
                self._write(COILS, address, [1 if value else 0])
                return pdu
            if function == WRITE_SINGLE and len(pdu) == 5:
                address = int.from_bytes(pdu[1:3], "big")
                self._write(HOLDING, address, [int.from_bytes(pdu[3:5], "big")])
                return pdu
            if function == WRITE_COILS and len(pdu) >= 6:
                start = int.from_bytes(pdu[1:3], "big")
                count = int.from_bytes(pdu[3:5], "big")
                size = (count + 7) // 8
                if not 1 <= count <= MAX_WRITE_BITS or pdu[5] != size or len(pdu) != 6 + size:
                    return _exception(function, 3)
                bits = [pdu[6 + i // 8] >> (i % 8) & 1 for i in range(count)]
                self._write(COILS, start, bits)
                return pdu[:5]
            if function == WRITE_MULTIPLE and len(pdu) >= 6:
                start = int.from_bytes(pdu[1:3], "big")
                count = int.from_bytes(pdu[3:5], "big")
                if not 1 <= count <= 123 or pdu[5] != 2 * count or len(pdu) != 6 + 2 * count:
                    return _exception(function, 3)
                values = [int.from_bytes(pdu[6 + 2 * i : 8 + 2 * i], "big") for i in range(count)]
                self._write(HOLDING, start, values)
                return pdu[:5]
        except RegisterError as exc:
            return _exception(function, exc.code)
        return _exception(function, 1)

    def _read(self, function: int, start: int, count: int) -> bytes:
        bits = function in (READ_COILS, READ_DISCRETE)
        if not 1 <= count <= (MAX_READ_BITS if bits else MAX_READ):
            return _exception(function, 3)
        table = self.layout.tables(self.kiln)[READ_TABLES[function]]
        if any(start + i not in table for i in range(count)):
            return _exception(function, 2)
        values = [table[start + i] for i in range(count)]
        if bits:  # packed eight to a byte, the first bit in the lowest place
            body = bytes(sum((values[i + j] & 1) << j for j in range(min(8, count - i)))
                         for i in range(0, count, 8))
        else:
            body = b"".join(v.to_bytes(2, "big") for v in values)
        return bytes([function, len(body)]) + body

    def _write(self, table: str, start: int, values: list[int]) -> None:
        self.layout.check_writable(table, start, len(values))
        self.layout.write(self.kiln, table, start, values)

    def reply_delay(self, request: bytes, reply: bytes | None) -> float:
        """Wire time of request and reply at the emulated baud rate."""
        return wire_seconds(len(request) + (len(reply) if reply else 0), self.baud)


def _exception(function: int, code: int) -> bytes:
    return bytes([function | 0x80, code])

