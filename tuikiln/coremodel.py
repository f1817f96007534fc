"""An estimate of the load's core temperature when only the chamber thermocouple exists.

The load is a plate heated from both faces; per unit of face area its surface node obeys the
lumped-capacitance balance (Incropera & DeWitt, *Fundamentals of Heat and Mass Transfer*,
Ch. 5.1-5.3; Cengel, *Heat and Mass Transfer*, Ch. 4-1):

    rho * c * Lc * dTs/dt = h * (Tc - Ts) + eps * sigma * (Tc^4 - Ts^4),    Lc = V/A

driven by the measured chamber temperature Tc, with the radiation of a small grey body in a
large enclosure. The core follows the surface through a first-order conduction lag of
L^2/alpha (L = half thickness, alpha = k/(rho c)): the slab's slowest mode decays with
4L^2/(pi^2 alpha), so the lag used is about 2.5 times the real one, on purpose.

Emissivity and convection in a real oven are uncertain by a factor of two or more (scale,
foil wraps, spacing, a fan or none). A soak clock that starts early under-soaks the part,
one that starts late only costs time, so the model takes values below half the typical ones
(emissivity 0.35 against a typical 0.8 for oxidised steel; h 4 W/(m^2 K) against a typical
10 for still oven air: both typical values from memory, Incropera Table A.11 and Ch. 9), and
ignores the heat taken in through the plate's edges. The estimate therefore lags a real load
whose values are anywhere from half to twice the typical ones (tests/bench/equalize.py checks
this against the simulator's layered plate).

Shapes: a round bar whose diameter is given as the thickness is estimated as a plate of that
thickness (Lc = D/2 instead of the cylinder's D/4): slower, the safe side. Pieces shading
each other in a crowded oven heat more slowly than one alone, which the factor-two margin
covers only in part: give each its room, or use a load thermocouple.
"""

from __future__ import annotations

import math

from tuikiln.materials import Steel, match_material, steel_for
from tuikiln.units import ROOM_C

SIGMA = 5.670374419e-8  # Stefan-Boltzmann constant, W/(m^2 K^4), CODATA 2018 (exact)
KELVIN = 273.15

TYPICAL_EMISSIVITY = 0.8  # oxidised steel, from memory (Incropera Table A.11: 0.79 at 800 K)
TYPICAL_H_W_M2K = 10.0  # still air in a small oven, free convection; from memory
SLOW_EMISSIVITY = 0.4  # half the typical: the model must never run ahead of the load
SLOW_H_W_M2K = 5.0
DEFAULT_THICKNESS_M = 0.025
"""With no thickness given, assume a thick part (25 mm): slow, so never early."""
BIOT_LUMPED_LIMIT = 0.1
"""Lumped capacitance holds for Bi < 0.1 (Incropera Sec. 5.2, Eq. 5.10; Cengel Sec. 4-1)."""
BIOT_AT_C = 1000.0
"""The Biot number is judged at a hardening temperature, where radiation makes h largest."""


def radiation_h(emissivity: float, surface_c: float, surroundings_c: float) -> float:
    """eps*sigma*(Ts^2 + Tc^2)(Ts + Tc): radiation written as a heat-transfer coefficient
    (Incropera Eq. 1.9); about 4*eps*sigma*T^3 when the two are close."""
    ts, tc = surface_c + KELVIN, surroundings_c + KELVIN
    return emissivity * SIGMA * (ts * ts + tc * tc) * (ts + tc)


def biot_number(steel: Steel, thickness_m: float, at_c: float = BIOT_AT_C,
                emissivity: float = TYPICAL_EMISSIVITY, h_w_m2k: float = TYPICAL_H_W_M2K) -> float:
    """Bi = h*Lc/k with Lc = V/A = half the thickness of a plate heated on both faces and h
    including the linearised radiation 4*eps*sigma*T^3 (Incropera Sec. 5.2)."""
    t = at_c + KELVIN
    h_total = h_w_m2k + 4.0 * emissivity * SIGMA * t**3
    return h_total * (0.5 * thickness_m) / steel.conductivity_w_mk


class LoadModel:
    """The slow-side estimate of a plate's core temperature, driven by the chamber reading."""

    def __init__(self, steel: Steel, thickness_m: float, *, material_words: str = "",
                 thickness_given: bool = True, emissivity: float = SLOW_EMISSIVITY,
                 h_w_m2k: float = SLOW_H_W_M2K) -> None:
        if not (thickness_m > 0.0 and math.isfinite(thickness_m)):
            raise ValueError("the load thickness must be more than zero")
        self.steel = steel
        self.thickness_m = thickness_m
        self.emissivity = emissivity
        self.h_w_m2k = h_w_m2k
        half = 0.5 * thickness_m
        self.heat_capacity_j_m2k = steel.density_kg_m3 * steel.specific_heat_j_kgk * half
        self.conduction_lag_s = half * half / steel.diffusivity_m2_s
        self.biot = biot_number(steel, thickness_m)
        self.lumped_ok = self.biot < BIOT_LUMPED_LIMIT
        self.surface_c = math.nan
        self.core_c = math.nan
        self._last_t: float | None = None
        self.advice = self._advice(material_words, thickness_given)

    @classmethod
    def from_load(cls, material: str | None, thickness_m: float | None) -> LoadModel:
        """The model for a profile's [load] (material text, thickness in metres or None)."""
        _, words = match_material(material)
        given = thickness_m is not None and thickness_m > 0.0
        thickness = thickness_m if thickness_m is not None and given else DEFAULT_THICKNESS_M
        return cls(steel_for(material), thickness,
                   material_words=words, thickness_given=given)

    def _advice(self, material_words: str, thickness_given: bool) -> str:
        parts = []
        if material_words:
            parts.append(material_words)
        if not thickness_given:
            parts.append(f"no thickness given: estimated as {DEFAULT_THICKNESS_M * 1000:.0f} mm "
                         "(slow); give [load] thickness for a closer estimate")
        if self.lumped_ok:
            parts.append(f"thin section (Biot number {self.biot:.2f} < 0.1): the core keeps "
                         "up with the surface")
        else:
            parts.append(f"thick section: the core lags the surface; the estimate adds a "
                         f"conduction delay (Biot number {self.biot:.2f} >= 0.1, delay "
                         f"{self.conduction_lag_s:.0f} s)")
        parts.append("estimated on the slow side from the chamber temperature; a thermocouple "
                     "on the load is better")
        return "; ".join(parts)

    def reset(self, temp_c: float) -> None:
        """Start again with the whole load at `temp_c` (e.g. room temperature after a quench)."""
        self.surface_c = float(temp_c)
        self.core_c = float(temp_c)
        self._last_t = None

    def time_constant_s(self, chamber_c: float, load_c: float | None = None) -> float:
        """rho*c*Lc/(h + h_rad) at these temperatures (Incropera Eq. 5.7), in seconds."""
        surface = chamber_c if load_c is None else load_c
        h = self.h_w_m2k + radiation_h(self.emissivity, surface, chamber_c)
        return self.heat_capacity_j_m2k / h

    def update(self, now: float, chamber_c: float) -> float:
        """Move the estimate on to `now` with the chamber at `chamber_c`; the core in °C.

        The first call, unless `reset` was used, starts the load at room temperature or the
        chamber's, whichever is lower: a part put into a hot oven is cold, and guessing it
        cold is the slow (safe) side.
        """
        if math.isnan(self.core_c):
            self.reset(min(float(chamber_c), ROOM_C))
        if self._last_t is None or now <= self._last_t:
            self._last_t = now if self._last_t is None else max(self._last_t, now)
            return self.core_c
        dt = now - self._last_t
        self._last_t = now
        # Exact exponential steps with h linearised per sub-step: stable for any dt, and
        # sub-steps keep each one short against the time constants.
        tau = self.time_constant_s(chamber_c, self.surface_c)
        steps = max(1, min(1000, math.ceil(dt / (0.25 * tau))))
        h = dt / steps
        for _ in range(steps):
            tau = self.time_constant_s(chamber_c, self.surface_c)
            self.surface_c += (chamber_c - self.surface_c) * -math.expm1(-h / tau)
            self.core_c += (self.surface_c - self.core_c) * -math.expm1(-h / self.conduction_lag_s)
        return self.core_c
