"""Driving a device to the safe state: setpoint down, heating stopped, program stopped.

Called on abort, on a critical alarm, when the engine fails, and on SIGTERM/SIGHUP. It tries
several times (a lost link may come back for a moment) and always says what it managed, so
the person knows whether they must go and switch the oven off by hand.

When the engine's own loop is stuck on a device call (its watchdog fired), the heat is
stopped through a separate path (`stop_heat_separately`): the same device once the stuck
call is cancelled, else a fresh connection (`SafetyWiring.second_connection`).

tuikiln is not a safety device: the oven needs an independent over-temperature limit.
"""

from __future__ import annotations

import asyncio
import contextlib
from collections.abc import Callable
from dataclasses import dataclass

from tuikiln.drivers.base import Device
from tuikiln.drivers.errors import DeviceError, NotSupported

SAFE_SETPOINT_C = 0.0
ATTEMPTS = 3
WATCHDOG_S = 30.0          # a tick unfinished this long (wall time): the loop is stalled
SAFE_PATH_TIMEOUT_S = 10.0  # one attempt at the safe state, per path, may take this long


@dataclass(frozen=True)
class SafetyWiring:
    """How a run engine reaches the heat when its loop cannot: the watchdog's limit, the
    factory of a second connection to the controller, and how long one safe-state attempt
    may take before it counts as unanswered."""

    watchdog_s: float | None = WATCHDOG_S
    """A tick unfinished this long (wall time) stops the run; None: no watchdog."""
    second_connection: Callable[[], Device] | None = None
    """A fresh, unconnected device on the same controller (None: no second path)."""
    path_timeout_s: float = SAFE_PATH_TIMEOUT_S


DEFAULT_SAFETY = SafetyWiring()
"""The watchdog at WATCHDOG_S, no second connection."""


@dataclass(frozen=True)
class SafeResult:
    done: bool
    words: str
    unreached: bool = False
    """The device did not answer (a lost link): trying again later may still succeed."""


async def drive_safe(device: Device, attempts: int = ATTEMPTS,
                     pause_s: float = 1.0) -> SafeResult:
    caps = device.capabilities
    if not caps.can_write_setpoint and not caps.can_stop_heating:
        return SafeResult(False, "this device only reports temperatures: tuikiln cannot turn "
                          "the heat off. Switch the oven off at its controller or mains switch")
    last_error = ""
    unreached = False
    for attempt in range(attempts):
        try:
            if caps.can_stop_heating:
                await device.stop_heating()
                return SafeResult(True, "heating stopped and the setpoint lowered")
            await device.write_setpoint(SAFE_SETPOINT_C)
            return SafeResult(True, "the setpoint was lowered to "
                              f"{SAFE_SETPOINT_C:.0f} °C (this device cannot stop its output)")
        except NotSupported as exc:
            last_error = str(exc)
            break
        except DeviceError as exc:
            last_error = str(exc)
            unreached = True
            if attempt + 1 < attempts:
                try:
                    await device.clock.sleep(pause_s)
                except Exception:  # a clock that cannot sleep must not stop the attempts
                    pass
        except Exception as exc:  # noqa: BLE001 - whatever a driver does, keep trying safe
            last_error = f"{type(exc).__name__}: {exc}"
            unreached = False
    return SafeResult(False, f"could not reach the controller to turn the heat off "
                      f"({last_error}). Switch the oven off by hand now", unreached)


async def stop_heat_separately(device: Device, wiring: SafetyWiring) -> SafeResult:
    """The engine's loop was stuck on `device` and its call is cancelled: try the same
    device once, then a fresh connection (when the wiring has one)."""
    timeout = wiring.path_timeout_s
    try:
        first = await asyncio.wait_for(drive_safe(device, attempts=1), timeout)
        if first.done:
            return first
    except TimeoutError:
        first = SafeResult(False, "the device did not answer the stop")
    if wiring.second_connection is None:
        return first
    spare: Device | None = None
    try:
        spare = wiring.second_connection()
        await asyncio.wait_for(spare.connect(), timeout)
        result = await asyncio.wait_for(drive_safe(spare), timeout * 3)
        if result.done:
            return SafeResult(True, f"{result.words} (through a second connection)")
        return result
    except (TimeoutError, DeviceError) as exc:
        return SafeResult(False, f"could not reach the controller through a second "
                          f"connection either ({exc or type(exc).__name__}). Switch the "
                          "oven off by hand now")
    finally:
        if spare is not None:
            with contextlib.suppress(Exception):
                await spare.close()
