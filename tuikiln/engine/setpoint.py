"""Keeping the controller on the run's setpoint: the run engine's writes and re-arming.

    keeper = SetpointKeeper(device, units, emit)
    keeper.watch(now, reading, sent_c, heat_off=..., held=...)   # every reading
    keeper.unanswered()                                          # a poll got no answer
    if not await keeper.write(now, setpoint_c): ...              # the device refused it

A moving setpoint is written at most every REWRITE_AFTER_S unless it moved REWRITE_STEP_C
(the driver's own write guard may still hold a write back). A controller that rebooted comes
back with its own setpoint and often stopped: when it reports another setpoint than it was
last really sent (`Device.written_setpoint_c`, never what was only asked for), or "not
running" while the run wants heat, the next write arms it again (stop, then setpoint and
run written afresh) and says so. The first reading after readings that went unanswered
(`keeper.unanswered()`: no answer or a lost link, not a garbled reply) is enough: a
controller that fell silent and came back other than it was sent has most likely rebooted,
and a write meanwhile either failed or was answered, so none is left in flight. Without
that, the run's next regular write could restore a rebooted controller (a driver that
writes "run" with every setpoint) before the readings in a row were counted, and the run
record would never say the controller had lost its setpoint. Re-arms are spaced out,
doubling up to REARM_SPACING_MAX_S, so a controller that never agrees is not stopped and
started for ever.
"""

from __future__ import annotations

import math
from collections.abc import Callable

from tuikiln import events as ev
from tuikiln.drivers.base import Device, Reading
from tuikiln.drivers.errors import DeviceError, NotSupported
from tuikiln.events import Event, Severity
from tuikiln.units import format_temp

REWRITE_AFTER_S = 5.0      # a moving setpoint is written at most this often ...
REWRITE_STEP_C = 1.0       # ... unless it moved at least this much
DEVICE_DRIFT_C = 1.0       # the device holds another setpoint than ours: write it again
DRIFT_TICKS = 3            # ... after this many readings in a row (a write may be in flight)
REARM_SPACING_S = 60.0     # a second re-arm waits this long after the first, the next twice as
REARM_SPACING_MAX_S = 1800.0  # ... long, up to this: a controller that never agrees (a map
                              # reading another register) is not stopped and started for ever
STOPPED_TICKS = 2          # readings of "not running" in a row before the controller is re-armed


class SetpointKeeper:
    def __init__(self, device: Device, units: str, emit: Callable[[Event], None]) -> None:
        self.device = device
        self.units = units
        self.emit = emit
        self._requested_c: float | None = None
        """The setpoint last handed to the driver; its write guard may still hold it back,
        so the device is held against `device.written_setpoint_c`, never against this."""
        self._written_at = -math.inf
        self._drift_ticks = 0
        self._stopped_ticks = 0
        self._rearm = False
        self.rearms = 0
        self._rearm_spacing = REARM_SPACING_S
        self._rearm_not_before = -math.inf
        self._unanswered = False
        """A reading went unanswered since the last good one (a silent or rebooting controller)."""

    def unanswered(self) -> None:
        """A reading got no answer at all (the link dropped, the controller rebooted)."""
        self._unanswered = True

    def forget(self) -> None:
        """Write the setpoint (and run) afresh on the next write."""
        self._requested_c = None

    def watch(self, now: float, reading: Reading, sent_c: float | None, *, heat_off: bool,
              held: bool) -> None:
        """A controller that rebooted or was changed by hand holds another setpoint than the
        one it was last really sent (`sent_c`), or has stopped its output: arm it again on
        the next write. A write the driver held back is not one the controller should hold.
        `heat_off`: the run wants no heat now; `held`: holding safe after a restart.
        Right after unanswered readings one reading of either is enough."""
        after_silence, self._unanswered = self._unanswered, False
        drift_ticks = 1 if after_silence else DRIFT_TICKS
        stopped_ticks = 1 if after_silence else STOPPED_TICKS
        if self._requested_c is None or held:
            self._drift_ticks = self._stopped_ticks = 0
            return
        if (reading.setpoint_c is not None and sent_c is not None
                and abs(reading.setpoint_c - sent_c) > DEVICE_DRIFT_C):
            self._drift_ticks += 1
        else:
            self._drift_ticks = 0
        wants_heat = self._requested_c > 0.0 and not heat_off
        if reading.running is False and wants_heat:
            self._stopped_ticks += 1
        else:
            self._stopped_ticks = 0
        if ((self._drift_ticks >= drift_ticks or self._stopped_ticks >= stopped_ticks)
                and now >= self._rearm_not_before):
            self._rearm = True
            self._drift_ticks = self._stopped_ticks = 0

    async def write(self, now: float, setpoint_c: float) -> bool:
        """Hand `setpoint_c` to the driver (or re-arm the controller with it) unless it is
        too close to the last; False when the device refused setpoints for good."""
        if self._rearm:
            await self._rearm_device(now, setpoint_c)
            return True
        resolution = self.device.capabilities.setpoint_resolution_c
        last = self._requested_c
        if last is not None:
            change = abs(setpoint_c - last)
            if change < resolution * 0.5:
                return True
            if change < REWRITE_STEP_C and now - self._written_at < REWRITE_AFTER_S:
                return True
        try:
            await self.device.write_setpoint(setpoint_c)
        except NotSupported:
            return False
        except DeviceError:
            return True  # the next tick tries again; lost links are the alarms' business
        self._requested_c = setpoint_c
        self._written_at = now
        return True

    async def _rearm_device(self, now: float, setpoint_c: float) -> None:
        """Stop, then setpoint and run afresh: a driver that wrote "run" once writes it
        again after a stop, so a controller that came back stopped starts again."""
        device = self.device
        held = "another setpoint" if self._requested_c is None else (
            f"another setpoint or stopped (ours {format_temp(self._requested_c, self.units)})")
        try:
            if device.capabilities.can_stop_heating:
                await device.stop_heating()
            await device.write_setpoint(setpoint_c)
        except DeviceError:
            return  # the next tick tries again
        self._rearm = False
        self.rearms += 1
        self._rearm_not_before = now + self._rearm_spacing
        self._rearm_spacing = min(self._rearm_spacing * 2.0, REARM_SPACING_MAX_S)
        self._requested_c = setpoint_c
        self._written_at = now
        self.emit(Event(now, ev.DEVICE, f"The controller held {held}: it may have rebooted. "
                        f"Setpoint {format_temp(setpoint_c, self.units)} and run written "
                        "again", Severity.WARNING, {"words": ev.REARMED,
                                             "setpoint_c": setpoint_c}))
