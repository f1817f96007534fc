"""The load-core estimate against the published 1-D slab solution (convection at both faces,
a step in the surroundings): Incropera & DeWitt, *Fundamentals of Heat and Mass Transfer*,
Sec. 5.5, Eqs. 5.39-5.42 and Table 5.1 (Heisler 1947's first-term series), with the full
series computed here with scipy's root finder; the quasi-steady lag of a slab heated at a
steady rate (Carslaw & Jaeger, *Conduction of Heat in Solids*, Sec. 3.3); and the rule that
a cooling core never reads below its surface."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import brentq

from tuikiln.coremodel import LoadModel, first_mode
from tuikiln.materials import STEELS

TOOL = STEELS["tool steel"]
THICK_M = 0.05  # half thickness L = 25 mm


def series_core(biot: float, fourier: np.ndarray, terms: int = 60) -> np.ndarray:
    """theta*(0, Fo) = sum Cn exp(-zeta_n^2 Fo), zeta_n tan zeta_n = Bi (Incropera Eq. 5.39a,
    5.39b, 5.39c), each root found by scipy.optimize.brentq in its own branch."""
    total = np.zeros_like(fourier)
    for n in range(terms):
        lo, hi = n * math.pi + 1e-12, n * math.pi + 0.5 * math.pi - 1e-12
        z = brentq(lambda x: x * math.tan(x) - biot, lo, hi, xtol=1e-14)
        c = 4.0 * math.sin(z) / (2.0 * z + math.sin(2.0 * z))
        total += c * np.exp(-z * z * fourier)
    return total


@pytest.mark.parametrize(
    ("biot", "zeta", "c1"),
    # Incropera Table 5.1, plane wall (from memory), checked again by the root finder below
    [(0.01, 0.0998, 1.0017), (0.1, 0.3111, 1.0161), (0.5, 0.6533, 1.0701),
     (1.0, 0.8603, 1.1191), (5.0, 1.3138, 1.2402), (10.0, 1.4289, 1.2620)],
)
def test_first_mode_matches_the_published_table(biot, zeta, c1):
    z, c = first_mode(biot)
    assert z == pytest.approx(zeta, abs=1e-4) and c == pytest.approx(c1, abs=1e-4)
    exact = brentq(lambda x: x * math.tan(x) - biot, 1e-12, 0.5 * math.pi - 1e-12, xtol=1e-14)
    assert z == pytest.approx(exact, abs=1e-10)


def _step_response(biot: float) -> tuple[np.ndarray, np.ndarray, LoadModel]:
    """The model's core after the chamber steps from 20 to 820 °C, convection only (h
    fixed so that Bi = h L / k), as theta* = (T - Tinf)/(Ti - Tinf) against Fo."""
    h = biot * TOOL.conductivity_w_mk / (0.5 * THICK_M)
    model = LoadModel(TOOL, THICK_M, emissivity=0.0, h_w_m2k=h)
    model.reset(20.0)
    model.update(0.0, 820.0)
    scale = model.conduction_s
    times = np.arange(1.0, 12.0 * scale / first_mode(biot)[0] ** 2, max(1.0, scale / 400.0))
    theta = np.array([(model.update(float(t), 820.0) - 820.0) / (20.0 - 820.0) for t in times])
    return times / scale, theta, model


@pytest.mark.parametrize("biot", [0.05, 0.3, 1.0, 3.0])
def test_core_is_never_ahead_of_the_series_solution_and_close_in_the_tail(biot):
    fourier, theta, _ = _step_response(biot)
    exact = series_core(biot, fourier)
    moved = exact < 0.9  # once the core has moved a tenth of the way
    assert np.all(theta[moved] >= exact[moved] - 1e-9), "the estimate ran ahead of the core"
    # Fo > 0.2: the first term alone is the solution (Incropera Sec. 5.5.2); the estimate
    # trails it by a little, so the time to reach a given theta is only a little longer.
    zeta, c1 = first_mode(biot)
    for target in (0.1, 0.02):
        t_exact = math.log(c1 / target) / zeta**2
        t_model = float(fourier[np.argmax(theta <= target)])
        assert t_exact <= t_model <= 1.1 * t_exact + 0.05


def test_core_lags_a_steady_ramp_at_least_as_much_as_the_slab():
    # Quasi-steady slab heated at rate r with a convective surface: the core lags the
    # surroundings by r * L^2/alpha * (1/Bi + 1/2) (Carslaw & Jaeger Sec. 3.3; Incropera
    # Ch. 5 problems): surface film r*rho*c*L/h plus the parabola's r*L^2/(2 alpha).
    biot = 0.5
    h = biot * TOOL.conductivity_w_mk / (0.5 * THICK_M)
    model = LoadModel(TOOL, THICK_M, emissivity=0.0, h_w_m2k=h)
    rate = 400.0 / 3600.0
    model.reset(20.0)
    for t in range(0, 6000):
        core = model.update(float(t), 20.0 + rate * t)
    lag = 20.0 + rate * 5999 - core
    expected = rate * model.conduction_s * (1.0 / biot + 0.5)
    assert expected <= lag <= 1.25 * expected


def test_core_never_reads_below_the_surface_while_cooling():
    model = LoadModel.from_load("A2", 0.04)
    model.reset(20.0)
    for t in range(0, 3600):  # heat to 1000 °C, then a free cool the core lags behind
        model.update(float(t), min(1000.0, 20.0 + t))
    cooling = [max(20.0, 1000.0 - 0.5 * s) for s in range(1, 3000)]
    checked = 0
    for s, chamber in enumerate(cooling, start=3600):
        core = model.update(float(s), chamber)
        if chamber < model.surface_c:  # heat leaves the part: it is cooling
            checked += 1
            assert core >= model.surface_c
    assert checked > 0.95 * len(cooling)
    # A thermocouple on the surface reading above the estimate lifts the core with it.
    model.reset(300.0)
    model.update(0.0, 100.0)
    assert model.update(1.0, 100.0, surface_reading_c=350.0) >= 350.0
    # ... but not while the chamber heats it (the surface then leads the core).
    model.reset(100.0)
    model.update(0.0, 400.0)
    assert model.update(1.0, 400.0, surface_reading_c=250.0) < 250.0


def test_foil_slows_the_estimate_in_series():
    # Two conductances in series, 1/h = 1/h_out + 1/h_gap: slower than either alone.
    bare = LoadModel.from_load("A2", 0.006)
    foil = LoadModel.from_load("A2", 0.006, wrap="foil")
    for chamber in (200.0, 600.0, 1000.0):
        assert foil.surface_h(chamber, chamber - 50.0) < 0.6 * bare.surface_h(chamber,
                                                                               chamber - 50.0)
    assert "wrapped in foil" in foil.advice
    with pytest.raises(ValueError, match="wrap"):
        LoadModel.from_load("A2", 0.006, wrap="paper")


def test_width_counts_the_edges_and_only_speeds_up():
    narrow = LoadModel.from_load("A2", 0.04, width_m=0.05)
    plate = LoadModel.from_load("A2", 0.04)
    assert narrow.edge_factor == pytest.approx(1.8)
    assert narrow.time_constant_s(800.0) < plate.time_constant_s(800.0)
