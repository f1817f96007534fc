"""Thinning keeps every bucket's extremes (an overshoot never vanishes) and stays short."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from tuikiln.thinning import bucket_bounds, min_max_buckets, thin
from tuikiln.ui.chartdraw import ChartSpec, Trace, plot_layout, render_chart, strips_text

temperatures = st.floats(min_value=-50, max_value=1300, allow_nan=False)


@st.composite
def series(draw: st.DrawFn) -> tuple[np.ndarray, np.ndarray]:
    size = draw(st.integers(min_value=1, max_value=600))
    steps = draw(arrays(np.float64, size, elements=st.floats(min_value=0.0, max_value=50.0)))
    t = np.cumsum(steps)
    y = draw(arrays(np.float64, size, elements=temperatures))
    return t, y


@settings(max_examples=150, deadline=None)
@given(series(), st.integers(min_value=1, max_value=120))
def test_every_bucket_keeps_its_min_and_max(data, count) -> None:
    t, y = data
    start, end = float(t[0]), float(t[-1]) + 1e-6
    buckets = min_max_buckets(t, y, start, end, count)
    assert buckets.count == count
    bounds = bucket_bounds(t, start, end, count)
    bounds[-1] = np.searchsorted(t, end, side="right")
    for index in range(count):
        chunk = y[bounds[index] : bounds[index + 1]]
        if chunk.size:
            assert buckets.high[index] == chunk.max()
            assert buckets.low[index] == chunk.min()
        else:
            assert np.isnan(buckets.high[index]) and np.isnan(buckets.low[index])
    # The extremes of the whole series are kept somewhere.
    assert np.nanmax(buckets.high) == y.max() and np.nanmin(buckets.low) == y.min()


@settings(max_examples=150, deadline=None)
@given(series(), st.integers(min_value=1, max_value=120))
def test_thin_is_bounded_ordered_and_keeps_extremes(data, count) -> None:
    t, y = data
    thin_t, thin_y = thin(t, y, count)
    assert thin_t.size == thin_y.size
    if t.size <= 2 * count:
        assert thin_t.size == t.size  # short enough already: unchanged
    else:
        assert thin_t.size <= 2 * count
    assert np.all(np.diff(thin_t) >= 0)
    assert thin_y.max() == y.max() and thin_y.min() == y.min()
    # Every kept point is a real sample.
    assert set(zip(thin_t.tolist(), thin_y.tolist(), strict=True)) <= set(
        zip(t.tolist(), y.tolist(), strict=True))


def test_missing_readings_are_skipped_not_spread() -> None:
    t = np.arange(10.0)
    y = np.array([1, np.nan, 3, np.nan, np.nan, np.nan, np.nan, np.nan, 2, 5], dtype=float)
    buckets = min_max_buckets(t, y, 0.0, 10.0, 5)
    assert buckets.high.tolist()[:2] == [1.0, 3.0]
    assert np.isnan(buckets.high[2]) and np.isnan(buckets.high[3])
    assert buckets.high[4] == 5.0


def test_one_sample_overshoot_reaches_the_top_of_the_chart() -> None:
    # A week at 1 Hz, flat at 800 with a single 1000 spike: the chart still shows the spike
    # (dots on a row above the flat line's) and the axis reaches above it.
    t = np.arange(7 * 86400.0)
    y = np.full(t.size, 800.0)

    def top_row(values: np.ndarray) -> int:
        spec = ChartSpec(0.0, t[-1], 0.0, 1100.0, [Trace("chamber", t, values)])
        lines = strips_text(render_chart(spec, 80, 20))
        return min(i for i, line in enumerate(lines) if any(0x2800 < ord(c) <= 0x28FF
                                                            for c in line[6:]))

    flat = top_row(y)
    y[123_457] = 1000.0
    assert top_row(y) < flat - 2


def test_chart_layout_key_moves_only_when_a_dot_would() -> None:
    # The live screen redraws the chart only when this key changes (a second of new
    # samples at the whole-run zoom seldom moves a dot); an overshoot must always move it.
    t = np.arange(0.0, 3600.0)
    y = np.full(t.size, 500.0)

    def key(values: np.ndarray, until: float) -> bytes:
        trace = Trace("chamber", t[t <= until], values[t <= until])
        return plot_layout(ChartSpec(0.0, 4 * 3600.0, 0.0, 600.0, [trace], now=until),
                           60, 12).key

    assert key(y, 3000.0) == key(y, 3001.0)  # one more second: nothing on screen moves
    spiked = y.copy()
    spiked[3001] = 590.0  # a one-sample overshoot
    assert key(spiked, 3001.0) != key(y, 3001.0)
