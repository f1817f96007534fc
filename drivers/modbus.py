"""A generic Modbus RTU temperature controller, on a serial port or RTU-over-TCP.

What the registers mean comes from a map file (drivers/maps.py); this module only moves
words. pymodbus errors are translated at the boundary:

    port missing / no permission      -> SettingsError (before any exchange)
    port vanished, connection refused -> LinkLost (reopened with backoff on later polls)
    no bytes back in time             -> NoAnswer
    bytes back but no valid frame     -> BadReply (CRC, garbled; counted in `garbled`)
    a Modbus exception response       -> BadReply

`tcp://HOST:PORT` talks RTU frames over a TCP socket, as serial-to-network adapters do.
"""

from __future__ import annotations

import asyncio
import errno
from dataclasses import dataclass
from typing import Any

from pymodbus.client import AsyncModbusSerialClient, AsyncModbusTcpClient
from pymodbus.exceptions import ConnectionException, ModbusException, ModbusIOException
from pymodbus.framer import FramerType

from tuikiln.drivers.base import Capabilities, Clock, Device, Reading, WallClock
from tuikiln.drivers.errors import BadReply, LinkLost, NoAnswer, NotSupported, SettingsError
from tuikiln.drivers.guard import DEFAULT_MIN_INTERVAL_S, SetpointGuard
from tuikiln.drivers.maps import Register, RegisterMap
from tuikiln.drivers.serialport import port_problem

# pymodbus logs every timeout at ERROR level; our errors already say it in plain words.
# The command line keeps libraries' lines out of sight below --log-level debug
# (tuikiln/logsetup.py); a program using this driver alone decides for itself.

NO_ANSWER_HINT = (
    "check the controller's Modbus address, baud rate and parity match the kiln file, "
    "that its serial protocol is set to Modbus RTU, and the RS-485 wiring "
    "(A/B or D+/D- swapped is common; try swapping them)"
)
GARBLED_HINT = (
    "replies arrive but are damaged: check baud rate, parity and stop bits, the cable "
    "shield and RS-485 termination"
)


@dataclass(frozen=True)
class ModbusSettings:
    port: str
    baud: int = 9600
    parity: str = "N"
    stopbits: int = 1
    bytesize: int = 8
    address: int = 1
    poll_s: float = 2.0
    timeout_s: float = 1.0
    retries: int = 2
    setpoint_min_interval_s: float = DEFAULT_MIN_INTERVAL_S
    reconnect_min_s: float = 0.5
    reconnect_max_s: float = 30.0


def parse_tcp(port: str) -> tuple[str, int] | None:
    """`tcp://HOST:PORT` -> (host, port); None when it is not a tcp:// address."""
    if not port.startswith("tcp://"):
        return None
    host, sep, number = port[len("tcp://"):].rpartition(":")
    if not sep or not host or not number.isdigit() or not 0 < int(number) < 65536:
        raise ValueError(f'"{port}" is not a network address such as "tcp://192.0.2.10:502"')
    return host.strip("[]"), int(number)


class ModbusDevice(Device):
    def __init__(
        self, settings: ModbusSettings, register_map: RegisterMap, clock: Clock | None = None
    ) -> None:
        self.settings = settings
        self.map = register_map
        self.clock = clock or WallClock()
        self.blocks = register_map.blocks()
        setpoint_reg = register_map.writes.get("setpoint")
        ram_reg = register_map.writes.get("ram_setpoint")
        self._setpoint_reg = ram_reg or setpoint_reg
        resolution = self._setpoint_reg.resolution_c if self._setpoint_reg else 0.1
        # A RAM setpoint does not wear out, so only resolution limits its writes.
        interval = 0.0 if ram_reg is not None else settings.setpoint_min_interval_s
        self.guard = SetpointGuard(resolution_c=resolution, min_interval_s=interval,
                                   safe_c=register_map.safe_setpoint_c)
        self.capabilities = Capabilities(
            can_write_setpoint=self._setpoint_reg is not None,
            can_stop_heating=self._setpoint_reg is not None or "run" in register_map.writes,
            has_load_thermocouple="load" in register_map.reads,
            has_output="output" in register_map.reads,
            setpoint_resolution_c=resolution,
        )
        self.description = (f"Modbus device {settings.address} on {settings.port}, "
                            f'map "{register_map.name}"')
        self._client: AsyncModbusSerialClient | AsyncModbusTcpClient | None = None
        self._lost = False
        self._next_attempt = 0.0
        self._backoff = settings.reconnect_min_s
        self._rx_seen = False
        # Whether we have switched the controller's control output on since connecting
        # (or since our own stop). Only our own writes count: if a person stops the
        # controller at its panel, tuikiln does not start it again at the next ramp step.
        self._run_on_written = False
        self.requests = 0
        self.garbled = 0
        self.reconnects = 0

    # ---- connection --------------------------------------------------------------

    def _make_client(self) -> AsyncModbusSerialClient | AsyncModbusTcpClient:
        s = self.settings
        common: dict[str, Any] = dict(
            timeout=s.timeout_s, retries=s.retries, reconnect_delay=0,
            trace_packet=self._trace_packet,
        )
        tcp = parse_tcp(s.port)
        if tcp is not None:
            return AsyncModbusTcpClient(tcp[0], port=tcp[1], framer=FramerType.RTU, **common)
        return AsyncModbusSerialClient(
            s.port, framer=FramerType.RTU, baudrate=s.baud, parity=s.parity,
            stopbits=s.stopbits, bytesize=s.bytesize, **common,
        )

    def _trace_packet(self, sending: bool, data: bytes) -> bytes:
        if not sending and data:
            self._rx_seen = True
        return data

    async def _open(self) -> None:
        if parse_tcp(self.settings.port) is None:
            problem = port_problem(self.settings.port)
            if problem is not None:
                raise problem
        client = self._make_client()
        try:
            ok = await client.connect()
        except OSError as exc:
            client.close()
            raise self._os_error(exc) from exc
        if not ok:
            client.close()
            if parse_tcp(self.settings.port) is None:
                problem = port_problem(self.settings.port)
                if problem is not None:
                    raise problem
            raise LinkLost(f"cannot open {self.settings.port}",
                           hint="check the cable or the network adapter is plugged in and on")
        self._client = client
        self._lost = False
        self._backoff = self.settings.reconnect_min_s

    def _os_error(self, exc: OSError) -> SettingsError | LinkLost:
        if exc.errno in (errno.EACCES, errno.EPERM):
            return SettingsError(f"no permission to open {self.settings.port}",
                                 hint="add yourself to the dialout group "
                                 "(sudo usermod -aG dialout $USER), then log in again")
        return LinkLost(f"cannot open {self.settings.port}: {exc.strerror or exc}")

    async def connect(self) -> None:
        await self._open()
        await self.read()

    async def open_link(self) -> None:
        """Open the port without a first reading: for scanning a controller whose map is
        not written yet (`tuikiln probe --scan`), where the map's registers may not exist."""
        await self._open()

    async def _ensure_open(self) -> None:
        if self._client is not None and self._client.connected and not self._lost:
            return
        now = asyncio.get_running_loop().time()
        if self._client is not None:
            self._client.close()
            self._client = None
        if now < self._next_attempt:
            raise LinkLost(f"link to {self.settings.port} is down; trying again shortly")
        try:
            await self._open()
        except (LinkLost, SettingsError) as exc:
            self._next_attempt = now + self._backoff
            self._backoff = min(self._backoff * 2, self.settings.reconnect_max_s)
            raise LinkLost(f"link to {self.settings.port} is down ({exc})",
                           hint="plug the cable back in; tuikiln reconnects by itself") from exc
        self.reconnects += 1
        self.guard.forget()
        self._run_on_written = False

    async def close(self) -> None:
        client, self._client = self._client, None
        if client is not None:
            try:
                client.close()
            except Exception:  # noqa: BLE001 - close never raises
                pass

    # ---- exchanges ---------------------------------------------------------------

    async def _call(self, what: str, request: Any) -> Any:
        """Run one pymodbus request, translating every failure into a DeviceError."""
        await self._ensure_open()
        assert self._client is not None
        self._rx_seen = False
        self.requests += 1
        try:
            response = await request(self._client)
        except ConnectionException as exc:
            self._lost = True
            raise LinkLost(f"lost the link to {self.settings.port} while {what}",
                           hint="check the cable; tuikiln reconnects by itself") from exc
        except ModbusIOException as exc:
            if self._client is None or not self._client.connected:
                self._lost = True
                raise LinkLost(f"lost the link to {self.settings.port} while {what}") from exc
            if self._rx_seen:
                self.garbled += 1
                raise BadReply(f"damaged reply from the controller while {what}",
                               hint=GARBLED_HINT) from exc
            raise NoAnswer(
                f"no answer from Modbus device {self.settings.address} on "
                f"{self.settings.port} while {what}", hint=NO_ANSWER_HINT) from exc
        except (TimeoutError, ModbusException, OSError) as exc:
            self.garbled += 1
            raise BadReply(f"bad reply while {what}: {exc}", hint=GARBLED_HINT) from exc
        if response.isError():
            code = getattr(response, "exception_code", 0)
            raise BadReply(
                f"the controller refused {what} (Modbus exception code {code})",
                hint="check the register addresses and function codes in the map file "
                f"({self.map.source})")
        return response

    async def read_words(self, fc: int, address: int, count: int) -> list[int]:
        s = self.settings

        readers = {1: "read_coils", 2: "read_discrete_inputs", 3: "read_holding_registers",
                   4: "read_input_registers"}

        def request(client: Any) -> Any:
            return getattr(client, readers[fc])(address, count=count, device_id=s.address)

        what = (f"reading {count} {'coil' if fc == 1 else 'discrete input'}(s) at {address}"
                if fc in (1, 2) else f"reading {count} register(s) at {address}")
        response = await self._call(what, request)
        # A bit reply comes padded to whole bytes: only the first `count` bits are ours.
        words = ([int(bit) for bit in response.bits] if fc in (1, 2)
                 else list(response.registers))
        if len(words) < count:
            self.garbled += 1
            raise BadReply(f"short reply: {len(words)} of {count} registers")
        return words[:count]

    async def write_words(self, reg: Register, words: list[int]) -> None:
        s = self.settings

        def request(client: Any) -> Any:
            if reg.fc == 5:
                return client.write_coil(reg.address, bool(words[0]), device_id=s.address)
            if reg.fc == 15:
                return client.write_coils(reg.address, [bool(w) for w in words],
                                          device_id=s.address)
            if reg.fc == 6:
                return client.write_register(reg.address, words[0], device_id=s.address)
            return client.write_registers(reg.address, words, device_id=s.address)

        await self._call(f"writing {reg.name}", request)

    # ---- Device ------------------------------------------------------------------

    @property
    def written_setpoint_c(self) -> float | None:  # type: ignore[override]
        """What the controller was last really sent; a value the guard holds is not."""
        return self.guard.last_written_c

    async def read(self) -> Reading:
        raw: dict[str, float] = {}
        words_of: dict[str, list[int]] = {}
        for block in self.blocks:
            words = await self.read_words(block.fc, block.address, block.count)
            for reg in block.registers:
                start = reg.address - block.address
                part = words[start:start + reg.count]
                words_of[reg.name] = part
                raw[reg.name] = reg.decode_raw(part)
        reading = self._reading(raw, words_of)
        await self._flush_pending()
        return reading

    def _temperature(self, reg: Register | None, raw: dict[str, float]) -> tuple[float | None,
                                                                                bool]:
        if reg is None or reg.name not in raw:
            return None, False
        value = raw[reg.name]
        if reg.is_open(value) or value != value:  # NaN from a float register: no reading
            return None, True
        return reg.value(value), False

    def _reading(self, raw: dict[str, float], words_of: dict[str, list[int]]) -> Reading:
        reads = self.map.reads
        chamber, chamber_open = self._temperature(reads.get("chamber"), raw)
        load, load_open = self._temperature(reads.get("load"), raw)
        setpoint, _ = self._temperature(reads.get("setpoint"), raw)
        output = reads["output"].value(raw["output"]) if "output" in reads else None
        running: bool | None = None
        if "run" in reads:
            running = int(raw["run"]) == reads["run"].on
        status: dict[str, bool] = {}
        sensor_fault = chamber_open or load_open
        for name, reg in reads.items():
            if not reg.bits:
                continue
            value = int(raw[name]) & 0xFFFFFFFF
            for bit_name, bit in reg.bits.items():
                status[bit_name] = bool(value >> bit & 1)
        if status.pop("sensor_fault", False):
            sensor_fault = True
            chamber = None  # the controller's own flag is about its controlling sensor
        if "running" in status:
            running = status.pop("running")
        channels: dict[str, float] = {}
        for name, reg in self.map.channels.items():
            celsius, _ = self._temperature(reg, raw)
            if celsius is not None:
                channels[name] = celsius
        return Reading(
            time=self.clock.now(), chamber_c=chamber, load_c=load, setpoint_c=setpoint,
            output_pct=output, sensor_fault=sensor_fault, running=running,
            channels=channels, status=status,
        )

    async def write_setpoint(self, celsius: float) -> None:
        reg = self._setpoint_reg
        if reg is None:
            raise NotSupported(f"the map {self.map.name} has no setpoint register to write")
        celsius = self._clamp(reg, celsius)
        if self.guard.request(celsius, self.clock.now()):
            await self._write_setpoint_now(reg, celsius)
        run = self.map.writes.get("run")
        if run is not None and run.on is not None and not self._run_on_written:
            # setpoint first, then run: the output never comes on towards a stale setpoint
            await self.write_words(run, [run.on & 0xFFFF])
            self._run_on_written = True

    def _clamp(self, reg: Register, celsius: float) -> float:
        if reg.minimum is not None:
            celsius = max(celsius, reg.from_units(reg.minimum))
        if reg.maximum is not None:
            celsius = min(celsius, reg.from_units(reg.maximum))
        return celsius

    async def _write_setpoint_now(self, reg: Register, celsius: float) -> None:
        try:
            words = reg.encode(celsius)
        except ValueError as exc:
            raise BadReply(str(exc)) from exc
        await self.write_words(reg, words)
        self.guard.written(celsius, self.clock.now())

    async def _flush_pending(self) -> None:
        reg = self._setpoint_reg
        if reg is not None and self.guard.due(self.clock.now()):
            assert self.guard.pending_c is not None
            await self._write_setpoint_now(reg, self.guard.pending_c)

    async def stop_heating(self) -> None:
        """Safe setpoint first (written at once, whatever the guard's interval), then run off."""
        errors: list[Exception] = []
        reg = self._setpoint_reg
        if reg is not None:
            safe = self._clamp(reg, self.map.safe_setpoint_c)
            self.guard.pending_c = safe
            try:
                await self._write_setpoint_now(reg, safe)
            except (LinkLost, NoAnswer, BadReply) as exc:
                errors.append(exc)
        run = self.map.writes.get("run")
        if run is not None and run.off is not None:
            self._run_on_written = False
            try:
                await self.write_words(run, [run.off & 0xFFFF])
            except (LinkLost, NoAnswer, BadReply) as exc:
                errors.append(exc)
        if errors:
            raise errors[0]

