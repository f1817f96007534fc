"""The built-in software oven as a Device, in-process (no serial port, no Modbus).

The only module of `drivers` that imports `simulator`. Its clock is the simulation's:
`now()` is a fixed start plus the simulated seconds, and `sleep(dt)` moves the oven on by
dt -- at once (speed None: as fast as possible) or in dt/speed real seconds.

As fast as possible, `sleep` hands the event loop a turn only every YIELD_EVERY_WALL_S of
wall time, not on every call: a turn of the loop costs about as much as the simulated oven's
own second, and the control socket, signals and sinks' tasks are served just as well 50
times a second.

Faults behave as on a wire: a dropped link or a rebooting controller -> NoAnswer, line
noise -> BadReply for that share of polls, an open thermocouple -> Reading.sensor_fault.
"""

from __future__ import annotations

import asyncio
import math
import random
import time
from collections.abc import Mapping
from typing import Any

from tuikiln.drivers.base import Capabilities, Device, Reading
from tuikiln.drivers.errors import BadReply, NoAnswer
from tuikiln.simulator import SimConfig, SimulatedKiln
from tuikiln.simulator.config import check_sim_settings

# 2026-01-01 00:00:00 UTC: the clock's start when a caller wants stable timestamps.
SIM_EPOCH = 1_767_225_600.0

Problems = list[tuple[tuple[str | int, ...], str]]

YIELD_EVERY_WALL_S = 0.02


def check_sim_table(table: Mapping[str, Any]) -> tuple[SimConfig | None, Problems]:
    """The simulator's own check of a kiln file's [device] table (never raises)."""
    return check_sim_settings({"device": dict(table)})


class SimClock:
    """Simulated time: reading it costs nothing, sleeping moves the oven on."""

    def __init__(self, kiln: SimulatedKiln, speed: float | None, start: float = SIM_EPOCH
                 ) -> None:
        self.kiln = kiln
        self.speed = speed
        self.start = start
        self._yielded_at = -math.inf
        self._paced_from: tuple[float, float] | None = None  # (wall, simulated) pacing origin

    def now(self) -> float:
        return self.start + self.kiln.time_s

    async def sleep(self, seconds: float) -> None:
        seconds = max(0.0, seconds)
        if self.speed is None:
            self.kiln.advance(seconds)
            wall = time.monotonic()
            if wall - self._yielded_at >= YIELD_EVERY_WALL_S:
                await asyncio.sleep(0)
                self._yielded_at = time.monotonic()
            return
        # Real time passes first, so a reading taken meanwhile never comes from the future.
        # Paced against a schedule, not sleep by sleep, so the time the engine and a screen
        # in the same process spend between sleeps does not slow the simulation down.
        wall = time.monotonic()
        if self._paced_from is None or self._paced_from[0] > wall:
            self._paced_from = (wall, self.kiln.time_s)
        start_wall, start_sim = self._paced_from
        due = start_wall + (self.kiln.time_s + seconds - start_sim) / self.speed
        if due < wall - 1.0:  # fell far behind (a stalled loop): do not race to catch up
            self._paced_from = (wall, self.kiln.time_s)
            due = wall + seconds / self.speed
        await asyncio.sleep(max(0.0, due - wall))
        self.kiln.advance(seconds)


class SimulatorDevice(Device):
    clock: SimClock  # the simulation's own clock: `read` stamps readings from its start

    def __init__(self, kiln: SimulatedKiln, speed: float | None = None, *,
                 seed: int = 0, start: float | None = None) -> None:
        self.kiln = kiln
        # Simulated time starts at the wall clock's whole second (so a simulated run is logged
        # on the day it was made), unless the caller fixes it (SIM_EPOCH) for repeatable logs.
        self.clock = SimClock(kiln, speed, float(int(time.time())) if start is None else start)
        config = kiln.config
        self.capabilities = Capabilities(
            can_write_setpoint=True, can_stop_heating=True,
            has_load_thermocouple=bool(kiln.has_load_tc), has_output=True,
            setpoint_resolution_c=0.1,
        )
        shown = "as fast as it goes" if speed is None else f"{speed:g}x"
        self.description = f"built-in simulator ({shown})"
        self._noise = random.Random(seed)
        self._setpoint_max = config.oven.setpoint_max_c
        self.polls = 0

    @classmethod
    def from_config(cls, config: SimConfig, speed: float | None) -> SimulatorDevice:
        return cls(SimulatedKiln(config, seed=config.seed), speed, seed=config.seed)

    def _check_link(self, what: str) -> None:
        if not self.kiln.line_answers:
            raise NoAnswer(f"the simulated controller does not answer ({what})",
                           hint="a simulated link drop or controller reboot; it comes back")
        share = self.kiln.line_noise_share
        if share > 0.0 and self._noise.random() < share:
            raise BadReply(f"damaged reply from the simulated controller ({what})")

    async def connect(self) -> None:
        await asyncio.sleep(0)

    async def read(self) -> Reading:
        self.polls += 1
        kiln = self.kiln
        if not kiln.line_answers or kiln.line_noise_share > 0.0:
            self._check_link("reading")
        r = kiln.read()
        # r.time_s is the kiln's time now, so this is self.clock.now() without the call.
        return Reading(self.clock.start + r.time_s, r.chamber_c, r.load_c, r.setpoint_c,
                       r.output_pct, r.sensor_fault, r.running)

    async def write_setpoint(self, celsius: float) -> None:
        self._check_link("writing the setpoint")
        value = max(0.0, min(float(celsius), self._setpoint_max))
        self.kiln.set_setpoint(value)
        self.kiln.set_running(True)
        self.written_setpoint_c = value

    async def stop_heating(self) -> None:
        self._check_link("stopping the heat")
        self.kiln.set_setpoint(0.0)
        self.kiln.set_running(False)
        self.written_setpoint_c = 0.0

    async def close(self) -> None:
        await asyncio.sleep(0)
