"""Thin a long time series to a chart's width without losing its peaks.

A 7-day run logged at 1 Hz has 604,800 samples; a chart has a few hundred dot columns.
Each column (bucket) keeps the minimum and the maximum of the samples that fall in it, so an
overshoot of a single sample still reaches the top of its column. Pure numpy, no Textual:
the screens' chart and the report's SVG both use it (analysis never imports ui).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Buckets:
    """Per-bucket extremes of one series over [t_start, t_end); NaN where a bucket is empty."""

    t_start: float
    t_end: float
    low: np.ndarray
    high: np.ndarray
    first: np.ndarray
    """The first value in each bucket (joins a column to the one before it)."""
    last: np.ndarray

    @property
    def count(self) -> int:
        return int(self.low.shape[0])


def bucket_bounds(t: np.ndarray, t_start: float, t_end: float, count: int) -> np.ndarray:
    """Index into the sorted `t` where each of `count` equal buckets starts (count+1 values)."""
    edges = np.linspace(t_start, t_end, count + 1)
    return np.searchsorted(t, edges, side="left")


def min_max_buckets(
    t: np.ndarray, y: np.ndarray, t_start: float, t_end: float, count: int
) -> Buckets:
    """The min, max, first and last of `y` in each of `count` equal time buckets.

    `t` must be sorted. NaN values (a missing reading) are skipped; a bucket with no finite
    value is NaN. The last bucket includes a sample exactly at `t_end`.
    """
    count = max(1, int(count))
    t = np.asarray(t, dtype=float)
    low = np.full(count, np.nan)
    high = np.full(count, np.nan)
    first = np.full(count, np.nan)
    last = np.full(count, np.nan)
    if t.size == 0 or not t_end > t_start:
        return Buckets(t_start, t_end, low, high, first, last)
    bounds = bucket_bounds(t, t_start, t_end, count)
    bounds[-1] = np.searchsorted(t, t_end, side="right")
    starts, stops = bounds[:-1], bounds[1:]
    filled = np.nonzero(stops > starts)[0]
    if filled.size == 0:
        return Buckets(t_start, t_end, low, high, first, last)
    # Samples are sorted, so filled buckets are contiguous runs of the array: one reduceat
    # over the covered span, cut at each filled bucket's start, gives every bucket's extremes.
    # Only the samples in view are converted (a week's float32 column is not copied whole).
    span = np.asarray(y[starts[filled[0]] : stops[filled[-1]]])
    if span.dtype.kind != "f":
        span = span.astype(float)
    offsets = starts[filled] - starts[filled[0]]
    with np.errstate(invalid="ignore"):
        low[filled] = np.fmin.reduceat(span, offsets)
        high[filled] = np.fmax.reduceat(span, offsets)
    first[filled] = span[offsets]
    last[filled] = span[stops[filled] - 1 - starts[filled[0]]]
    return Buckets(t_start, t_end, low, high, first, last)


def thin(t: np.ndarray, y: np.ndarray, count: int) -> tuple[np.ndarray, np.ndarray]:
    """At most 2 * `count` points of (t, y), in time order, keeping each bucket's min and max.

    Series already short enough come back unchanged.
    """
    t = np.asarray(t, dtype=float)
    y = np.asarray(y, dtype=float)
    count = max(1, int(count))
    if t.size <= 2 * count:
        return t, y
    bounds = bucket_bounds(t, float(t[0]), float(t[-1]), count)
    bounds[-1] = t.size
    starts, stops = bounds[:-1], bounds[1:]
    filled = np.nonzero(stops > starts)[0]
    # numpy has no arg-reduceat: find each bucket's extreme, then the first index holding it.
    offsets = starts[filled]
    safe = np.where(np.isnan(y), np.inf, y)
    low_index = _arg_reduce(safe, offsets, np.minimum)
    safe = np.where(np.isnan(y), -np.inf, y)
    high_index = _arg_reduce(safe, offsets, np.maximum)
    chosen = np.unique(np.concatenate([low_index, high_index]))
    return t[chosen], y[chosen]


def _arg_reduce(values: np.ndarray, offsets: np.ndarray, ufunc: np.ufunc) -> np.ndarray:
    """Index of the extreme of each contiguous segment starting at `offsets` (to the end)."""
    extremes = ufunc.reduceat(values, offsets)
    segment = np.repeat(np.arange(offsets.size), np.diff(np.append(offsets, values.size)))
    hits = np.nonzero(values == extremes[segment])[0]
    # The first hit in each segment.
    first_hit = np.unique(segment[hits], return_index=True)[1]
    return hits[first_hit]
