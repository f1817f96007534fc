"""The kiln file: which device, its settings, display units, the kiln's maximum, alarm
defaults, MQTT and alert hooks. Checked as strictly as a profile (file, line, plain words).

With no kiln file the device is the built-in simulator, so the first run works anywhere.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import platformdirs

from tuikiln.errors import FileProblems, Problem
from tuikiln.limits import parse_limits, suggest
from tuikiln.tomllines import LineMap, load_toml, read_text
from tuikiln.units import UNITS, Units, finite, to_c

KILN_KEYS = ("name", "units", "max", "device", "alarms", "mqtt", "hook", "on_restart", "bell")
RESTART_POLICIES = ("continue", "hold", "end")
SIMULATOR_MAX_C = 1200.0


@dataclass(frozen=True)
class Kiln:
    name: str = "Simulated bench oven"
    units: Units = "C"
    max_c: float = SIMULATOR_MAX_C
    device: Mapping[str, Any] = field(default_factory=lambda: {"kind": "sim"})
    """The raw `[device]` table, checked by drivers.factory."""
    alarms: Mapping[str, float] = field(default_factory=dict)
    """Threshold overrides (kelvin / seconds) for tuikiln.limits.Limits.merged."""
    mqtt: Any = None
    """tuikiln.alerts MqttSettings, or None when there is no [mqtt] table."""
    hooks: tuple[Any, ...] = ()
    on_restart: str = "hold"
    """After a crash or power cut: continue the run, hold safe for a person, or end it."""
    bell: bool = True
    path: str | None = None
    base_dir: str = "."
    text: str = ""
    """The file's text as loaded (stored with every run; secrets live in other files)."""

    @property
    def is_simulator(self) -> bool:
        return str(self.device.get("kind", "sim")) == "sim"


def default_kiln_path() -> Path:
    return Path(platformdirs.user_config_dir("tuikiln")) / "kiln.toml"


def load_kiln(path: str | os.PathLike[str] | None = None) -> Kiln:
    """The kiln file at `path`, else the user's, else the built-in simulator kiln."""
    if path is None:
        default = default_kiln_path()
        if not default.exists():
            return Kiln()
        path = default
    path = str(path)
    text, problems = read_text(path)
    if text is None:
        raise FileProblems(problems)
    return parse_kiln(text, path)


def parse_kiln(text: str, file: str = "<kiln>") -> Kiln:
    data, problems = load_toml(text, file)
    if data is None:
        raise FileProblems(problems)
    lines = LineMap(text)
    found: list[Problem] = []

    def report(path: tuple, message: str) -> None:
        found.append(Problem(file, lines.line(path), message))

    for key in data:
        if key not in KILN_KEYS:
            report((key,), f'unknown key "{key}"{suggest(key, KILN_KEYS)}')
    units = data.get("units", "C")
    if not isinstance(units, str) or units.upper() not in UNITS:
        report(("units",), f'unknown units {units!r}: write "C" or "F"')
        units = "C"
    units = units.upper()
    name = data.get("name", Path(file).stem)
    if not isinstance(name, str) or not name.strip():
        report(("name",), '"name" must be some text, such as "Bench oven"')
        name = "kiln"
    device = data.get("device", {"kind": "sim"})
    if not isinstance(device, Mapping):
        report(("device",), '"device" must be a table: [device] with kind = "sim", "modbus" '
               'or "lines"')
        device = {"kind": "sim"}
    max_raw = data.get("max")
    max_c = SIMULATOR_MAX_C
    if max_raw is None:
        if str(device.get("kind", "sim")) != "sim":
            report((), f'the kiln file needs "max", the kiln\'s highest allowed temperature in '
                   f'°{units} (from its maker\'s plate or manual)')
    elif (isinstance(max_raw, bool) or not isinstance(max_raw, int | float)
          or not finite(max_raw) or max_raw <= 0):
        report(("max",), '"max" must be a temperature, such as 1100')
    else:
        max_c = to_c(float(max_raw), units)
    base_dir = str(Path(file).resolve().parent) if file != "<kiln>" else "."
    for key_path, message in _check_device(device, base_dir):
        report(tuple(key_path), message)
    alarms = parse_limits(data.get("alarms", {}), units, report, ("alarms",))
    mqtt = None
    if "mqtt" in data:
        from tuikiln.alerts.settings import check_mqtt_settings

        mqtt, mqtt_problems = check_mqtt_settings(data["mqtt"], name, base_dir)
        for key_path, message in mqtt_problems:
            report(tuple(key_path), message)
    hooks: list[Any] = []
    if "hook" in data:
        from tuikiln.alerts.settings import check_hooks

        hooks, hook_problems = check_hooks(data["hook"], base_dir)
        for key_path, message in hook_problems:
            report(tuple(key_path), message)
    on_restart = data.get("on_restart", "hold")
    if on_restart not in RESTART_POLICIES:
        report(("on_restart",), f'"on_restart" must be "continue", "hold" or "end", not '
               f"{on_restart!r}{suggest(str(on_restart), RESTART_POLICIES)}")
        on_restart = "hold"
    bell = data.get("bell", True)
    if not isinstance(bell, bool):
        report(("bell",), '"bell" must be true or false')
        bell = True
    if found:
        raise FileProblems(sorted(found, key=lambda p: p.line or 0))
    return Kiln(
        name=name.strip(),
        units=units,
        max_c=max_c,
        device=device,
        alarms=alarms,
        mqtt=mqtt,
        hooks=tuple(hooks),
        on_restart=on_restart,
        bell=bell,
        path=file,
        base_dir=base_dir,
        text=text,
    )


def _check_device(device: Mapping[str, Any], base_dir: str) -> list[tuple[tuple, str]]:
    from tuikiln.drivers.factory import check_device_settings

    return check_device_settings(device, base_dir)
