"""Quench timing: t8/5 (EN 1011-2's 800 -> 500 °C cooling time) and time to below a level."""

from __future__ import annotations

import math

import numpy as np
import pytest

from tuikiln.analysis.quench import cooling_between, downward_crossings, t8_5, time_to_below


def newton(t0_c: float, ambient_c: float, tau_s: float, end_s: float, step_s: float):
    """Newton's law of cooling, T = Ta + (T0 - Ta) exp(-t / tau), sampled every step_s."""
    time_s = np.arange(0.0, end_s, step_s)
    return time_s, ambient_c + (t0_c - ambient_c) * np.exp(-time_s / tau_s)


def test_t8_5_newtonian_cooling() -> None:
    # Analytic solution of Newton's law of cooling: the time to fall from T1 to T2 is
    # tau * ln((T1 - Ta) / (T2 - Ta)); with Ta = 20, tau = 60 s: 60 * ln(780 / 480) = 29.13 s.
    time_s, temp_c = newton(900.0, 20.0, 60.0, 600.0, 0.1)
    result = t8_5(time_s, temp_c)
    expected = 60.0 * math.log(780.0 / 480.0)
    assert result.seconds == pytest.approx(expected, abs=1e-3)
    assert result.start_s == pytest.approx(60.0 * math.log(880.0 / 780.0), abs=1e-3)


def test_t8_5_linear_cooling_is_exact_even_coarsely_sampled() -> None:
    # 1000 °C falling 10 °C/s: 800 at 20 s, 500 at 50 s, t8/5 = 30 s (arithmetic); linear
    # interpolation is exact on a straight line even with samples 7 s apart.
    time_s = np.arange(0.0, 100.0, 7.0)
    result = t8_5(time_s, 1000.0 - 10.0 * time_s)
    assert result.seconds == pytest.approx(30.0, abs=1e-9)
    assert result.end_s == pytest.approx(50.0, abs=1e-9)


def test_t8_5_times_the_last_pass_through_800() -> None:
    # Out of the oven, back in for a moment (above 800 again), then quenched: the clock starts
    # at the final fall through 800 (task's definition of the crossing rule).
    time_s = np.array([0.0, 10.0, 20.0, 30.0, 40.0, 50.0])
    temp_c = np.array([850.0, 790.0, 810.0, 800.0, 600.0, 400.0])
    result = t8_5(time_s, temp_c)
    # Final fall: 800 at exactly 30 s; 500 between 40 and 50 s at 45 s.
    assert result.start_s == pytest.approx(30.0)
    assert result.end_s == pytest.approx(45.0)
    assert result.seconds == pytest.approx(15.0)


def test_touching_a_level_from_above_is_not_a_fall() -> None:
    time_s = np.array([0.0, 1.0, 2.0])
    assert downward_crossings(time_s, np.array([810.0, 800.0, 820.0]), 800.0).size == 0


def test_t8_5_never_crosses_gives_reasons() -> None:
    time_s = np.arange(0.0, 100.0)
    cool = t8_5(time_s, np.full(time_s.size, 700.0))
    assert cool.seconds is None and "never reached 800" in str(cool.reason)
    slow = t8_5(time_s, 900.0 - 3.0 * time_s)  # ends at 603 °C
    assert slow.seconds is None and "never cooled below 500" in str(slow.reason)
    hot = t8_5(time_s, np.full(time_s.size, 850.0))
    assert hot.seconds is None and "never cooled below 800" in str(hot.reason)


def test_lost_samples_are_left_out() -> None:
    time_s = np.arange(0.0, 100.0, 1.0)
    temp_c = 1000.0 - 10.0 * time_s
    temp_c[30] = np.nan  # a lost reading in the middle of the fall
    assert t8_5(time_s, temp_c).seconds == pytest.approx(30.0)


def test_time_to_below_after_hold() -> None:
    # Hold at 850 °C until 100 s, then falling 5 °C/s: below 200 °C at 100 + 650 / 5 = 230 s.
    time_s = np.arange(0.0, 400.0, 3.0)
    temp_c = np.where(time_s < 100.0, 850.0, 850.0 - 5.0 * (time_s - 100.0))
    result = time_to_below(time_s, temp_c, hold_end_s=100.0, below_c=200.0)
    assert result.seconds == pytest.approx(130.0, abs=1e-9)
    late = time_to_below(time_s, temp_c, hold_end_s=300.0, below_c=200.0)
    assert late.seconds is None and "already below" in str(late.reason)
    never = time_to_below(time_s, temp_c, hold_end_s=0.0, below_c=-1000.0)
    assert never.seconds is None and "never fell below" in str(never.reason)


def test_cooling_between_any_levels() -> None:
    # Newton's law again (analytic), 300 -> 100 °C with Ta = 25, tau = 120 s.
    time_s, temp_c = newton(320.0, 25.0, 120.0, 1200.0, 0.2)
    result = cooling_between(time_s, temp_c, 300.0, 100.0)
    assert result.seconds == pytest.approx(120.0 * math.log(275.0 / 75.0), abs=1e-3)
