"""A toy driver, written by following docs/CONTRIBUTING.md "A driver".

In the project it would be drivers/file_thermometer.py plus its line in drivers/factory.py;
here it lives with the tests so it does not ship. It watches a temperature that another
program keeps in a text file, in millidegrees Celsius, the way Linux shows its thermal
sensors (`/sys/class/thermal/thermal_zone*/temp`; the unit as the kernel's thermal sysfs
documentation gives it, from memory). It cannot heat or stop heating: runs only watch.

    [device]
    kind = "file"
    path = "/run/oven/temp"
    poll = 2
"""

from __future__ import annotations

import os

from tuikiln.drivers.base import Capabilities, Device, Reading
from tuikiln.drivers.checking import Setting
from tuikiln.drivers.errors import BadReply, LinkLost, NotSupported
from tuikiln.drivers.factory import table_driver


class FileThermometer(Device):
    capabilities = Capabilities(can_write_setpoint=False, can_stop_heating=False)

    def __init__(self, path: str) -> None:
        self.path = path
        self.description = f"temperature file {path}"

    async def connect(self) -> None:
        await self.read()  # says at once when the file is not there

    async def read(self) -> Reading:
        try:
            with open(self.path, encoding="ascii") as handle:
                text = handle.read().strip()
        except (OSError, UnicodeDecodeError) as exc:
            raise LinkLost(f"cannot read {self.path}: {exc}") from exc
        try:
            millidegrees = int(text)
        except ValueError as exc:
            raise BadReply(f"{self.path} holds {text[:40]!r}, not millidegrees") from exc
        return Reading(time=self.clock.now(), chamber_c=millidegrees / 1000.0)

    async def write_setpoint(self, celsius: float) -> None:
        raise NotSupported("a temperature file only watches; it cannot take a setpoint")

    async def stop_heating(self) -> None:
        raise NotSupported("a temperature file only watches; it cannot stop the heat")

    async def close(self) -> None:
        pass


def _build(values: dict, base_dir: str) -> FileThermometer:
    return FileThermometer(os.path.join(base_dir, os.path.expanduser(values["path"])))


KIND = table_driver("file", (
    Setting("path", "text", strip=True, example='"/run/oven/temp"',
            missing='say which file holds the temperature: path = "/run/oven/temp"'),
    Setting("poll", "number", 2.0, 0.1, 3600.0),
), _build)

