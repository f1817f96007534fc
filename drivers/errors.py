"""One small tree of device errors; every driver translates its transport's errors into it.

    DeviceError                 anything that went wrong talking to the oven
    ├── LinkLost                the port or connection is gone (unplugged, refused, closed)
    ├── NoAnswer                the device did not answer in time (address, baud, wiring)
    ├── BadReply                an answer came but made no sense (CRC, garbled, exception code)
    ├── SensorFault             the device says its thermocouple is open or out of range
    ├── NotSupported            the device cannot do this (a monitor-only thermometer)
    └── SettingsError           the device settings are wrong (no such port, no permission,
                                a bad register map); raised before any exchange

Drivers raise these `from` the original exception, so the cause stays in the chain for
developers while users see only the plain message.
"""

from __future__ import annotations


class DeviceError(Exception):
    """Something went wrong talking to the oven. The message is for the user."""

    #: what the person might try, in plain words (shown under the message)
    hint: str = ""

    def __init__(self, message: str, *, hint: str = "") -> None:
        super().__init__(message)
        if hint:
            self.hint = hint


class LinkLost(DeviceError):
    """The port or connection is gone."""


class NoAnswer(DeviceError):
    """The device did not answer in time."""


class BadReply(DeviceError):
    """An answer came but could not be understood."""


class SensorFault(DeviceError):
    """The device reports its thermocouple open or out of range."""


class NotSupported(DeviceError):
    """The device cannot do what was asked (for example a monitor-only thermometer)."""


class SettingsError(DeviceError):
    """The device settings are wrong; found before talking to the device."""
