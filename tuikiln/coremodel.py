"""An estimate of the load's core temperature when only the chamber thermocouple exists.

The load is a plate of half thickness L heated from both faces, driven by the measured
chamber temperature Tc through a surface coefficient h_ext: convection plus the radiation of
a small grey body in a large enclosure, eps*sigma*(Tc^4 - Ts^4) written as a coefficient
(Incropera & DeWitt, *Fundamentals of Heat and Mass Transfer*, Eq. 1.9). A foil-wrapped part
has two of those in series: chamber to foil (the foil's emissivity), and foil to part across
the air gap inside the packet (conduction through still air, k/gap, plus radiation between
two parallel grey faces, Incropera Eq. 13.24).

Conduction inside the plate (Biot number Bi = h_ext*L/k, Fourier number Fo = alpha*t/L^2)
follows the published 1-D slab solution (Incropera Sec. 5.5, Eqs. 5.39-5.41; Heisler 1947):
the core's distance from the surroundings decays as C1*exp(-zeta1^2 Fo) once Fo > 0.2, with
zeta1*tan(zeta1) = Bi and C1 = 4 sin(zeta1)/(2 zeta1 + sin(2 zeta1)). The model is two
first-order lags in series, re-evaluated as h_ext changes with temperature: a slow one at
the first mode's rate zeta1^2*alpha/L^2, and a fast one that delays the core so that its
tail is at least C1 times the step (half the rate that gives exactly C1, so it is never
ahead of the full series solution once the core has moved a tenth of the way; at Bi -> 0
both reduce to lumped capacitance, tau = rho*c*L/h). tests/test_coremodel_slab.py checks
this against the series solution; the surface is shown as Tc + (core - Tc)*cos(zeta1), the
first mode's shape, so a cooling core never reads below its surface.

Emissivity and convection in a real oven are uncertain by a factor of two or more (scale,
foil, spacing, a fan or none). A soak clock that starts early under-soaks the part, one that
starts late only costs time, so the model takes values at half the typical ones (emissivity
0.4 against a typical 0.8 for oxidised steel; h 5 W/(m^2 K) against a typical 10 for still
oven air: both typical values from memory, Incropera Table A.11 and Ch. 9; foil emissivity
0.15 against a typical 0.3 and an air gap of 2 mm against a typical 1 mm, from memory), and
ignores the heat taken in through the plate's edges. tests/bench/equalize.py checks this
against the simulator's layered plate, foil or none, from half to twice the typical values.

Shapes: a round bar whose diameter is given as the thickness is estimated as a plate of that
thickness: slower, the safe side. Pieces shading each other in a crowded oven heat more
slowly than one alone, which the factor-two margin covers only in part: give each its room,
or use a load thermocouple.
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
SLOW_FOIL_EMISSIVITY = 0.15
"""Half a typical 0.3 for stainless tool-wrap foil (bright 0.1-0.2, dulled by use; memory)."""
SLOW_FOIL_GAP_M = 0.002
"""Twice a typical 1 mm of air between a hand-folded packet and the part (memory)."""
WRAPS = ("none", "foil")
FAST_LAG_SHARE = 0.5
"""The fast lag runs at this share of the rate that would give the core's tail exactly the
amplitude C1: a little slower, so never ahead of the series solution (see the module text)."""
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


def air_conductivity_w_mk(temp_c: float) -> float:
    """Still air at 1 atm, the chord from 0.0263 W/(m K) at 300 K to 0.0763 at 1200 K through
    Incropera Table A.4 (from memory). Conductivity bends down with temperature, so the chord
    lies below the table between its ends: the slow side."""
    t = min(max(temp_c + KELVIN, 250.0), 1500.0)
    return 0.0263 + (0.0763 - 0.0263) * (t - 300.0) / 900.0


def first_mode(biot: float) -> tuple[float, float]:
    """zeta1 and C1 of the slab's first mode: zeta*tan(zeta) = Bi (Incropera Eqs. 5.39b,
    5.41 and Table 5.1). Safeguarded Newton on zeta*sin(zeta) - Bi*cos(zeta) in (0, pi/2)."""
    if not biot > 0.0:
        return 0.0, 1.0
    lo, hi = 0.0, 0.5 * math.pi
    z = min(math.sqrt(biot / (1.0 + biot / 3.0)), 0.5 * math.pi - 1e-9)
    for _ in range(50):
        s, c = math.sin(z), math.cos(z)
        f = z * s - biot * c
        if f > 0.0:
            hi = z
        else:
            lo = z
        step = f / (s + z * c + biot * s)
        z_new = z - step
        if not lo < z_new < hi:
            z_new = 0.5 * (lo + hi)
        if abs(z_new - z) < 1e-13:
            z = z_new
            break
        z = z_new
    c1 = 4.0 * math.sin(z) / (2.0 * z + math.sin(2.0 * z))
    return z, c1


_MODES: dict[int, tuple[float, float]] = {}
_MODE_STEPS_PER_E = 2000.0


def _first_mode_slow_side(biot: float) -> tuple[float, float]:
    """first_mode of Bi rounded down to a step of 1/2000 in log(Bi) (0.05 %): a lower Bi is
    a slower core, so the rounding keeps the slow side; the cache spares the root finding
    on every reading (Bi moves slowly with the temperature)."""
    if not biot > 0.0:
        return 0.0, 1.0
    key = math.floor(math.log(biot) * _MODE_STEPS_PER_E)
    mode = _MODES.get(key)
    if mode is None:
        if len(_MODES) > 100_000:
            _MODES.clear()
        mode = _MODES[key] = first_mode(math.exp(key / _MODE_STEPS_PER_E))
    return mode


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
                 h_w_m2k: float = SLOW_H_W_M2K, wrap: str = "none",
                 foil_emissivity: float = SLOW_FOIL_EMISSIVITY,
                 foil_gap_m: float = SLOW_FOIL_GAP_M, width_m: float | None = None) -> None:
        if not (thickness_m > 0.0 and math.isfinite(thickness_m)):
            raise ValueError("the load thickness must be more than zero")
        if wrap not in WRAPS:
            raise ValueError(f'the wrap must be "none" or "foil", not "{wrap}"')
        self.steel = steel
        self.thickness_m = thickness_m
        self.emissivity = emissivity
        self.h_w_m2k = h_w_m2k
        self.wrap = wrap
        self.foil_emissivity = foil_emissivity
        self.foil_gap_m = foil_gap_m
        # Radiation between the foil's inner face and the part (Incropera Eq. 13.24).
        self._gap_eps = (1.0 / (1.0 / foil_emissivity + 1.0 / emissivity - 1.0)
                         if foil_emissivity > 0.0 and emissivity > 0.0 else 0.0)
        self.half_m = 0.5 * thickness_m
        self.width_m = width_m if width_m is not None and width_m > 0.0 else None
        self.edge_factor = 1.0 + (thickness_m / self.width_m if self.width_m else 0.0)
        """Edges add t/w to the faces' area (the ends, t/length, are left out: slow side).
        Their heat is taken in as if through the faces, as the simulator does: slower than
        the two-dimensional product solution (Incropera Sec. 5.8), so still the safe side."""
        self.heat_capacity_j_m2k = steel.density_kg_m3 * steel.specific_heat_j_kgk * self.half_m
        self.conduction_s = self.half_m * self.half_m / steel.diffusivity_m2_s
        """L^2/alpha: the Fourier number is elapsed time over this."""
        self.biot = biot_number(steel, thickness_m)
        self.lumped_ok = self.biot < BIOT_LUMPED_LIMIT
        self.surface_c = math.nan
        self.core_c = math.nan
        self._wave_c = math.nan
        self._last_t: float | None = None
        self.advice = self._advice(material_words, thickness_given)

    @classmethod
    def from_load(cls, material: str | None, thickness_m: float | None,
                  wrap: str = "none", width_m: float | None = None) -> LoadModel:
        """The model for a profile's [load] (material text, thickness in metres or None)."""
        _, words = match_material(material)
        given = thickness_m is not None and thickness_m > 0.0
        thickness = thickness_m if thickness_m is not None and given else DEFAULT_THICKNESS_M
        return cls(steel_for(material), thickness,
                   material_words=words, thickness_given=given, wrap=wrap,
                   width_m=width_m if given else None)

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
                         f"conduction delay (Biot number {self.biot:.2f} >= 0.1)")
        if self.wrap == "foil":
            parts.append("wrapped in foil: the foil's low emissivity and the air inside the "
                         "packet slow the heating, and the estimate allows for both")
        parts.append("estimated on the slow side from the chamber temperature; a thermocouple "
                     "on the load is better")
        return "; ".join(parts)

    def reset(self, temp_c: float) -> None:
        """Start again with the whole load at `temp_c` (e.g. room temperature after a quench)."""
        self.surface_c = float(temp_c)
        self.core_c = float(temp_c)
        self._wave_c = float(temp_c)
        self._last_t = None

    def surface_h(self, chamber_c: float, load_c: float | None = None) -> float:
        """h_ext, W/(m^2 K), from the chamber to the part's surface at these temperatures."""
        surface = chamber_c if load_c is None else load_c
        outer = self.h_w_m2k + radiation_h(
            self.foil_emissivity if self.wrap == "foil" else self.emissivity, surface, chamber_c)
        if self.wrap != "foil":
            return outer
        # The foil has next to no heat capacity: it sits where the two conductances balance.
        foil = 0.5 * (surface + chamber_c)
        for _ in range(3):
            outer = self.h_w_m2k + radiation_h(self.foil_emissivity, foil, chamber_c)
            gap = (air_conductivity_w_mk(0.5 * (foil + surface)) / self.foil_gap_m
                   + radiation_h(self._gap_eps, foil, surface))
            foil = (outer * chamber_c + gap * surface) / (outer + gap)
        return 1.0 / (1.0 / outer + 1.0 / gap)

    def time_constant_s(self, chamber_c: float, load_c: float | None = None) -> float:
        """The core's slow time constant, L^2/(alpha*zeta1^2), at these temperatures; rho*c*L/h
        (Incropera Eq. 5.7) for a thin part."""
        return self._rates(chamber_c, load_c)[0]

    def _rates(self, chamber_c: float, load_c: float | None) -> tuple[float, float, float]:
        """(slow time constant, fast time constant, cos zeta1) at these temperatures."""
        h = self.surface_h(chamber_c, load_c) * self.edge_factor
        biot = h * self.half_m / self.steel.conductivity_w_mk
        zeta, c1 = _first_mode_slow_side(biot)
        if zeta <= 0.0:
            return math.inf, 0.0, 1.0
        slow = self.conduction_s / (zeta * zeta)
        # tail amplitude lam2/(lam2 - lam1) = C1 gives lam2 = lam1*C1/(C1 - 1)
        fast = slow * (c1 - 1.0) / (c1 * FAST_LAG_SHARE) if c1 > 1.0 else 0.0
        return slow, fast, math.cos(zeta)

    def update(self, now: float, chamber_c: float, surface_reading_c: float | None = None) -> float:
        """Move the estimate on to `now` with the chamber at `chamber_c`; the core in °C.

        The first call, unless `reset` was used, starts the load at room temperature or the
        chamber's, whichever is lower: a part put into a hot oven is cold, and guessing it
        cold is the slow (safe) side. While the part cools (the chamber below its surface)
        the core is kept at or above the surface, the estimated one and `surface_reading_c`
        (a thermocouple on the load) when given: a cooling core lags above its surface.
        """
        if math.isnan(self.core_c):
            self.reset(min(float(chamber_c), ROOM_C))
        if self._last_t is None or now <= self._last_t:
            self._last_t = now if self._last_t is None else max(self._last_t, now)
            return self._keep_above_surface(chamber_c, surface_reading_c)
        dt = now - self._last_t
        self._last_t = now
        # Exact exponential steps with h linearised per sub-step: stable for any dt, and
        # sub-steps keep each one short against the slow time constant.
        slow, fast, cos_z = self._rates(chamber_c, self.surface_c)
        steps = max(1, min(1000, math.ceil(dt / (0.25 * slow)))) if math.isfinite(slow) else 1
        h = dt / steps
        for step in range(steps):
            if step:
                slow, fast, cos_z = self._rates(chamber_c, self.surface_c)
            if fast > 0.0:
                self._wave_c += (chamber_c - self._wave_c) * -math.expm1(-h / fast)
            else:
                self._wave_c = chamber_c
            if math.isfinite(slow):
                self.core_c += (self._wave_c - self.core_c) * -math.expm1(-h / slow)
            self.surface_c = chamber_c + (self.core_c - chamber_c) * cos_z
        return self._keep_above_surface(chamber_c, surface_reading_c)

    def _keep_above_surface(self, chamber_c: float, reading_c: float | None) -> float:
        surface = self.surface_c
        if reading_c is not None and math.isfinite(reading_c):
            surface = max(surface, reading_c)
        if chamber_c < surface and self.core_c < surface:
            self.core_c = surface
            self._wave_c = max(self._wave_c, surface)
        return self.core_c
