"""From a kiln file's `[device]` table to a Device: check the settings, then build it.

    [device]
    kind = "modbus"                  # "sim" (default), "modbus", "lines"
    port = "/dev/ttyUSB0"            # or "tcp://192.0.2.10:502" (modbus: RTU over TCP)
    baud = 9600
    parity = "N"                     # "N", "E", "O"
    stopbits = 1                     # 1 or 2
    bytesize = 8                     # 7 or 8
    address = 1                      # modbus device address 1-247
    map = "generic-pid"              # a map in drivers/maps/, or a path to one
    poll = 2                         # seconds between readings
    timeout = 1                      # seconds to wait for an answer
    retries = 2                      # extra tries before a poll counts as failed
    setpoint_min_interval = 10       # seconds between setpoint writes (EEPROM wear)
    reconnect_max = 30               # longest wait between tries to reopen a lost port, s

A line thermometer (kind = "lines") takes port, baud, parity, stopbits, bytesize, poll,
timeout and reconnect_max, plus format, pattern, separator, pair_separator, header and
[device.channels] (see drivers/lines.py). The simulator's keys are its own
(simulator/config.py), checked by its own checker.

Every kind is a `DriverKind` in `DRIVERS` (`register_driver`; `table_driver` makes one from
a tuple of `Setting`s): the one place a driver is added (docs/CONTRIBUTING.md).
`check_device_settings` never raises; `open_device` raises SettingsError listing the same
problems.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

from tuikiln.drivers.base import Device
from tuikiln.drivers.checking import KeyPath, Problems, Setting, check_table, check_value
from tuikiln.drivers.errors import SettingsError
from tuikiln.drivers.guard import DEFAULT_MIN_INTERVAL_S
from tuikiln.drivers.lines import DEFAULT_OPEN, FORMATS, ChannelSpec, LineSettings, LineThermometer
from tuikiln.drivers.maps import MapError, RegisterMap, load_map
from tuikiln.drivers.modbus import ModbusDevice, ModbusSettings, parse_tcp

STANDARD_BAUDS = (300, 600, 1200, 2400, 4800, 9600, 14400, 19200, 38400, 57600, 115200)
PARITIES = ("N", "E", "O")
THERMOCOUPLES = ("B", "E", "J", "K", "N", "R", "S", "T")

# The declared keys of [device] (drivers/checking.py checks them); `port` and `baud` have
# more checks in `_Check.serial`, `map` in `_check_modbus`, the line formats in `_check_lines`.
SERIAL: tuple[Setting, ...] = (
    Setting("kind"),  # checked first, by `_kind`: it says which table this is
    Setting("port", "text", "", example='"/dev/ttyUSB0" (or "tcp://HOST:PORT")',
            missing='say which port: port = "/dev/ttyUSB0" (or "tcp://HOST:PORT")'),
    Setting("baud", "whole", 9600, 300, 1_000_000),
    Setting("parity", "choice", "N", choices=PARITIES, any_case=True),
    Setting("stopbits", "whole", 1, 1, 2),
    Setting("bytesize", "whole", 8, 7, 8),
    Setting("poll", "number", 2.0, 0.05, 3600.0),
    Setting("timeout", "number", 1.0, 0.05, 60.0),
    Setting("reconnect_max", "number", 30.0, 0.1, 3600.0),
)
MODBUS: tuple[Setting, ...] = SERIAL + (
    Setting("address", "whole", 1, 1, 247),
    Setting("map", "text", None, example='"generic-pid"',
            missing='say which register map: map = "generic-pid" (a shipped name) or a '
            "path to your own .toml file"),
    Setting("retries", "whole", 2, 0, 10),
    Setting("setpoint_min_interval", "number", DEFAULT_MIN_INTERVAL_S, 0.0, 3600.0),
)
# A line thermometer polls faster and may wait longer for a line than a Modbus answer.
LINES: tuple[Setting, ...] = tuple(
    {"poll": Setting("poll", "number", 1.0, 0.05, 3600.0),
     "timeout": Setting("timeout", "number", 5.0, 0.05, 600.0)}.get(s.key, s)
    for s in SERIAL
) + (
    Setting("format", "choice", None, choices=FORMATS,
            missing="say how to read a line: format = one of "
            + ", ".join(f'"{f}"' for f in FORMATS)),
    Setting("pattern", "text", None, example="'T1=(?P<t1>[-0-9.]+)'"),
    Setting("separator", "text", ",", example='","'),
    Setting("pair_separator", "text", None, example='"="'),
    Setting("header", "flag", False),
    Setting("channels", "any"),
)
CHANNEL: tuple[Setting, ...] = (
    Setting("field"), Setting("unit"), Setting("thermocouple"), Setting("cold_junction"),
    Setting("cold_junction_field"), Setting("cold_junction_unit"), Setting("open"),
)


class DeviceSettingsError(SettingsError):
    """The [device] table is wrong; `problems` holds (key path, message) pairs."""

    def __init__(self, problems: Problems) -> None:
        self.problems = list(problems)
        lines = [f"{'.'.join(str(p) for p in path)}: {msg}" for path, msg in self.problems]
        super().__init__("the device settings are wrong:\n" + "\n".join(lines))


def _device_table(table: Mapping[str, Any]) -> Mapping[str, Any]:
    inner = table.get("device") if isinstance(table, Mapping) else None
    return inner if isinstance(inner, Mapping) else table


class _Check:
    """One [device] table checked against its declared keys, plus the checks of code."""

    def __init__(self, device: Mapping[str, Any], settings: tuple[Setting, ...]) -> None:
        self.device = device
        self.problems: Problems = []
        self.values = check_table(device, settings, ("device",), self.problems)

    def add(self, key: str | KeyPath, message: str) -> None:
        path = (key,) if isinstance(key, str) else key
        self.problems.append((("device", *path), message))

    def serial(self) -> dict[str, Any]:
        port = self.values["port"]
        if port.startswith("tcp://"):
            try:
                parse_tcp(port)
            except ValueError as exc:
                self.add("port", str(exc))
        baud = self.values["baud"]
        if "baud" in self.device and baud not in STANDARD_BAUDS and baud == self.device["baud"]:
            near = min(STANDARD_BAUDS, key=lambda b: abs(b - baud))
            self.add("baud", f"{baud} is not a usual baud rate (did you mean {near}?)")
        return dict(
            port=port, baud=baud, parity=self.values["parity"],
            stopbits=self.values["stopbits"], bytesize=self.values["bytesize"],
            timeout_s=self.values["timeout"], reconnect_max_s=self.values["reconnect_max"],
        )


def _check_modbus(device: Mapping[str, Any], base_dir: str
                  ) -> tuple[ModbusSettings | None, RegisterMap | None, float, Problems]:
    check = _Check(device, MODBUS)
    common = check.serial()
    values = check.values
    address, poll, retries = values["address"], values["poll"], values["retries"]
    interval = values["setpoint_min_interval"]
    map_name = values["map"]
    register_map: RegisterMap | None = None
    if map_name:
        try:
            register_map = load_map(map_name, base_dir)
        except MapError as exc:
            for problem in exc.problems:
                check.add("map", f"register map: {problem}")
    if check.problems:
        return None, None, poll, check.problems
    settings = ModbusSettings(address=address, poll_s=poll, retries=retries,
                              setpoint_min_interval_s=interval, **common)
    return settings, register_map, poll, []


def _check_lines(device: Mapping[str, Any]) -> tuple[LineSettings | None, float, Problems]:
    check = _Check(device, LINES)
    common = check.serial()
    values = check.values
    poll, fmt, pattern = values["poll"], values["format"], values["pattern"]
    groups: set[str] | None = None
    if fmt == "regex":
        if not pattern:
            check.add("pattern", 'format = "regex" needs a pattern with named groups, e.g. '
                      "pattern = 'T1=(?P<t1>[-0-9.]+)'")
        else:
            try:
                compiled = re.compile(pattern)
                groups = set(compiled.groupindex)
            except re.error as exc:
                check.add("pattern", f"the pattern is not a valid regular expression ({exc})")
                groups = None
    separator, pair_separator = values["separator"], values["pair_separator"]
    header = values["header"]
    channels: list[ChannelSpec] = []
    raw_channels = device.get("channels")
    if not isinstance(raw_channels, Mapping) or not raw_channels:
        check.add("channels", "say which field is which channel: [device.channels] with "
                  'chamber = { field = "T1" }')
        raw_channels = {}
    for name, spec in raw_channels.items():
        path: KeyPath = ("channels", name)
        if not isinstance(spec, Mapping):
            check.add(path, 'must be a table such as { field = "T1", unit = "C" }')
            continue
        check_table(spec, CHANNEL, ("device", *path), check.problems)
        fld = spec.get("field")
        if not isinstance(fld, str | int) or isinstance(fld, bool) or fld == "":
            check.add((*path, "field"), "give the field: a name, or a column number from 0")
            continue
        if isinstance(fld, int) and fmt != "csv":
            check.add((*path, "field"), "column numbers work with format = \"csv\" only")
        if fmt == "regex" and pattern and isinstance(fld, str) and groups is not None \
                and fld not in groups:
            check.add((*path, "field"), f'the pattern has no group named "{fld}"')
        unit = spec.get("unit", "C")
        if unit not in ("C", "F", "mV"):
            check.add((*path, "unit"), f'"unit" must be "C", "F" or "mV", not {unit!r}')
            continue
        tc = spec.get("thermocouple")
        cold_c: float | None = None
        cold_field: str | int | None = None
        if unit == "mV":
            if not isinstance(tc, str) or tc.upper() not in THERMOCOUPLES:
                check.add((*path, "thermocouple"), 'a millivolt channel needs the type: '
                          f'thermocouple = one of {", ".join(THERMOCOUPLES)}')
                continue
            tc = tc.upper()
            cold = spec.get("cold_junction")
            cold_field = spec.get("cold_junction_field")
            if (cold is None) == (cold_field is None):
                check.add((*path, "cold_junction"), "say where the cold junction is: a "
                          "temperature in °C (cold_junction = 23) or a field holding it "
                          '(cold_junction_field = "cj"), one of the two')
                continue
            if cold is not None:
                if not isinstance(cold, int | float) or isinstance(cold, bool):
                    check.add((*path, "cold_junction"), "must be a temperature in °C")
                    continue
                cold_c = float(cold)
            elif not isinstance(cold_field, str | int) or isinstance(cold_field, bool):
                check.add((*path, "cold_junction_field"), "must be a field name or column")
                continue
        elif tc is not None or "cold_junction" in spec or "cold_junction_field" in spec:
            check.add((*path, "unit"), 'thermocouple and cold_junction need unit = "mV"')
        cj_unit = spec.get("cold_junction_unit", "C")
        if cj_unit not in ("C", "F"):
            check.add((*path, "cold_junction_unit"), 'must be "C" or "F"')
            cj_unit = "C"
        open_words = spec.get("open", list(DEFAULT_OPEN))
        if not isinstance(open_words, list) or not all(isinstance(w, str) for w in open_words):
            check.add((*path, "open"), 'must be a list of words, e.g. open = ["OPEN", "----"]')
            open_words = list(DEFAULT_OPEN)
        channels.append(ChannelSpec(
            name=str(name), field=fld, unit=unit, thermocouple=tc, cold_junction_c=cold_c,
            cold_junction_field=cold_field, cold_junction_unit=cj_unit,
            open_words=tuple(w.lower() for w in open_words),
        ))
    if check.problems:
        return None, poll, check.problems
    settings = LineSettings(
        format=str(fmt), channels=tuple(channels), pattern=pattern, separator=separator,
        pair_separator=pair_separator, header=header, **common,
    )
    return settings, poll, []


@dataclass(frozen=True)
class DriverKind:
    """One `kind` of [device]: how its table is checked and how its device is built."""

    kind: str
    check: Callable[[Mapping[str, Any], str], Problems]
    """(the [device] table, the kiln file's folder) -> problems; never raises."""
    open: Callable[[Mapping[str, Any], str, float | None], Device]
    """(table, folder, simulator speed) -> the device, not yet connected; raises
    DeviceSettingsError with the problems `check` finds."""


DRIVERS: dict[str, DriverKind] = {}
"""kind -> DriverKind: every device the kiln file can name (the one place a driver is added)."""


def register_driver(driver: DriverKind) -> DriverKind:
    DRIVERS[driver.kind] = driver
    return driver


def forget_driver(kind: str) -> None:
    """Unregister a driver (tests that register a toy one)."""
    DRIVERS.pop(kind, None)


def table_driver(kind: str, settings: tuple[Setting, ...],
                 build: Callable[[dict[str, Any], str], Device]) -> DriverKind:
    """A driver whose [device] keys are all declared: `build(values, folder)` makes it.

    The device's `poll_s` is the table's `poll` when it declares one.
    """
    declared = (Setting("kind"), *settings)

    def check(device: Mapping[str, Any], base_dir: str) -> Problems:
        problems: Problems = []
        check_table(device, declared, ("device",), problems)
        return problems

    def open_(device: Mapping[str, Any], base_dir: str, speed: float | None) -> Device:
        problems: Problems = []
        values = check_table(device, declared, ("device",), problems)
        if problems:
            raise DeviceSettingsError(problems)
        built = build(values, base_dir)
        if values.get("poll") is not None:
            built.poll_s = values["poll"]
        return built

    return DriverKind(kind, check, open_)


def _open_modbus(device: Mapping[str, Any], base_dir: str, speed: float | None) -> Device:
    settings, register_map, poll, problems = _check_modbus(device, base_dir)
    if problems or settings is None or register_map is None:
        raise DeviceSettingsError(problems)
    built = ModbusDevice(settings, register_map)
    built.poll_s = poll
    return built


def _open_lines(device: Mapping[str, Any], base_dir: str, speed: float | None) -> Device:
    line_settings, poll, problems = _check_lines(device)
    if problems or line_settings is None:
        raise DeviceSettingsError(problems)
    built = LineThermometer(line_settings)
    built.poll_s = poll
    return built


def _check_sim(device: Mapping[str, Any], base_dir: str) -> Problems:
    from tuikiln.drivers.simdevice import check_sim_table

    return check_sim_table(device)[1]


def _open_sim(device: Mapping[str, Any], base_dir: str, speed: float | None) -> Device:
    from tuikiln.drivers.simdevice import SimulatorDevice, check_sim_table

    config, problems = check_sim_table(device)
    if problems or config is None:
        raise DeviceSettingsError(problems)
    sim_speed = config.speed if speed is None else speed
    if sim_speed is not None and (sim_speed <= 0 or math.isinf(sim_speed)):
        sim_speed = None
    built = SimulatorDevice.from_config(config, sim_speed)
    built.poll_s = 1.0
    return built


register_driver(DriverKind("sim", _check_sim, _open_sim))
register_driver(DriverKind("modbus", lambda d, b: _check_modbus(d, b)[3], _open_modbus))
register_driver(DriverKind("lines", lambda d, b: _check_lines(d)[2], _open_lines))


def _kind(device: Mapping[str, Any]) -> tuple[str | None, Problems]:
    kind = device.get("kind", "sim")
    if isinstance(kind, str) and kind in DRIVERS:  # a list is unhashable
        return kind, []
    _, message = check_value(Setting("kind", "choice", choices=tuple(DRIVERS)), kind)
    return None, [(("device", "kind"), str(message))]


def check_device_settings(table: Mapping[str, Any], base_dir: str) -> Problems:
    """Every problem in the [device] table as (key path from the file's root, message)."""
    try:
        device = _device_table(table)
        if not isinstance(device, Mapping):
            return [(("device",), "[device] must be a table")]
        kind, problems = _kind(device)
        if kind is not None:
            problems += DRIVERS[kind].check(device, base_dir)
        return problems
    except Exception as exc:  # noqa: BLE001 - a checker bug must not become a traceback
        return [(("device",), f"could not check the device settings ({exc})")]


def open_device(table: Mapping[str, Any], base_dir: str, *, speed: float | None = None
                ) -> Device:
    """Build the device the [device] table describes (not yet connected).

    `speed` applies to the simulator: None keeps the kiln file's (default 1 = real time);
    0 or infinity means as fast as possible.
    """
    device = _device_table(table) if table else {}
    kind, problems = _kind(device)
    if problems or kind is None:
        raise DeviceSettingsError(problems)
    return DRIVERS[kind].open(device, base_dir, speed)
