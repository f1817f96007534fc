"""A software oven and its controller, for tests, demos and first runs without hardware.

Imports nothing of tuikiln or drivers. See `simulator.config` for every setting and its unit.
"""

from __future__ import annotations

from tuikiln.simulator.config import (
    FAULT_KINDS,
    Fault,
    LoadConfig,
    OvenConfig,
    SimConfig,
    check_sim_settings,
    parse_duration,
    parse_fault,
)
from tuikiln.simulator.kiln import RegisterError, SimReading, SimTruth, SimulatedKiln

__all__ = [
    "FAULT_KINDS",
    "Fault",
    "LoadConfig",
    "OvenConfig",
    "RegisterError",
    "SimConfig",
    "SimReading",
    "SimTruth",
    "SimulatedKiln",
    "check_sim_settings",
    "parse_duration",
    "parse_fault",
]
