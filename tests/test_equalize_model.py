"""The load-core estimate: lumped capacitance against the analytic solution and a reference
ODE solver, the Biot criterion, and the steel classes read from a profile's material text."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from tuikiln.coremodel import (
    SIGMA,
    SLOW_EMISSIVITY,
    SLOW_H_W_M2K,
    TYPICAL_EMISSIVITY,
    TYPICAL_H_W_M2K,
    LoadModel,
    biot_number,
    radiation_h,
)
from tuikiln.materials import STEELS, Steel, match_material

# Incropera & DeWitt, Fundamentals of Heat and Mass Transfer, Example 5.1 (from memory): a
# thermocouple junction, h = 400 W/(m^2 K), k = 20 W/(m K), c = 400 J/(kg K), rho = 8500
# kg/m^3, a sphere of D = 0.706 mm has tau = rho*c*V/(h*A) = 1 s, Bi = 2.35e-3, and takes
# 5.2 s to go from 25 °C to 199 °C in 200 °C gas. Lc = V/A = D/6 for a sphere; a plate heated
# on both faces has Lc = thickness/2, so a plate D/3 thick is the same lump.
JUNCTION = Steel("thermocouple junction", 8500.0, 400.0, 20.0, "Incropera Example 5.1")
JUNCTION_D = 0.706e-3


def _junction_model() -> LoadModel:
    return LoadModel(JUNCTION, JUNCTION_D / 3.0, emissivity=0.0, h_w_m2k=400.0)


def test_convection_only_matches_the_analytic_exponential():
    # Incropera Eq. 5.6: (T - Tinf)/(Ti - Tinf) = exp(-t/tau), tau = rho c V/(h A) (Eq. 5.7);
    # also Cengel, Heat and Mass Transfer, Eq. 4-4.
    steel = STEELS["carbon steel"]
    model = LoadModel(steel, 0.004, emissivity=0.0, h_w_m2k=25.0)
    tau = steel.density_kg_m3 * steel.specific_heat_j_kgk * 0.002 / 25.0
    # Bi = 25 * 0.002 / 38 = 1.3e-3: the slab's first mode is the lump to within Bi/3.
    assert model.time_constant_s(500.0) == pytest.approx(tau, rel=1e-3)
    model.reset(20.0)
    model.update(0.0, 500.0)
    for t in np.arange(1.0, 3.0 * tau, 1.0):
        model.update(float(t), 500.0)
        expected = 500.0 + (20.0 - 500.0) * math.exp(-t / tau)
        # the lump is the slab's mean; the core trails it by a fraction of Bi, the surface
        # leads it by Bi/2 of the distance left
        assert model.core_c == pytest.approx(expected, abs=0.5)
        assert model.core_c <= expected + 1e-9  # never ahead of the exact lump
        assert model.core_c <= model.surface_c <= expected + 0.5


def test_textbook_junction_time_constant_and_time_to_199_c():
    # Incropera Example 5.1 (from memory): tau = 1.0 s; 25 -> 199 °C in about 5.2 s.
    model = _junction_model()
    assert model.time_constant_s(200.0) == pytest.approx(1.0, rel=0.01)
    model.reset(25.0)
    model.update(0.0, 200.0)
    t = 0.0
    while model.surface_c < 199.0:
        t += 0.01
        model.update(t, 200.0)
    assert t == pytest.approx(5.2, abs=0.06)


def test_biot_number_of_the_textbook_junction_is_far_below_the_limit():
    # Bi = h*Lc/k = 400 * (D/6) / 20 = 2.35e-3 (Incropera Example 5.1, from memory); the
    # lumped method holds for Bi < 0.1 (Incropera Eq. 5.10; Cengel Sec. 4-1).
    bi = biot_number(JUNCTION, JUNCTION_D / 3.0, emissivity=0.0, h_w_m2k=400.0)
    assert bi == pytest.approx(400.0 * JUNCTION_D / 6.0 / 20.0)
    assert bi == pytest.approx(2.35e-3, rel=0.01)


def test_thin_and_thick_sections_in_plain_words():
    # By hand: at 1000 °C, h = 10 + 4*0.8*sigma*1273.15^3 = 384 W/(m^2 K). 25 mm of tool
    # steel (k = 28): Bi = 384*0.0125/28 = 0.17 >= 0.1, the lumped method does not hold.
    h = TYPICAL_H_W_M2K + 4.0 * TYPICAL_EMISSIVITY * SIGMA * 1273.15**3
    assert h == pytest.approx(384.0, rel=0.01)
    thick = LoadModel.from_load("AISI D2", 0.025)
    assert thick.biot == pytest.approx(h * 0.0125 / STEELS["tool steel"].conductivity_w_mk)
    assert not thick.lumped_ok
    assert ("thick section: the core lags the surface; the estimate adds a conduction delay"
            in thick.advice)
    thin = LoadModel.from_load("1084", 0.002)
    assert thin.biot < 0.1 and thin.lumped_ok
    assert "thin section" in thin.advice


def test_radiation_coefficient_is_four_eps_sigma_t_cubed_when_close():
    # Incropera Eq. 1.9 and its linearisation h_r ~ 4 eps sigma T^3.
    t = 900.0 + 273.15
    assert radiation_h(0.8, 900.0, 900.0) == pytest.approx(4 * 0.8 * SIGMA * t**3)


def test_radiation_and_convection_match_a_reference_ode_solver():
    # The model's exponential steps against scipy's Runge-Kutta on the same lumped balance,
    # with the chamber reading held between samples as the model holds it.
    model = LoadModel(STEELS["stainless"], 0.006)
    steel = model.steel
    cap = steel.density_kg_m3 * steel.specific_heat_j_kgk * 0.003

    def chamber(t: float) -> float:
        return min(950.0, 20.0 + 0.25 * t)

    def rhs(t: float, y: np.ndarray) -> list[float]:
        tc = chamber(math.ceil(t)) + 273.15
        ts = y[0] + 273.15
        q = SLOW_H_W_M2K * (tc - ts) + SLOW_EMISSIVITY * SIGMA * (tc**4 - ts**4)
        return [q / cap]

    model.reset(20.0)
    model.update(0.0, chamber(0.0))
    ts_ = np.arange(1.0, 6001.0, 1.0)
    ref = solve_ivp(rhs, (0.0, 6000.0), [20.0], method="RK45", t_eval=ts_, rtol=1e-8,
                    atol=1e-6, max_step=1.0)
    got = []
    for t in ts_:
        model.update(float(t), chamber(float(t)))
        got.append(model.surface_c)
    assert np.max(np.abs(np.asarray(got) - ref.y[0])) < 0.5


def test_estimate_starts_cold_and_lags_the_chamber():
    model = LoadModel.from_load("O1", 0.005)
    assert model.update(0.0, 800.0) == pytest.approx(20.0)  # a part put into a hot oven
    for t in range(1, 120):
        core = model.update(float(t), 800.0)
    assert 20.0 < core < 800.0
    model.reset(30.0)
    assert model.core_c == 30.0


def test_unknown_thickness_is_assumed_thick_and_said_so():
    model = LoadModel.from_load(None, None)
    assert model.thickness_m == pytest.approx(0.025)
    assert "no thickness given" in model.advice
    assert "no material given" in model.advice


@pytest.mark.parametrize(
    ("text", "steel_class"),
    [
        ("AISI O1", "tool steel"), ("O1", "tool steel"), ("D2", "tool steel"),
        ("A2", "tool steel"), ("52100", "tool steel"), ("CPM 3V", "tool steel"),
        ("1084", "carbon steel"), ("1095", "carbon steel"), ("AISI 1045", "carbon steel"),
        ("mild steel", "carbon steel"), ("440C", "stainless"), ("AEB-L", "stainless"),
        ("304", "stainless"), ("S30V", "stainless"), ("X46Cr13", "stainless"),
    ],
)
def test_material_text_is_read_as_a_steel_class(text, steel_class):
    # Grade families as the AISI/SAE numbering assigns them (10xx plain carbon, O/A/D/S/W
    # tool steel groups, 3xx/4xx stainless): common designations, no single source.
    assert match_material(text)[0] == steel_class


def test_unrecognised_material_says_so_and_takes_the_default():
    name, words = match_material("unobtainium")
    assert name in STEELS
    assert "not recognised" in words
