"""Driving a device to the safe state: setpoint down, heating stopped, program stopped.

Called on abort, on a critical alarm, when the engine fails, and on SIGTERM/SIGHUP. It tries
several times (a lost link may come back for a moment) and always says what it managed, so
the person knows whether they must go and switch the oven off by hand.

tuikiln is not a safety device: the oven needs an independent over-temperature limit.
"""

from __future__ import annotations

from dataclasses import dataclass

from tuikiln.drivers.base import Device
from tuikiln.drivers.errors import DeviceError, NotSupported

SAFE_SETPOINT_C = 0.0
ATTEMPTS = 3


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
