"""The O(1) sliding least-squares slope against numpy.polyfit (the reference fit) on the
same windows of samples."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tuikiln.equalize import SlopeWindow


def _window(times: np.ndarray, values: np.ndarray, window_s: float):
    keep = times >= times[-1] - window_s
    return times[keep], values[keep]


@settings(max_examples=150, deadline=None)
@given(
    start=st.floats(0.0, 2.0e9),
    steps=st.lists(st.floats(0.05, 30.0), min_size=3, max_size=300),
    window_s=st.floats(5.0, 600.0),
    seed=st.integers(0, 2**32 - 1),
    trend=st.floats(-5.0, 5.0),
)
def test_slope_matches_polyfit_on_the_same_window(start, steps, window_s, seed, trend):
    rng = np.random.default_rng(seed)
    times = start + np.cumsum(steps)
    values = 900.0 + trend * (times - times[0]) + rng.normal(0.0, 2.0, times.size)
    window = SlopeWindow(window_s, min_span_s=0.0)
    for t, v in zip(times, values, strict=True):
        window.push(float(t), float(v))
    wt, wv = _window(times, values, window_s)
    if wt.size < 3 or len({float(t) for t in wt}) < 3:
        return
    # numpy.polyfit is the reference; times centred first so the reference itself is exact
    expected = np.polyfit(wt - wt.mean(), wv, 1)[0]
    got = window.slope()
    assert got is not None
    assert got == pytest.approx(expected, rel=1e-6, abs=1e-9)
    assert window.span() == pytest.approx(wt[-1] - wt[0])


@settings(max_examples=60, deadline=None)
@given(
    weights=st.lists(st.floats(0.01, 100.0), min_size=3, max_size=80),
    seed=st.integers(0, 2**32 - 1),
)
def test_weighted_slope_matches_weighted_polyfit(weights, seed):
    rng = np.random.default_rng(seed)
    times = 1.7e9 + np.arange(len(weights), dtype=float)
    values = rng.normal(0.0, 1.0, times.size) - 0.01 * (times - times[0])
    window = SlopeWindow(1e6, min_span_s=0.0)
    for t, v, w in zip(times, values, weights, strict=True):
        window.push(float(t), float(v), w)
    # polyfit's w multiplies the residuals, so it takes the square root of ours
    expected = np.polyfit(times - times.mean(), values, 1, w=np.sqrt(weights))[0]
    assert window.slope() == pytest.approx(expected, rel=1e-6, abs=1e-9)


def test_unix_times_do_not_cancel_and_long_runs_do_not_drift():
    # A tiny slope on Unix-epoch timestamps: the textbook one-pass formula on raw times
    # loses all digits here; 200 000 slides must not accumulate rounding error either.
    window = SlopeWindow(300.0)
    t0 = 1.75e9
    slope = 0.5 / 60.0 / 1000.0
    for i in range(200_000):
        t = t0 + 0.5 * i
        window.push(t, 1000.0 + slope * (t - t0) + (0.25 if i % 2 else -0.25))
    times = t0 + 0.5 * np.arange(200_000 - 601, 200_000)
    values = 1000.0 + slope * (times - t0) + np.where(np.arange(times.size) % 2, -0.25, 0.25)
    expected = np.polyfit(times - times.mean(), values, 1)[0]
    assert window.slope() == pytest.approx(expected, rel=1e-6)
    assert window.span() == pytest.approx(300.0)


def test_none_until_enough_samples_and_span():
    window = SlopeWindow(100.0)  # needs half a window by default
    assert window.slope() is None
    for t in range(0, 40):
        window.push(float(t), 2.0 * t)
    assert window.slope() is None
    for t in range(40, 60):
        window.push(float(t), 2.0 * t)
    assert window.slope() == pytest.approx(2.0)


def test_ignores_bad_and_out_of_order_samples():
    window = SlopeWindow(100.0, min_span_s=0.0)
    for t, v in [(0.0, 0.0), (1.0, 1.0), (1.0, 50.0), (0.5, 50.0), (2.0, math.nan),
                 (math.inf, 3.0), (3.0, 3.0)]:
        window.push(t, v)
    assert len(window) == 3
    assert window.slope() == pytest.approx(1.0)


def test_noise_estimate_ignores_a_trend():
    rng = np.random.default_rng(3)
    window = SlopeWindow(300.0)
    for t in range(600):
        window.push(float(t), 0.1 * t + rng.normal(0.0, 2.0))
    assert window.noise_sd() == pytest.approx(2.0, rel=0.15)
