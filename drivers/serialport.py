"""Plain-words checks of a serial port path, shared by the Modbus and line drivers."""

from __future__ import annotations

import os

from tuikiln.drivers.errors import SettingsError

DIALOUT_HINT = (
    "add yourself to the group that owns the port (usually dialout: "
    "sudo usermod -aG dialout $USER), then log out and in again"
)


def seen_ports() -> list[str]:
    """Serial ports pyserial sees on this machine."""
    try:
        from serial.tools import list_ports
    except ImportError:  # pragma: no cover - pyserial is a dependency
        return []
    return sorted(p.device for p in list_ports.comports())


def ports_words() -> str:
    ports = seen_ports()
    if not ports:
        return "no serial ports are visible (is the USB adapter plugged in?)"
    return "serial ports seen: " + ", ".join(ports)


def port_problem(port: str) -> SettingsError | None:
    """Why `port` cannot be opened (missing, no permission), or None when it looks usable."""
    if not os.path.exists(port):
        return SettingsError(f"there is no serial port {port}", hint=ports_words())
    if not os.access(port, os.R_OK | os.W_OK):
        return SettingsError(f"no permission to open {port}", hint=DIALOUT_HINT)
    return None
