"""A scripted device for tests: canned readings or a first-order oven, with errors on cue.

    dev = ScriptedDevice(readings=[20.0, 25.0, Reading(...)])   # one per poll, then the last
    dev = ScriptedDevice(model=FirstOrderOven(tau_s=600))        # follows the setpoint
    dev = ScriptedDevice(errors={3: NoAnswer("silent")})         # poll 3 (0-based) raises

It records every setpoint write (`setpoint_writes`: (time, °C)) and stop_heating call
(`stop_calls`: times). Its clock is a ManualClock whose `sleep` advances time at once, so a
test of an hour-long run takes milliseconds.
"""

from __future__ import annotations

import asyncio
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

from tuikiln.drivers.base import Capabilities, Device, Reading
from tuikiln.drivers.errors import DeviceError, NotSupported


class ManualClock:
    """Time that moves only when someone sleeps (or calls `advance`)."""

    def __init__(self, start: float = 0.0) -> None:
        self.time = start
        self._listeners: list[Callable[[float], None]] = []

    def now(self) -> float:
        return self.time

    def advance(self, seconds: float) -> None:
        seconds = max(0.0, seconds)
        self.time += seconds
        for listener in self._listeners:
            listener(seconds)

    def on_advance(self, listener: Callable[[float], None]) -> None:
        self._listeners.append(listener)

    async def sleep(self, seconds: float) -> None:
        self.advance(seconds)
        await asyncio.sleep(0)


@dataclass
class FirstOrderOven:
    """Chamber temperature approaches a target with time constant `tau_s`.

    The target is the setpoint while heating is on (capped at `max_c`), room when off.
    """

    room_c: float = 20.0
    tau_s: float = 600.0
    max_c: float = 1200.0
    temperature_c: float = 20.0
    setpoint_c: float = 0.0
    heating: bool = True

    def advance(self, dt: float) -> None:
        target = min(self.setpoint_c, self.max_c) if self.heating else self.room_c
        target = max(target, self.room_c)
        self.temperature_c = target + (self.temperature_c - target) * math.exp(-dt / self.tau_s)

    def output_pct(self) -> float:
        if not self.heating:
            return 0.0
        gap = self.setpoint_c - self.temperature_c
        return max(0.0, min(100.0, gap * 5.0))


ScriptItem = float | None | Reading


class ScriptedDevice(Device):
    def __init__(
        self,
        readings: Sequence[ScriptItem] | None = None,
        *,
        model: FirstOrderOven | None = None,
        errors: Mapping[int, DeviceError] | None = None,
        capabilities: Capabilities | None = None,
        clock: ManualClock | None = None,
        connect_error: DeviceError | None = None,
        description: str = "scripted device",
    ) -> None:
        if readings is None and model is None:
            model = FirstOrderOven()
        self.readings = list(readings or [])
        self.model = model
        self.errors = dict(errors or {})
        self.capabilities = capabilities or Capabilities(
            can_write_setpoint=True, can_stop_heating=True, has_output=model is not None
        )
        self.clock = clock or ManualClock()
        if model is not None:
            self.clock.on_advance(model.advance)
        self.connect_error = connect_error
        self.description = description
        self.polls = 0
        self.connected = False
        self.closed = False
        self.setpoint_c: float | None = None
        self.setpoint_writes: list[tuple[float, float]] = []
        self.stop_calls: list[float] = []

    async def connect(self) -> None:
        if self.connect_error is not None:
            raise self.connect_error
        self.connected = True
        self.closed = False

    async def read(self) -> Reading:
        poll = self.polls
        self.polls += 1
        if poll in self.errors:
            raise self.errors[poll]
        now = self.clock.now()
        if self.model is not None and not self.readings:
            return Reading(
                time=now,
                chamber_c=self.model.temperature_c,
                setpoint_c=self.setpoint_c,
                output_pct=self.model.output_pct(),
                running=self.model.heating,
            )
        item = self.readings[min(poll, len(self.readings) - 1)] if self.readings else None
        if isinstance(item, Reading):
            return item
        return Reading(time=now, chamber_c=item, setpoint_c=self.setpoint_c,
                       sensor_fault=item is None)

    async def write_setpoint(self, celsius: float) -> None:
        if not self.capabilities.can_write_setpoint:
            raise NotSupported(f"{self.description} cannot take a setpoint")
        self.setpoint_c = self.written_setpoint_c = celsius
        self.setpoint_writes.append((self.clock.now(), celsius))
        if self.model is not None:
            self.model.setpoint_c = celsius
            self.model.heating = True

    async def stop_heating(self) -> None:
        if not self.capabilities.can_stop_heating:
            raise NotSupported(f"{self.description} cannot stop the heat")
        self.stop_calls.append(self.clock.now())
        self.setpoint_c = self.written_setpoint_c = 0.0
        if self.model is not None:
            self.model.setpoint_c = 0.0
            self.model.heating = False

    async def close(self) -> None:
        self.connected = False
        self.closed = True
