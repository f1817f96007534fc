"""Talking to ovens: one small async interface, several implementations.

`drivers` knows nothing of the engine or the screens (see DEVELOPERS.md).
"""

from __future__ import annotations

from tuikiln.drivers.base import Capabilities, Clock, Device, Reading, WallClock
from tuikiln.drivers.errors import (
    BadReply,
    DeviceError,
    LinkLost,
    NoAnswer,
    NotSupported,
    SensorFault,
    SettingsError,
)

__all__ = [
    "BadReply",
    "Capabilities",
    "Clock",
    "Device",
    "DeviceError",
    "LinkLost",
    "NoAnswer",
    "NotSupported",
    "Reading",
    "SensorFault",
    "SettingsError",
    "WallClock",
]
