"""Register layouts ("personalities") the simulated controller can present on the wire.

Real controllers put the same quantities in very different places; these layouts let the
tests (and a user writing a map) meet several of them with one simulated oven:

    sim                 holding registers 0..5, tenths of °C (drivers/maps/sim.toml)
    whole-degree-coil   whole °C in input registers, EEPROM setpoint at holding 256, run
                        coil 0, sensor-fault discrete input 0 (drivers/maps/whole-degree-coil.toml)
    fahrenheit-float    float32 °F, low word first, from holding 1000; RAM setpoint at 1100,
                        mode register 1110 (drivers/maps/fahrenheit-float.toml)

`sim serve` presents the one `--layout` names, else the kiln file's `[device] layout`
(config.LAYOUT_NAMES lists these names), else "sim". The README's "Your controller" has a
table of the function codes and addresses each answers.

Each layout gives a snapshot of its four tables (coils, discrete inputs, holding and input
registers: address -> value) and applies writes; an address it does not hold is refused
with Modbus exception 2 (illegal data address), a value it cannot take with exception 3.
"""

from __future__ import annotations

import math
import struct
from collections.abc import Sequence

from tuikiln.simulator.kiln import RegisterError, SimulatedKiln

COILS, DISCRETE, HOLDING, INPUT = "coils", "discrete", "holding", "input"
Tables = dict[str, dict[int, int]]


class Layout:
    """The built-in layout (holding registers 0..5), kept in `SimulatedKiln` itself."""

    name = "sim"
    writable: dict[str, frozenset[int]] = {HOLDING: frozenset({1, 4})}

    def __init__(self) -> None:
        self.setpoint_writes = 0

    def tables(self, kiln: SimulatedKiln) -> Tables:
        return {COILS: {}, DISCRETE: {}, INPUT: {},
                HOLDING: dict(enumerate(kiln.registers()))}

    def write(self, kiln: SimulatedKiln, table: str, start: int, values: Sequence[int]) -> None:
        """Apply a write whose addresses `check_writable` accepted."""
        for offset, value in enumerate(values):
            if start + offset == 1:
                self.setpoint_writes += 1
            kiln.write_register(start + offset, value)

    def check_writable(self, table: str, start: int, count: int) -> None:
        allowed = self.writable.get(table, frozenset())
        if any(start + i not in allowed for i in range(count)):
            # refuse it all rather than write a part
            raise RegisterError(2, f"{table} {start}..{start + count - 1} are not writable")


def _whole(celsius: float | None, open_value: int = 9999) -> int:
    if celsius is None:
        return open_value
    return max(-32768, min(32767, round(celsius))) & 0xFFFF


def _signed(word: int) -> int:
    return word - 0x10000 if word >= 0x8000 else word


class WholeDegreeCoil(Layout):
    """Whole degrees, an EEPROM setpoint and a run coil (output off until it is written)."""

    name = "whole-degree-coil"
    SETPOINT = 256
    writable = {HOLDING: frozenset({SETPOINT}), COILS: frozenset({0})}

    def tables(self, kiln: SimulatedKiln) -> Tables:
        r = kiln.read()
        return {
            INPUT: {0: _whole(r.chamber_c), 1: _whole(r.load_c),
                    2: round(r.output_pct) & 0xFFFF},
            HOLDING: {self.SETPOINT: _whole(r.setpoint_c)},
            COILS: {0: int(r.running)},
            DISCRETE: {0: int(r.sensor_fault)},
        }

    def write(self, kiln: SimulatedKiln, table: str, start: int, values: Sequence[int]) -> None:
        if table == COILS:
            kiln.set_running(bool(values[0]))
            return
        celsius = float(_signed(values[0]))
        if not 0.0 <= celsius <= kiln.config.oven.setpoint_max_c:
            raise RegisterError(3, f"setpoint {celsius:g} °C is out of range")
        self.setpoint_writes += 1  # each one an EEPROM write on a real controller
        kiln.set_setpoint(celsius)


def _f(celsius: float | None) -> float:
    return math.nan if celsius is None else celsius * 9.0 / 5.0 + 32.0


def _float_words(value: float) -> tuple[int, int]:
    """float32 with the low word first."""
    high, low = struct.unpack(">HH", struct.pack(">f", value))
    return low, high


class FahrenheitFloat(Layout):
    """float32 °F, low word first, from holding 1000; a RAM setpoint and a mode register."""

    name = "fahrenheit-float"
    RAM_SETPOINT = 1100
    MODE = 1110
    RUN, STANDBY = 2, 1
    writable = {HOLDING: frozenset({RAM_SETPOINT, RAM_SETPOINT + 1, MODE})}

    def __init__(self) -> None:
        super().__init__()
        self.ram_words = list(_float_words(32.0))

    def tables(self, kiln: SimulatedKiln) -> Tables:
        r = kiln.read()
        holding: dict[int, int] = {}
        for address, value in ((1000, r.chamber_c), (1002, r.setpoint_c), (1004, r.load_c)):
            low, high = _float_words(_f(value))
            holding[address], holding[address + 1] = low, high
        holding[1006] = round(r.output_pct * 10.0) & 0xFFFF
        holding[1007] = (1 if r.running else 0) | (8 if r.sensor_fault else 0)
        holding[self.RAM_SETPOINT], holding[self.RAM_SETPOINT + 1] = self.ram_words
        holding[self.MODE] = self.RUN if r.running else self.STANDBY
        return {HOLDING: holding, INPUT: {}, COILS: {}, DISCRETE: {}}

    def write(self, kiln: SimulatedKiln, table: str, start: int, values: Sequence[int]) -> None:
        words = dict(zip(range(start, start + len(values)), values, strict=True))
        if self.MODE in words:
            if words[self.MODE] not in (self.RUN, self.STANDBY):
                raise RegisterError(3, f"mode takes 1 or 2, not {words[self.MODE]}")
            kiln.set_running(words[self.MODE] == self.RUN)
        halves = [words.get(self.RAM_SETPOINT + i) for i in (0, 1)]
        if halves == [None, None]:
            return
        if None in halves:
            raise RegisterError(3, "write both words of the float setpoint in one request")
        low, high = words[self.RAM_SETPOINT], words[self.RAM_SETPOINT + 1]
        fahrenheit = struct.unpack(">f", struct.pack(">HH", high, low))[0]
        celsius = (fahrenheit - 32.0) * 5.0 / 9.0
        if not (math.isfinite(celsius) and 0.0 <= celsius <= kiln.config.oven.setpoint_max_c):
            raise RegisterError(3, f"setpoint {fahrenheit:g} °F is out of range")
        self.ram_words = [low, high]
        self.setpoint_writes += 1
        kiln.set_setpoint(celsius)


LAYOUTS: dict[str, type[Layout]] = {
    cls.name: cls for cls in (Layout, WholeDegreeCoil, FahrenheitFloat)
}
