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

from tuikiln.drivers.checking import Problems, Setting, check_table
from tuikiln.engine.states import RestartPolicy
from tuikiln.errors import FileProblems, Problem
from tuikiln.limits import parse_limits
from tuikiln.tomllines import LineMap, load_toml, read_text
from tuikiln.units import UNITS, Units, finite, to_c

RESTART_POLICIES = tuple(RestartPolicy)
SIMULATOR_MAX_C = 1200.0
# The kiln file's top-level keys (tuikiln.drivers.checking checks them). `max` needs code:
# its units, and whether a real device makes it required; the tables have their checkers.
KILN: tuple[Setting, ...] = (
    Setting("name", "text", strip=True, example='"Bench oven"'),
    Setting("units", "choice", "C", choices=UNITS, any_case=True),
    Setting("max"),
    Setting("device", "table", {"kind": "sim"},
            example='[device] with kind = "sim", "modbus" or "lines"'),
    Setting("alarms", "any", {}),
    Setting("mqtt"),
    Setting("hook"),
    Setting("on_restart", "choice", RestartPolicy.HOLD, choices=RESTART_POLICIES),
    Setting("bell", "flag", True),
)


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
    on_restart: RestartPolicy = RestartPolicy.HOLD
    """After a crash or power cut: continue the run, hold safe for a person, or end it."""
    bell: bool = True
    path: str | None = None
    base_dir: str = "."
    text: str = ""
    """The file's text as loaded (stored with every run; secrets live in other files)."""
    channels: Mapping[str, Mapping[str, Any]] = field(default_factory=dict)
    """Checked values of each registered alert channel's table (tuikiln.alerts.channels)."""

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

    from tuikiln.alerts.channels import CHANNELS, check_channel

    settings: Problems = []
    values = check_table(data, KILN, (), settings, also=CHANNELS)
    for key_path, message in settings:
        report(key_path, message)
    units = values["units"]
    name = values["name"] or Path(file).stem or "kiln"
    device = values["device"]
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
    channels: dict[str, Mapping[str, Any]] = {}
    for table in CHANNELS:
        if table in data:
            checked, channel_problems = check_channel(table, data[table], base_dir)
            for key_path, message in channel_problems:
                report(tuple(key_path), message)
            if checked is not None:
                channels[table] = checked
    on_restart, bell = values["on_restart"], values["bell"]
    if found:
        raise FileProblems(sorted(found, key=lambda p: p.line or 0))
    return Kiln(
        name=name,
        units=units,
        max_c=max_c,
        device=device,
        alarms=alarms,
        mqtt=mqtt,
        hooks=tuple(hooks),
        on_restart=RestartPolicy(on_restart),
        bell=bell,
        path=file,
        base_dir=base_dir,
        text=text,
        channels=channels,
    )


def _check_device(device: Mapping[str, Any], base_dir: str) -> list[tuple[tuple, str]]:
    from tuikiln.drivers.factory import check_device_settings

    return check_device_settings(device, base_dir)
