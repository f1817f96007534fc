"""Register maps: what a Modbus controller's registers mean, as data (TOML), not code.

A map file has a `[read]` table and an optional `[write]` table; each key is a quantity and
its value an inline table saying where it lives and how to turn raw words into °C:

```toml
name = "my controller"
max_gap = 0        # unmapped registers a read may span to join two blocks (0: strictly contiguous)
[read]
chamber  = { fc = 3, address = 0, scale = 0.1, signed = true, units = "C", open = [32767] }
load     = { fc = 4, address = 10, type = "float32", word_order = "little", units = "F" }
output   = { fc = 3, address = 2, decimals = 1 }
status   = { fc = 3, address = 3, bits = { sensor_fault = 0, running = 1 } }
[read.channels]
door     = { fc = 3, address = 7, scale = 0.1, units = "C" }
[write]
setpoint     = { fc = 6, address = 1, scale = 0.1, signed = true, units = "C", min = 0, max = 1200 }
ram_setpoint = { fc = 6, address = 9, scale = 0.1, signed = true, units = "C" }
run          = { fc = 6, address = 4, on = 1, off = 0 }
```

Coils and discrete inputs (single bits) sit beside registers: read `run` (or a `status`
table of bits) with fc 1 (coils) or fc 2 (discrete inputs), and write `run` with fc 5 (one
coil) or fc 15 (several coils), e.g. `run = { fc = 5, address = 0, on = 1, off = 0 }`
under [write] and `run = { fc = 1, address = 0, on = 1 }` under [read]. A bit is 0 or 1,
so `on`/`off` of a coil are 0 or 1; in a bit `status`, `bits = { name = n }` names the bit
at `address + n`.

Read quantities: chamber, load, setpoint (temperatures; `units` "C" or "F", converted to
°C), output (percent, no units), run (on/off value: `on = 1`), any key beginning with
`status` (`bits = { name = bit }`: `sensor_fault` and `running` have meaning, others are
passed on by name) and `[read.channels]` (more temperatures by name).
Write quantities: setpoint, ram_setpoint (a setpoint register kept in RAM only, so frequent
writes do not wear the controller's EEPROM), run (`on`/`off` values).

Entry keys: fc, address (0-based register number as sent on the wire), type ("int16",
"uint16", "int32", "uint32", "float32"; default int16 when `signed = true`, else uint16),
signed, scale or decimals (not both), word_order ("big": high word first, the usual
Modbus order; "little": low word first) for 32-bit types, units, open (raw values the
controller shows for an open thermocouple), bits, on, off, min, max (limits of a written
setpoint in the map's units; `min` is also the safe setpoint that stop_heating writes).

Every mistake is reported as `file:line: [table] key: what is wrong`.
"""

from __future__ import annotations

import math
import re
import struct
import tomllib
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from tuikiln.drivers.checking import suggest
from tuikiln.drivers.errors import SettingsError
from tuikiln.drivers.tomllines import KeyPath, LineMap

MAPS_DIR = Path(__file__).with_name("maps")

READ_FCS = (1, 2, 3, 4)
WRITE_FCS = (5, 6, 15, 16)
BIT_READ_FCS = (1, 2)  # coils, discrete inputs
BIT_WRITE_FCS = (5, 15)  # one coil, several coils
TYPES = ("int16", "uint16", "int32", "uint32", "float32")
WORD_ORDERS = ("big", "little")
UNITS = ("C", "F")
TEMPERATURE_READS = ("chamber", "load", "setpoint")
PLAIN_READS = ("output", "run")
READ_NAMES = TEMPERATURE_READS + PLAIN_READS + ("status", "channels")
WRITE_NAMES = ("setpoint", "ram_setpoint", "run")
TOP_KEYS = ("name", "about", "max_gap", "read", "write")
# One Modbus read request returns at most 125 registers (Modbus Application Protocol
# Specification V1.1b3, section 6.3 "Read Holding Registers": quantity 1 to 125).
MAX_REGISTERS_PER_READ = 125
# ... and one coil or discrete-input read at most 2000 bits (same spec, sections 6.1, 6.2).
MAX_BITS_PER_READ = 2000


class MapError(SettingsError):
    """A register map file is wrong; `problems` holds every mistake as `file:line: ...`."""

    def __init__(self, problems: Sequence[str]) -> None:
        self.problems = list(problems)
        super().__init__(
            "\n".join(self.problems),
            hint="fix the register map (see drivers/maps/generic-pid.toml for every key)",
        )


# ---- the parsed map --------------------------------------------------------------------


@dataclass(frozen=True)
class Register:
    """One quantity's place and encoding."""

    name: str
    fc: int
    address: int
    type: str = "uint16"
    scale: float = 1.0
    word_order: str = "big"
    units: str | None = None
    open_values: tuple[float, ...] = ()
    bits: Mapping[str, int] = field(default_factory=dict)
    on: int | None = None
    off: int | None = None
    minimum: float | None = None
    maximum: float | None = None

    @property
    def is_bit(self) -> bool:
        """A coil or discrete input rather than a 16-bit register."""
        return self.fc in BIT_READ_FCS or self.fc in BIT_WRITE_FCS

    @property
    def count(self) -> int:
        """Registers (or, for coils and discrete inputs, bits) this quantity spans."""
        if self.is_bit:
            return max(self.bits.values(), default=0) + 1
        return 2 if self.type in ("int32", "uint32", "float32") else 1

    @property
    def resolution_c(self) -> float:
        """Smallest temperature step the register holds, in °C."""
        step = self.scale if self.type != "float32" else 0.01
        return step * 5.0 / 9.0 if self.units == "F" else step

    # -- raw words <-> numbers --

    def decode_raw(self, words: Sequence[int]) -> float:
        """Registers -> the number they hold (before scale); bits: bit i is `address + i`."""
        if self.is_bit:
            return float(sum(1 << i for i, bit in enumerate(words) if bit))
        if self.count == 1:
            value = words[0] & 0xFFFF
            if self.type == "int16" and value >= 0x8000:
                value -= 0x10000
            return float(value)
        high, low = (words[0], words[1]) if self.word_order == "big" else (words[1], words[0])
        data = struct.pack(">HH", high & 0xFFFF, low & 0xFFFF)
        code = {"int32": ">i", "uint32": ">I", "float32": ">f"}[self.type]
        return float(struct.unpack(code, data)[0])

    def is_open(self, raw: float) -> bool:
        return any(raw == value for value in self.open_values)

    def value(self, raw: float) -> float:
        """A raw number -> scaled value; temperatures in °C."""
        inverse = 1.0 / self.scale
        # Dividing by 10 rather than multiplying by 0.1 keeps 197 -> 19.7 (not 19.700000000000003).
        if abs(inverse - round(inverse)) < 1e-9 and round(inverse) != 0:
            scaled = raw / round(inverse)
        else:
            scaled = raw * self.scale
        if self.units == "F":
            return (scaled - 32.0) * 5.0 / 9.0
        return scaled

    def encode(self, value_c: float) -> list[int]:
        """A value (°C for temperatures) -> the registers to write; raises ValueError."""
        value = value_c * 9.0 / 5.0 + 32.0 if self.units == "F" else value_c
        if self.type == "float32":
            data = struct.pack(">f", value)
        else:
            raw = round(value / self.scale)
            limits = {
                "int16": (-0x8000, 0x7FFF),
                "uint16": (0, 0xFFFF),
                "int32": (-0x80000000, 0x7FFFFFFF),
                "uint32": (0, 0xFFFFFFFF),
            }[self.type]
            if not limits[0] <= raw <= limits[1]:
                raise ValueError(f"{value:g} does not fit register {self.name} ({self.type})")
            if self.count == 1:
                return [raw & 0xFFFF]
            data = struct.pack(">i" if self.type == "int32" else ">I", raw)
        high, low = struct.unpack(">HH", data)
        return [high, low] if self.word_order == "big" else [low, high]

    def from_units(self, value: float) -> float:
        """A value in the map's units (min, max) -> °C."""
        return (value - 32.0) * 5.0 / 9.0 if self.units == "F" else value


@dataclass(frozen=True)
class Block:
    """Registers read in one request."""

    fc: int
    address: int
    count: int
    registers: tuple[Register, ...]


@dataclass(frozen=True)
class RegisterMap:
    name: str
    source: str
    reads: Mapping[str, Register]
    channels: Mapping[str, Register]
    writes: Mapping[str, Register]
    max_gap: int = 0

    @property
    def all_reads(self) -> list[Register]:
        return list(self.reads.values()) + list(self.channels.values())

    def blocks(self) -> list[Block]:
        """Group the reads into as few requests as possible (contiguous, or over small gaps)."""
        return plan_blocks(self.all_reads, self.max_gap)

    @property
    def safe_setpoint_c(self) -> float:
        """What stop_heating writes: the setpoint's `min`, or 0 °C."""
        reg = self.writes.get("setpoint")
        if reg is not None and reg.minimum is not None:
            return reg.from_units(reg.minimum)
        return 0.0


def plan_blocks(registers: Iterable[Register], max_gap: int = 0) -> list[Block]:
    blocks: list[Block] = []
    by_fc: dict[int, list[Register]] = {}
    for reg in registers:
        by_fc.setdefault(reg.fc, []).append(reg)
    for fc in sorted(by_fc):
        current: list[Register] = []
        start = end = 0
        for reg in sorted(by_fc[fc], key=lambda r: r.address):
            reg_end = reg.address + reg.count
            joins = current and reg.address <= end + max_gap
            limit = MAX_BITS_PER_READ if fc in BIT_READ_FCS else MAX_REGISTERS_PER_READ
            if joins and max(end, reg_end) - start <= limit:
                current.append(reg)
                end = max(end, reg_end)
                continue
            if current:
                blocks.append(Block(fc, start, end - start, tuple(current)))
            current, start, end = [reg], reg.address, reg_end
        if current:
            blocks.append(Block(fc, start, end - start, tuple(current)))
    return blocks


# ---- loading and checking --------------------------------------------------------------

ENTRY_KEYS = (
    "fc", "address", "type", "signed", "scale", "decimals", "word_order", "units", "open",
    "bits", "on", "off", "min", "max",
)


def shipped_maps() -> list[str]:
    return sorted(p.stem for p in MAPS_DIR.glob("*.toml"))


def resolve_map_path(name_or_path: str, base_dir: str | Path = ".") -> Path:
    """A shipped map's name ("generic-pid") or a path (relative to `base_dir`)."""
    text = str(name_or_path)
    looks_like_path = "/" in text or text.endswith(".toml")
    if not looks_like_path:
        return MAPS_DIR / f"{text}.toml"
    path = Path(text).expanduser()
    return path if path.is_absolute() else Path(base_dir) / path


def load_map(name_or_path: str, base_dir: str | Path = ".") -> RegisterMap:
    """Read and check a map file; raises MapError naming file, line and key."""
    path = resolve_map_path(name_or_path, base_dir)
    if not path.is_file():
        shipped = ", ".join(shipped_maps())
        raise MapError([f'{path}: no such register map (shipped maps: {shipped}; '
                        f'or give a path to a .toml file)'])
    text = path.read_text(encoding="utf-8")
    return parse_map(text, str(path))


def parse_map(text: str, source: str = "<map>") -> RegisterMap:
    name = Path(source).name
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        match = re.search(r"line (\d+)", str(exc))
        where = f"{name}:{match.group(1)}" if match else name
        raise MapError([f"{where}: not valid TOML ({exc})"]) from exc
    except RecursionError:  # tomllib recurses once per nested array or inline table
        raise MapError([f"{name}: not a register map: the file nests too deeply"]) from None
    except ValueError:  # e.g. an integer of more than 4300 digits (Python's int limit)
        raise MapError([f"{name}: not a register map: a number is too long"]) from None
    checker = _Checker(name, LineMap(text))
    result = checker.check(data, source)
    if checker.problems or result is None:
        raise MapError(checker.problems)
    return result


def _is_number(value: object) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


def _is_whole(value: object) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


class _Checker:
    def __init__(self, file_name: str, lines: LineMap) -> None:
        self.file_name = file_name
        self.lines = lines
        self.problems: list[str] = []

    def problem(self, path: KeyPath, message: str) -> None:
        line = self.lines.line(path)
        where = f"{self.file_name}:{line}" if line else self.file_name
        table = ".".join(str(p) for p in path[:-1])
        key = f"[{table}] {path[-1]}" if table else str(path[-1]) if path else ""
        self.problems.append(f"{where}: {key}: {message}" if key else f"{where}: {message}")

    def check(self, data: Mapping[str, Any], source: str) -> RegisterMap | None:
        for key in data:
            if key not in TOP_KEYS:
                self.problem((key,), f"unknown key{suggest(key, TOP_KEYS)}")
        name = data.get("name", Path(source).stem)
        if not isinstance(name, str):
            self.problem(("name",), "must be text in quotes")
            name = Path(source).stem
        max_gap = data.get("max_gap", 0)
        if not isinstance(max_gap, int) or isinstance(max_gap, bool) or not 0 <= max_gap <= 16:
            self.problem(("max_gap",), "must be a whole number from 0 to 16")
            max_gap = 0
        read_table = data.get("read")
        if not isinstance(read_table, Mapping) or not read_table:
            self.problem(("read",), "the map needs a [read] table with at least `chamber`")
            return None
        reads: dict[str, Register] = {}
        channels: dict[str, Register] = {}
        for qty, entry in read_table.items():
            path: KeyPath = ("read", qty)
            if qty == "channels":
                if not isinstance(entry, Mapping):
                    self.problem(path, "must be a table of temperature channels by name")
                    continue
                for channel, spec in entry.items():
                    reg = self.entry(("read", "channels", channel), spec, write=False)
                    if reg is not None and reg.is_bit:
                        self.problem(("read", "channels", channel, "fc"),
                                     "a channel is a temperature: read it from a register "
                                     "(fc = 3 or 4)")
                    elif reg is not None and reg.units is None:
                        self.problem(("read", "channels", channel, "units"),
                                     'a channel is a temperature: give units = "C" or "F"')
                    elif reg is not None:
                        channels[channel] = reg
                continue
            if qty not in READ_NAMES and not qty.startswith("status"):
                self.problem(path, f"unknown quantity{suggest(qty, READ_NAMES)}; "
                             "extra temperatures go under [read.channels]")
                continue
            reg = self.entry(path, entry, write=False)
            if reg is None:
                continue
            if reg.is_bit and qty != "run" and not qty.startswith("status"):
                self.problem(path + ("fc",), f"{qty} is a number: read it from a register "
                             "(fc = 3 or 4); coils and discrete inputs (fc = 1, 2) suit "
                             "only run and status")
            elif qty.startswith("status") and not reg.bits:
                self.problem(path + ("bits",), "a status register needs bits = { name = bit }")
            elif qty in TEMPERATURE_READS and reg.units is None:
                self.problem(path + ("units",), 'a temperature needs units = "C" or "F"')
            elif qty == "run" and reg.on is None:
                self.problem(path + ("on",), "say which value means running: on = 1")
            else:
                reads[qty] = reg
        if "chamber" not in read_table:
            self.problem(("read",), "the map needs `chamber` (the controlling thermocouple)")
        writes: dict[str, Register] = {}
        write_table = data.get("write", {})
        if not isinstance(write_table, Mapping):
            self.problem(("write",), "must be a table")
            write_table = {}
        for qty, entry in write_table.items():
            path = ("write", qty)
            if qty not in WRITE_NAMES:
                self.problem(path, f"unknown quantity{suggest(qty, WRITE_NAMES)}")
                continue
            reg = self.entry(path, entry, write=True)
            if reg is None:
                continue
            if reg.is_bit and qty != "run":
                self.problem(path + ("fc",), f"{qty} is a number: write it to a register "
                             "(fc = 6 or 16); coils (fc = 5, 15) suit only run")
            elif qty == "run" and (reg.on is None or reg.off is None):
                self.problem(path, "a run register needs both on = ... and off = ...")
            elif qty != "run" and reg.units is None:
                self.problem(path + ("units",), 'a setpoint needs units = "C" or "F"')
            else:
                writes[qty] = reg
        if self.problems:
            return None
        return RegisterMap(name=name, source=source, reads=reads, channels=channels,
                           writes=writes, max_gap=max_gap)

    def entry(self, path: KeyPath, spec: object, *, write: bool) -> Register | None:
        if not isinstance(spec, Mapping):
            self.problem(path, "must be an inline table such as { fc = 3, address = 0 }")
            return None
        before = len(self.problems)
        for key in spec:
            if key not in ENTRY_KEYS:
                self.problem(path + (key,), f"unknown key{suggest(key, ENTRY_KEYS)}")
        fcs = WRITE_FCS if write else READ_FCS
        fc = spec.get("fc")
        if fc is None:
            self.problem(path + ("fc",), f"missing: give fc = {' or '.join(map(str, fcs))}")
        elif fc not in fcs or isinstance(fc, bool):
            what = ("5 (write one coil), 6 (write one register), 15 (write several coils) "
                    "or 16 (write several registers)" if write
                    else "1 (coils), 2 (discrete inputs), 3 (holding registers) "
                    "or 4 (input registers)")
            self.problem(path + ("fc",), f"function code must be {what}, not {fc!r}")
        is_bit = fc in BIT_READ_FCS + BIT_WRITE_FCS and not isinstance(fc, bool)
        if is_bit:
            # A coil or discrete input is one bit: encodings and limits of numbers mean nothing.
            for key in ("type", "signed", "scale", "decimals", "word_order", "units", "open",
                        "min", "max"):
                if key in spec:
                    self.problem(path + (key,), f"fc = {fc} is a coil or discrete input "
                                 f"(one bit): `{key}` has no meaning there")
            for key in ("on", "off"):
                if key in spec and spec[key] not in (0, 1):
                    self.problem(path + (key,), f"a coil is 0 or 1, not {spec[key]!r}")
        address = spec.get("address")
        if address is None:
            self.problem(path + ("address",), "missing: give the register number, e.g. address = 0")
        elif not _is_whole(address) or not 0 <= address <= 0xFFFF:
            self.problem(path + ("address",), f"must be a whole number 0-65535, not {address!r}")
        signed = spec.get("signed", False)
        if not isinstance(signed, bool):
            self.problem(path + ("signed",), "must be true or false")
            signed = False
        reg_type = spec.get("type", "int16" if signed else "uint16")
        if reg_type not in TYPES:
            self.problem(path + ("type",), f"must be one of {', '.join(TYPES)}"
                         f"{suggest(str(reg_type), TYPES)}")
            reg_type = "uint16"
        elif "signed" in spec and reg_type in ("int16", "uint16", "int32", "uint32"):
            if signed != reg_type.startswith("int"):
                self.problem(path + ("signed",), f'contradicts type = "{reg_type}"')
        if write and fc == 6 and reg_type in ("int32", "uint32", "float32"):
            self.problem(path + ("fc",), f"a {reg_type} spans two registers: write it with fc = 16")
        scale = 1.0
        if "scale" in spec and "decimals" in spec:
            self.problem(path + ("decimals",), "give scale or decimals, not both")
        elif "scale" in spec:
            scale = spec["scale"]
            if not _is_number(scale) or scale == 0 or not math.isfinite(scale):
                self.problem(path + ("scale",), "must be a non-zero number such as 0.1")
                scale = 1.0
        elif "decimals" in spec:
            decimals = spec["decimals"]
            if not _is_whole(decimals) or not 0 <= decimals <= 6:
                self.problem(path + ("decimals",), "must be a whole number 0-6")
            else:
                scale = 10.0 ** -decimals
        word_order = spec.get("word_order", "big")
        if word_order not in WORD_ORDERS:
            self.problem(path + ("word_order",), 'must be "big" (high word first) or "little"')
        units = spec.get("units")
        if units is not None and units not in UNITS:
            self.problem(path + ("units",), f'must be "C" or "F", not {units!r}')
        open_values = spec.get("open", [])
        if not isinstance(open_values, list) or not all(_is_number(v) for v in open_values):
            self.problem(path + ("open",), "must be a list of numbers, e.g. open = [32767]")
            open_values = []
        bits = spec.get("bits", {})
        bit_limit = (MAX_BITS_PER_READ if is_bit
                     else 16 * (2 if reg_type in ("int32", "uint32") else 1))
        if not isinstance(bits, Mapping) or not all(
            isinstance(b, int) and not isinstance(b, bool) and 0 <= b < bit_limit
            for b in bits.values()
        ):
            what = ("offset from address" if is_bit else "bit number")
            self.problem(path + ("bits",), f"must be {{ name = {what} 0-{bit_limit - 1}, ... }}")
            bits = {}
        if bits and reg_type == "float32" and not is_bit:
            self.problem(path + ("type",), "status bits need an integer register type")
        on, off = spec.get("on"), spec.get("off")
        for key, value in (("on", on), ("off", off)):
            if value is not None and (not isinstance(value, int) or isinstance(value, bool)):
                self.problem(path + (key,), "must be a whole number, e.g. 1")
        limits: dict[str, float | None] = {}
        for key in ("min", "max"):
            value = spec.get(key)
            if value is not None and not _is_number(value):
                self.problem(path + (key,), "must be a number")
                value = None
            limits[key] = value
        if (limits["min"] is not None and limits["max"] is not None
                and limits["min"] >= limits["max"]):
            self.problem(path + ("max",), "must be above min")
        if len(self.problems) > before:
            return None
        assert fc is not None and address is not None  # a missing one was a problem above
        return Register(
            name=str(path[-1]), fc=fc, address=address, type=reg_type, scale=float(scale),
            word_order=word_order, units=units, open_values=tuple(float(v) for v in open_values),
            bits=dict(bits), on=on, off=off, minimum=limits["min"], maximum=limits["max"],
        )
