"""SIMC PID settings against the worked example of the paper.

Source: S. Skogestad, "Simple analytic rules for model reduction and PID controller tuning",
J. Process Control 13 (2003) 291-309. Example E1 (from memory of the paper; the settings
are recomputed below from its formulas as printed, so a slip of memory in the rounded
values would show as a mismatch): g0(s) = 1 / ((s + 1)(0.2s + 1)(0.04s + 1)(0.008s + 1)).

By the paper's half rule, the first-order model keeps tau1 = 1 + 0.2/2 = 1.1 and an
effective delay theta = 0.2/2 + 0.04 + 0.008 = 0.148; the second-order model keeps
tau1 = 1, tau2 = 0.2 + 0.04/2 = 0.22 and theta = 0.04/2 + 0.008 = 0.028.
With tau_c = theta: PI Kc = 3.72, tau_I = 1.1; PID Kc = 17.9, tau_I = 0.224, tau_D = 0.22
(the paper's rounding, from memory).
"""

from __future__ import annotations

import math

import pytest

from tuikiln.simc import simc_pid


def test_example_e1_first_order_pi() -> None:
    s = simc_pid(1.0, 1.1, 0.148)
    assert s.kp == pytest.approx(1.1 / (1.0 * (0.148 + 0.148)))  # the formula as printed
    assert s.kp == pytest.approx(3.72, abs=0.005)                  # the paper's value
    assert s.ti_s == pytest.approx(1.1)  # min(1.1, 4 * 0.296 = 1.184)
    assert s.td_s == 0.0


def test_example_e1_second_order_pid() -> None:
    s = simc_pid(1.0, 1.0, 0.028, tau2_s=0.22)
    assert s.kp == pytest.approx(1.0 / (2 * 0.028))
    assert s.kp == pytest.approx(17.9, abs=0.05)
    assert s.ti_s == pytest.approx(0.224)  # min(1, 4 * 0.056)
    assert s.td_s == pytest.approx(0.22)


def test_a_lag_dominant_model_gives_the_integrating_rule() -> None:
    # tau1 >> theta: k/tau1 is the slope k' of an integrating process, and SIMC gives
    # Kc = 1/(k' (tau_c + theta)), tau_I = 4 (tau_c + theta) (same paper, its integrating
    # process rule).
    k_slope, theta = 0.003, 10.0
    s = simc_pid(k_slope * 1e6, 1e6, theta)
    assert s.kp == pytest.approx(1.0 / (k_slope * 2 * theta))
    assert s.ti_s == pytest.approx(8 * theta)


def test_tau_c_and_the_sampling_delay() -> None:
    smooth = simc_pid(2.0, 100.0, 5.0, tau_c_s=20.0)
    assert smooth.kp == pytest.approx(100.0 / (2.0 * 25.0))
    assert smooth.ti_s == pytest.approx(100.0)
    # No measurable delay: half the sampling interval stands in for it.
    sampled = simc_pid(2.0, 100.0, 0.0, sample_s=1.0)
    assert sampled.kp == pytest.approx(100.0 / (2.0 * 1.0))
    with pytest.raises(ValueError, match="dead time"):
        simc_pid(2.0, 100.0, 0.0)
    with pytest.raises(ValueError, match="gain and a time constant"):
        simc_pid(-1.0, 100.0, 1.0)
    with pytest.raises(ValueError):
        simc_pid(1.0, math.inf, 1.0)


def test_learned_settings_hold_the_simulated_oven(tmp_path) -> None:  # noqa: ANN001
    # The settings `learn` gives for the 3 kW oven, put into the simulator's own controller
    # (PI on its thermocouple, time-proportioned output): a setpoint step of 60 °C at 700 °C
    # must come in without oscillating and with less overshoot than the hold band (8 °C).
    from dataclasses import replace

    import numpy as np

    from tests.test_ovenmodel import BIG, learned
    from tuikiln.simulator import SimConfig, SimulatedKiln

    model, _ = learned(tmp_path, BIG)
    f = model.fopdt(760.0)
    s = simc_pid(f.gain_c_per_pct, f.tau_s, f.dead_time_s, sample_s=1.0)
    oven = replace(BIG, kp=s.kp, ti_s=s.ti_s, td_s=s.td_s)
    kiln = SimulatedKiln(SimConfig(oven=oven, load=None, seed=4))
    kiln.set_running(True)
    kiln.set_setpoint(700.0)
    kiln.advance(4 * 3600.0)
    kiln.set_setpoint(760.0)
    temps, outputs = [], []
    for _ in range(3600):
        kiln.advance(1.0)
        r = kiln.read()
        temps.append(r.chamber_c)
        outputs.append(r.output_pct)
    t = np.array(temps)
    print(s, "overshoot", t.max() - 760.0, "last 30 min sd", t[1800:].std())
    assert t.max() - 760.0 < 8.0
    assert abs(t[1800:].mean() - 760.0) < 1.0
    assert t[1800:].std() < 1.0  # no limit cycle: only the 0.3 °C reading noise is left
