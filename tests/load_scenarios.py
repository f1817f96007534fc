"""Estimate-only equalization on the simulator, one scenario at a time: shared by
tests/test_load_equalize.py (a few scenarios, more with `--slow`) and the benchmark
tests/bench/load_equalize.py (the lateness figures).

The simulator knows the true core temperature; the estimate never sees it. A scenario is a
plate 2-60 mm thick, bare or sealed in foil, in one of three ovens, heated by one of three
ramp shapes to a hardening or tempering hold watched from when the chamber reaches the band
(as the engine does). The oven's real heat transfer (emissivity, convection, and for foil
the foil's emissivity and the air gap) is drawn from half to twice the typical values,
independently of the estimate's own slow-side assumptions.

Truth: the time the simulated core enters the band for good. Lateness = declared - truth;
negative is early, the one thing that must never happen.
"""

from __future__ import annotations

import math
import random
from dataclasses import dataclass, replace

from tuikiln.equalize import LoadWatch
from tuikiln.limits import Limits
from tuikiln.simulator import LoadConfig, OvenConfig, SimConfig, SimulatedKiln

TYPICAL_EPS, TYPICAL_H = 0.8, 10.0  # the simulator's defaults: oxidised steel, still air
TYPICAL_FOIL_EPS, TYPICAL_GAP_M = 0.3, 0.001  # the simulator's foil defaults (memory)
MATERIALS = {"carbon steel": "1084", "tool steel": "AISI O1", "stainless": "440C"}
# Ovens: the default bench-top one, and two larger ones of our own invention.
OVENS = {
    "bench 4.5 l": OvenConfig(),
    "mid 12 l": OvenConfig(heater_w=3600.0, chamber_litres=12.0, chamber_heat_capacity_j_k=5000.0,
                           leak_area_m2=0.008),
    "big 30 l": OvenConfig(heater_w=7000.0, chamber_litres=30.0,
                           chamber_heat_capacity_j_k=11000.0, wall_thickness_m=0.11,
                           leak_area_m2=0.012),
}
SHAPES = ("max", "rate", "staged")
"""Straight to the target; a steady N/h ramp; a preheat hold at 650 °C then straight up."""
AFTER_S = 1200.0  # run on this long past both truth and declaration, to see the core stays
PREHEAT_C, PREHEAT_S = 650.0, 1200.0


@dataclass(frozen=True)
class Scenario:
    seed: int
    thickness_m: float
    width_m: float
    width_given: bool
    wrap: str
    material: str
    oven: str
    shape: str
    target_c: float
    rate_c_per_h: float
    eps_factor: float = 1.0
    h_factor: float = 1.0
    foil_eps_factor: float = 1.0
    gap_factor: float = 1.0
    noise_c: float = 0.5

    def words(self) -> str:
        return (f"{self.thickness_m * 1000:.0f} mm x {self.width_m * 1000:.0f} mm"
                f"{'' if self.width_given else ' (width not given)'} {self.material}, "
                f"{self.wrap}, {self.oven}, {self.shape} to {self.target_c:.0f} °C, "
                f"eps x{self.eps_factor:.2f} h x{self.h_factor:.2f}"
                + (f" foil eps x{self.foil_eps_factor:.2f} gap x{self.gap_factor:.2f}"
                   if self.wrap == "foil" else ""))


@dataclass(frozen=True)
class Outcome:
    scenario: Scenario
    truth_s: float | None
    declared_s: float | None
    reached_s: float | None
    core_at_declared_c: float | None

    @property
    def late_s(self) -> float | None:
        if self.truth_s is None or self.declared_s is None:
            return None
        return self.declared_s - self.truth_s


def _factor(rng: random.Random) -> float:
    return math.exp(rng.uniform(math.log(0.5), math.log(2.0)))


def draw(rng: random.Random, seed: int) -> Scenario:
    thickness = math.exp(rng.uniform(math.log(0.002), math.log(0.060)))
    temper = rng.random() < 0.3
    oven = rng.choice(list(OVENS))
    if thickness > 0.03 and oven == "bench 4.5 l":
        oven = "mid 12 l"  # a 60 mm block does not go into a 16 cm chamber
    return Scenario(
        seed=seed, thickness_m=thickness,
        width_m=max(thickness, rng.uniform(0.04, 0.1)), width_given=rng.random() < 0.5,
        wrap="foil" if rng.random() < 0.5 else "none",
        material=rng.choice(list(MATERIALS)), oven=oven, shape=rng.choice(SHAPES),
        target_c=rng.uniform(170.0, 260.0) if temper else rng.uniform(800.0, 1060.0),
        rate_c_per_h=rng.uniform(200.0, 600.0),
        eps_factor=_factor(rng), h_factor=_factor(rng), foil_eps_factor=_factor(rng),
        gap_factor=_factor(rng), noise_c=rng.uniform(0.0, 2.0))


def setpoint_at(sc: Scenario, t: float, room_c: float) -> float:
    if sc.shape == "rate" or (sc.shape == "staged" and sc.target_c <= PREHEAT_C):
        return min(sc.target_c, room_c + sc.rate_c_per_h * t / 3600.0)
    if sc.shape == "staged":
        to_preheat = (PREHEAT_C - room_c) / sc.rate_c_per_h * 3600.0
        if t < to_preheat:
            return room_c + sc.rate_c_per_h * t / 3600.0
        return PREHEAT_C if t < to_preheat + PREHEAT_S else sc.target_c
    return sc.target_c


def simulate(sc: Scenario, limits: Limits | None = None, max_s: float = 14 * 3600.0) -> Outcome:
    limits = limits or Limits()
    load = LoadConfig.of_material(
        sc.material, thickness_m=sc.thickness_m, width_m=sc.width_m, length_m=0.15,
        emissivity=min(1.0, TYPICAL_EPS * sc.eps_factor), h_w_m2k=TYPICAL_H * sc.h_factor,
        wrap=sc.wrap, foil_emissivity=min(1.0, TYPICAL_FOIL_EPS * sc.foil_eps_factor),
        foil_gap_m=TYPICAL_GAP_M * sc.gap_factor)
    config = replace(SimConfig(), oven=OVENS[sc.oven], load=load, load_thermocouple=False,
                     noise_c=sc.noise_c, resolution_c=1.0, seed=sc.seed, speed=None)
    kiln = SimulatedKiln(config, seed=sc.seed)
    kiln.set_running(True)
    watch = LoadWatch(MATERIALS[sc.material], sc.thickness_m, wrap=sc.wrap,
                      width_m=sc.width_m if sc.width_given else None,
                      window_s=limits.equalize_window,
                      slope_limit_c_per_s=limits.equalize_slope / 60.0,
                      confirm_s=limits.equalize_confirm)
    band, room = limits.band, config.room_c
    t = 0.0
    reached = declared = None
    entered: float | None = None  # when the true core last came into the band
    core_at_declared = None
    end = max_s
    while t < end:
        kiln.set_setpoint(setpoint_at(sc, t, room))
        kiln.advance(1.0)
        t += 1.0
        reading = kiln.read()
        core = kiln.truth.load_core_c
        assert core is not None
        inside = abs(core - sc.target_c) <= band
        if not inside:
            entered = None
        elif entered is None:
            entered = t
        if reached is None and reading.chamber_c is not None and t > _final_climb(sc, room) \
                and abs(reading.chamber_c - sc.target_c) <= band:
            reached = t
            watch.begin_hold(sc.target_c, band)
        status = watch.update(t, reading.chamber_c, reading.load_c)
        if declared is None and status is not None and status.equalized:
            declared = status.since
            core_at_declared = core
        if declared is not None and entered is not None:
            end = min(end, max(declared, entered) + AFTER_S)
    return Outcome(sc, entered, declared, reached, core_at_declared)


def _final_climb(sc: Scenario, room_c: float) -> float:
    """The hold is watched only on the last climb (not while passing the preheat)."""
    if sc.shape != "staged" or sc.target_c <= PREHEAT_C:
        return 0.0
    return (PREHEAT_C - room_c) / sc.rate_c_per_h * 3600.0 + PREHEAT_S


def scenarios(count: int, seed: int = 19) -> list[Scenario]:
    rng = random.Random(seed)
    return [draw(rng, seed * 1000 + i) for i in range(count)]
