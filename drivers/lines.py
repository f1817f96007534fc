"""Serial line thermometers: newline-delimited text, one reading per line (monitor only).

    [device]
    kind = "lines"
    port = "/dev/ttyUSB0"
    baud = 9600
    format = "csv"               # "regex" (named groups), "keyvalue" (k=v), "csv", "json"
    header = true                # csv: the first line names the columns
    timeout = 5                  # seconds without a good line before "no answer"
    [device.channels]
    chamber = { field = "T1" }                                # °C (unit = "C" is the default)
    load = { field = 2, unit = "mV", thermocouple = "K", cold_junction = 23.0 }
    roof = { field = "T3", unit = "F" }

`field` is a regex group name, a key, a JSON key, a CSV header name, or a CSV column number
(0 = first). A millivolt channel is turned into °C by the NIST ITS-90 functions
(drivers/its90.py); its cold junction is a temperature in °C (`cold_junction = 23.0`) or
another field holding one (`cold_junction_field = "cj"`, `cold_junction_unit = "F"` if so).
A field showing one of `open` (default OPEN, OL, ----, ERR) is an open thermocouple.

Lines that cannot be read are counted in `bad_lines` and skipped; they never end the run.
The port is read without blocking the event loop (loop.add_reader on the port's file).
"""

from __future__ import annotations

import asyncio
import csv
import json
import math
import os
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from tuikiln.drivers import its90
from tuikiln.drivers.base import Capabilities, Clock, Device, Reading, WallClock
from tuikiln.drivers.errors import BadReply, LinkLost, NoAnswer, NotSupported, SettingsError
from tuikiln.drivers.serialport import DIALOUT_HINT, port_problem

FORMATS = ("regex", "keyvalue", "csv", "json")
UNITS = ("C", "F", "mV")
DEFAULT_OPEN = ("open", "ol", "----", "err", "nan")
_NUMBER = re.compile(r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?")
MAX_LINE = 4096


@dataclass(frozen=True)
class ChannelSpec:
    name: str
    field: str | int
    unit: str = "C"
    thermocouple: str | None = None
    cold_junction_c: float | None = None
    cold_junction_field: str | int | None = None
    cold_junction_unit: str = "C"
    open_words: tuple[str, ...] = DEFAULT_OPEN


@dataclass(frozen=True)
class LineSettings:
    port: str
    format: str
    channels: tuple[ChannelSpec, ...]
    baud: int = 9600
    parity: str = "N"
    stopbits: int = 1
    bytesize: int = 8
    pattern: str | None = None
    separator: str = ","
    pair_separator: str | None = None
    header: bool = False
    timeout_s: float = 5.0
    reconnect_min_s: float = 0.5
    reconnect_max_s: float = 30.0


@dataclass
class ParsedLine:
    chamber_c: float | None = None
    load_c: float | None = None
    channels: dict[str, float] = field(default_factory=dict)
    sensor_fault: bool = False


def _to_c(value: float, unit: str) -> float:
    return (value - 32.0) * 5.0 / 9.0 if unit == "F" else value


class LineParser:
    """Picks channel values out of one line of text; raises BadReply for a line it cannot read."""

    def __init__(self, settings: LineSettings) -> None:
        self.settings = settings
        self.columns: list[str] | None = None
        self.regex = re.compile(settings.pattern) if settings.pattern else None

    def fields(self, line: str) -> Mapping[str | int, Any]:
        fmt = self.settings.format
        if fmt == "regex":
            assert self.regex is not None
            match = self.regex.search(line)
            if not match:
                raise BadReply("the line does not match the pattern")
            return {k: v for k, v in match.groupdict().items() if v is not None}
        if fmt == "json":
            try:
                data = json.loads(line)
            except (ValueError, RecursionError) as exc:
                # RecursionError: json recurses once per nested array or object
                raise BadReply("the line is not valid JSON") from exc
            if not isinstance(data, dict):
                raise BadReply("the JSON line is not an object")
            return data
        if fmt == "keyvalue":
            pairs = (line.split(self.settings.pair_separator) if self.settings.pair_separator
                     else re.split(r"[\s,;]+", line))
            result: dict[str | int, Any] = {}
            for pair in pairs:
                key, sep, value = pair.partition("=")
                if not sep:
                    key, sep, value = pair.partition(":")
                if sep and key.strip():
                    result[key.strip()] = value.strip()
            if not result:
                raise BadReply("the line holds no key=value pairs")
            return result
        try:
            cells = next(csv.reader([line], delimiter=self.settings.separator))
        except csv.Error as exc:  # e.g. a carriage return inside the line
            raise BadReply(f"the line is not valid CSV ({exc})") from exc
        row = [cell.strip() for cell in cells]
        if self.settings.header and (self.columns is None or row == self.columns):
            self.columns = row
            raise _HeaderLine()
        by_field: dict[str | int, Any] = dict(enumerate(row))
        if self.columns:
            by_field.update(zip(self.columns, row, strict=False))
        return by_field

    def number(self, fields: Mapping[str | int, Any], key: str | int, open_words: tuple[str, ...]
               ) -> float | None:
        """The number in `fields[key]`; None for an open-thermocouple word."""
        if key not in fields:
            raise BadReply(f"the line has no field {key!r}")
        value = fields[key]
        if isinstance(value, bool):
            raise BadReply(f"field {key!r} is not a number")
        if isinstance(value, int | float):
            number = float(value)
        elif value is None:
            return None
        else:
            text = str(value).strip()
            if text.lower() in open_words:
                return None
            match = _NUMBER.search(text)
            if not match:
                raise BadReply(f"field {key!r} is not a number: {text[:20]!r}")
            number = float(match.group(0))
        if not math.isfinite(number):
            return None
        return number

    def parse(self, line: str) -> ParsedLine:
        fields = self.fields(line)
        parsed = ParsedLine()
        for channel in self.settings.channels:
            value = self.number(fields, channel.field, channel.open_words)
            celsius: float | None
            if value is None:
                celsius = None
            elif channel.unit == "mV":
                celsius = self._thermocouple(channel, value, fields)
            else:
                celsius = _to_c(value, channel.unit)
            if celsius is None:
                parsed.sensor_fault = True
            if channel.name == "chamber":
                parsed.chamber_c = celsius
            elif channel.name == "load":
                parsed.load_c = celsius
            elif celsius is not None:
                parsed.channels[channel.name] = celsius
        return parsed

    def _thermocouple(self, channel: ChannelSpec, mv: float, fields: Mapping[str | int, Any]
                      ) -> float | None:
        cold = channel.cold_junction_c if channel.cold_junction_c is not None else 0.0
        if channel.cold_junction_field is not None:
            raw = self.number(fields, channel.cold_junction_field, ())
            if raw is None:
                raise BadReply("the cold-junction field is empty")
            cold = _to_c(raw, channel.cold_junction_unit)
        assert channel.thermocouple is not None
        try:
            return float(its90.temperature_c(channel.thermocouple, mv, cold))
        except its90.OutOfRange:
            return None  # far outside the type's range: an open or shorted thermocouple


class _HeaderLine(Exception):
    """A CSV header line: not a reading, not an error."""


class LineThermometer(Device):
    def __init__(self, settings: LineSettings, clock: Clock | None = None) -> None:
        self.settings = settings
        self.parser = LineParser(settings)
        self.clock = clock or WallClock()
        names = {c.name for c in settings.channels}
        self.capabilities = Capabilities(
            can_write_setpoint=False, can_stop_heating=False,
            has_load_thermocouple="load" in names,
        )
        self.description = f"line thermometer on {settings.port} ({settings.format})"
        self._serial: Any = None
        self._fd = -1
        self._buffer = b""
        self._skipping = False
        """An overlong line was dropped: bytes up to the next newline are its tail."""
        self._skipped = 0
        self._latest: ParsedLine | None = None
        self._fresh = asyncio.Event()
        self._lost = False
        self._next_attempt = 0.0
        self._backoff = settings.reconnect_min_s
        self.good_lines = 0
        self.bad_lines = 0
        self.last_bad: str = ""
        self.reconnects = 0
        self._opened_once = False

    # ---- port ----------------------------------------------------------------------

    def _open(self) -> None:
        import serial

        problem = port_problem(self.settings.port)
        if problem is not None:
            raise problem
        s = self.settings
        try:
            port = serial.Serial(s.port, baudrate=s.baud, parity=s.parity, stopbits=s.stopbits,
                                 bytesize=s.bytesize, timeout=0)
        except serial.SerialException as exc:
            if isinstance(exc.__cause__, PermissionError) or "ermission" in str(exc):
                raise SettingsError(f"no permission to open {s.port}", hint=DIALOUT_HINT) from exc
            raise LinkLost(f"cannot open {s.port}: {exc}") from exc
        self._serial = port
        self._fd = port.fileno()
        os.set_blocking(self._fd, False)
        self._buffer = b""
        self._skipping, self._skipped = False, 0
        self._lost = False
        self._backoff = s.reconnect_min_s
        asyncio.get_running_loop().add_reader(self._fd, self._on_readable)
        if self._opened_once:
            self.reconnects += 1
        self._opened_once = True

    def _drop_port(self) -> None:
        if self._fd >= 0:
            try:
                asyncio.get_running_loop().remove_reader(self._fd)
            except (RuntimeError, ValueError):
                pass
        if self._serial is not None:
            try:
                self._serial.close()
            except Exception:  # noqa: BLE001 - closing a dead port may fail; it is gone anyway
                pass
        self._serial = None
        self._fd = -1

    def _on_readable(self) -> None:
        try:
            data = os.read(self._fd, 4096)
        except BlockingIOError:
            return
        except OSError:
            data = b""
        if not data:  # EIO or end of file: the port went away (USB unplugged)
            self._lost = True
            self._drop_port()
            self._fresh.set()
            return
        if self._skipping:
            # the rest of a line already dropped as overlong: its tail is not a reading
            end = data.find(b"\n")
            if end < 0:
                self._skipped += len(data)
                if self._skipped > MAX_LINE:  # still no newline: keep saying so
                    self._skipped = 0
                    self._count_bad(f"no end of line in {MAX_LINE} bytes")
                return
            data = data[end + 1:]
            self._skipping = False
        self._buffer += data
        *lines, self._buffer = self._buffer.split(b"\n")
        if len(self._buffer) > MAX_LINE:  # a stream with no newlines is not ours
            self._buffer = b""
            self._skipping, self._skipped = True, 0
            self._count_bad(f"no end of line in {MAX_LINE} bytes")
        for raw in lines:
            if len(raw) > MAX_LINE:  # a whole overlong line in one read: not ours either
                self._count_bad(f"a line longer than {MAX_LINE} bytes")
                continue
            self._take_line(raw)

    def _take_line(self, raw: bytes) -> None:
        text = raw.decode("utf-8", errors="replace").strip().strip("\x00")
        if not text:
            return
        try:
            parsed = self.parser.parse(text)
        except _HeaderLine:
            return
        except BadReply as exc:
            self._count_bad(f"{exc}: {text[:60]!r}")
            return
        self.good_lines += 1
        self._latest = parsed
        self._fresh.set()

    def _count_bad(self, why: str) -> None:
        self.bad_lines += 1
        self.last_bad = why

    async def _ensure_open(self) -> None:
        if self._serial is not None and not self._lost:
            return
        now = asyncio.get_running_loop().time()
        if now < self._next_attempt:
            raise LinkLost(f"the thermometer's port {self.settings.port} is gone; "
                           "trying again shortly")
        try:
            self._open()
        except (LinkLost, SettingsError) as exc:
            self._next_attempt = now + self._backoff
            self._backoff = min(self._backoff * 2, self.settings.reconnect_max_s)
            if not self._opened_once:
                raise
            raise LinkLost(f"the thermometer's port {self.settings.port} is gone ({exc})",
                           hint="plug it back in; tuikiln reconnects by itself") from exc

    # ---- Device --------------------------------------------------------------------

    async def connect(self) -> None:
        await self._ensure_open()

    async def read(self) -> Reading:
        await self._ensure_open()
        bad_before = self.bad_lines
        if self._latest is None or not self._fresh.is_set():
            self._fresh.clear()
            try:
                await asyncio.wait_for(self._fresh.wait(), self.settings.timeout_s)
            except TimeoutError:
                if self.bad_lines > bad_before:
                    raise BadReply(
                        f"{self.bad_lines - bad_before} line(s) from the thermometer could "
                        f"not be read (last: {self.last_bad})",
                        hint="check `format` and the channel fields in the kiln file, and "
                        "the baud rate") from None
                raise NoAnswer(f"no line from the thermometer on {self.settings.port} in "
                               f"{self.settings.timeout_s:g} s",
                               hint="check the baud rate and that it is sending") from None
        if self._lost:
            self._fresh.clear()
            self._latest = None
            raise LinkLost(f"the thermometer's port {self.settings.port} went away",
                           hint="plug it back in; tuikiln reconnects by itself")
        self._fresh.clear()
        latest = self._latest
        assert latest is not None
        return Reading(time=self.clock.now(), chamber_c=latest.chamber_c, load_c=latest.load_c,
                       sensor_fault=latest.sensor_fault, channels=dict(latest.channels))

    async def write_setpoint(self, celsius: float) -> None:
        raise NotSupported("a line thermometer only watches; it cannot take a setpoint")

    async def stop_heating(self) -> None:
        raise NotSupported("a line thermometer only watches; it cannot stop the heat")

    async def close(self) -> None:
        self._drop_port()
