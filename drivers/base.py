"""The one interface every device implements, and the clock the engine follows.

All temperatures here are degrees Celsius; conversion for display happens in tuikiln.
"""

from __future__ import annotations

import asyncio
import time
from abc import ABC, abstractmethod
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Protocol


@dataclass(frozen=True)
class Reading:
    """One poll of the device. None means the device has no such value (or it is unreadable)."""

    time: float
    """Seconds on the device's clock (see `Device.clock`) when the reading was taken."""
    chamber_c: float | None
    """The controlling thermocouple, °C; None when the sensor is faulty or absent."""
    load_c: float | None = None
    """A thermocouple on the load, °C, where there is one."""
    setpoint_c: float | None = None
    """The setpoint the device holds now, °C, where it reports one."""
    output_pct: float | None = None
    """Heater output 0-100 %, where the device reports it."""
    sensor_fault: bool = False
    """The device says a thermocouple is open or over-range."""
    running: bool | None = None
    """Whether the controller's control output is enabled, where it reports it."""
    channels: Mapping[str, float] = field(default_factory=dict)
    """Other temperature channels by name, °C."""
    status: Mapping[str, bool] = field(default_factory=dict)
    """Other status flags by name, as the device's map names them."""


@dataclass(frozen=True)
class Capabilities:
    """What a device can do; the engine watches only when it cannot write a setpoint."""

    can_write_setpoint: bool
    can_stop_heating: bool
    has_load_thermocouple: bool = False
    has_output: bool = False
    setpoint_resolution_c: float = 0.1
    """Smallest setpoint step the device stores; smaller changes are not written."""


class Clock(Protocol):
    """Where the engine gets `now` and how it waits: wall time, or a simulator's time."""

    def now(self) -> float: ...

    async def sleep(self, seconds: float) -> None: ...


class WallClock:
    """Real time: `time.time()` and `asyncio.sleep`."""

    def now(self) -> float:
        return time.time()

    async def sleep(self, seconds: float) -> None:
        await asyncio.sleep(max(0.0, seconds))


class Device(ABC):
    """An oven's controller or thermometer. Use as `async with device: ...`.

    `read`, `write_setpoint` and `stop_heating` raise only `drivers.errors.DeviceError`
    subclasses. `close` never raises.
    """

    capabilities: Capabilities
    description: str = "device"
    clock: Clock = WallClock()
    poll_s: float = 2.0
    """Seconds between polls the device's settings ask for (kiln file `poll`)."""
    written_setpoint_c: float | None = None
    """The setpoint last really written to the device, °C; None when nothing has been written
    since connecting (or the device may have lost it). A write the driver held back (the
    EEPROM write guard) is not written: the engine holds the device's own setpoint against
    this, never against what it asked for."""

    @abstractmethod
    async def connect(self) -> None:
        """Open the port or connection and check the device answers."""

    @abstractmethod
    async def read(self) -> Reading:
        """Poll the device once."""

    @abstractmethod
    async def write_setpoint(self, celsius: float) -> None:
        """Set the controller's setpoint (NotSupported on monitor-only devices)."""

    @abstractmethod
    async def stop_heating(self) -> None:
        """Drive to a safe state: setpoint down and output off, as far as the device allows."""

    @abstractmethod
    async def close(self) -> None:
        """Release the port; never raises."""

    async def __aenter__(self) -> Device:
        await self.connect()
        return self

    async def __aexit__(self, *_exc_info: object) -> None:
        await self.close()  # whatever happened inside, the port is let go
