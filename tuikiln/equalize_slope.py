"""Least-squares line over a sliding time window, kept up to date in O(1) per sample.

The window keeps running weighted sums of x = t - t_ref and y = value - y_ref about a
reference point inside the window, so the normal equations never subtract two large,
nearly equal numbers (the textbook one-pass formula n*Sxx - Sx^2 on raw Unix times loses
every digit). Removing old samples from running sums lets rounding error creep in, so the
sums are rebuilt exactly, about a fresh reference at the window's mean, once per window's
worth of samples: amortised O(1), with bounded error. See Higham, *Accuracy and Stability
of Numerical Algorithms*, Sec. 1.9 (one-pass variance), and Chan, Golub & LeVeque (1983).
"""

from __future__ import annotations

import math
from collections import deque

_MIN_SAMPLES = 3


class SlopeWindow:
    """Samples (t, value) whose time lies within `window_s` of the newest one."""

    __slots__ = ("window_s", "min_span_s", "_samples", "_t_ref", "_y_ref", "_w", "_sx", "_sy",
                 "_sxx", "_sxy", "_syy", "_diff2", "_since_rebuild")

    def __init__(self, window_s: float, min_span_s: float | None = None) -> None:
        if not window_s > 0.0:
            raise ValueError("the slope window must be longer than zero seconds")
        self.window_s = float(window_s)
        self.min_span_s = 0.5 * self.window_s if min_span_s is None else float(min_span_s)
        """`slope()` stays None until the samples cover at least this long."""
        self._samples: deque[tuple[float, float, float, float]] = deque()  # t, y, w, diff^2
        self._t_ref = 0.0
        self._y_ref = 0.0
        self._zero()

    def _zero(self) -> None:
        self._w = self._sx = self._sy = self._sxx = self._sxy = self._syy = 0.0
        self._diff2 = 0.0
        self._since_rebuild = 0

    def clear(self) -> None:
        self._samples.clear()
        self._zero()

    def __len__(self) -> int:
        return len(self._samples)

    def push(self, t: float, value: float, weight: float = 1.0) -> None:
        """Add a sample; samples not newer than the last one, or not finite, are ignored."""
        if not (math.isfinite(t) and math.isfinite(value) and weight > 0.0):
            return
        samples = self._samples
        if samples and t <= samples[-1][0]:
            return
        if not samples:
            self._t_ref, self._y_ref = t, value
        diff2 = (value - samples[-1][1]) ** 2 if samples else 0.0
        samples.append((t, value, weight, diff2))
        self._add(t, value, weight, 1.0)
        self._diff2 += diff2
        cutoff = t - self.window_s
        while samples[0][0] < cutoff:
            old_t, old_y, old_w, _ = samples.popleft()
            self._add(old_t, old_y, old_w, -1.0)
            # The new first sample's difference was taken against the one just dropped.
            first_t, first_y, first_w, first_d2 = samples[0]
            self._diff2 -= first_d2
            samples[0] = (first_t, first_y, first_w, 0.0)
        self._since_rebuild += 1
        if self._since_rebuild >= max(32, len(samples)):
            self._rebuild()

    def _add(self, t: float, y: float, w: float, sign: float) -> None:
        x, v = t - self._t_ref, y - self._y_ref
        sw = sign * w
        self._w += sw
        self._sx += sw * x
        self._sy += sw * v
        self._sxx += sw * x * x
        self._sxy += sw * x * v
        self._syy += sw * v * v

    def _rebuild(self) -> None:
        samples = self._samples
        total = math.fsum(w for _, _, w, _ in samples)
        self._t_ref = math.fsum(w * t for t, _, w, _ in samples) / total
        self._y_ref = math.fsum(w * y for _, y, w, _ in samples) / total
        diff2 = math.fsum(d for _, _, _, d in samples)
        self._zero()
        for t, y, w, _ in samples:
            self._add(t, y, w, 1.0)
        self._diff2 = diff2

    def span(self) -> float:
        """Seconds between the oldest and the newest sample in the window."""
        s = self._samples
        return s[-1][0] - s[0][0] if len(s) > 1 else 0.0

    def _centred(self) -> tuple[float, float, float] | None:
        """(Sxx, Sxy, Syy) about the weighted means, or None when the line is undefined."""
        if len(self._samples) < _MIN_SAMPLES or self._w <= 0.0:
            return None
        mx, my = self._sx / self._w, self._sy / self._w
        sxx = self._sxx - self._w * mx * mx
        if not sxx > 0.0:
            return None
        sxy = self._sxy - self._w * mx * my
        syy = max(0.0, self._syy - self._w * my * my)
        return sxx, sxy, syy

    def ready(self) -> bool:
        return self._centred() is not None and self.span() >= self.min_span_s

    def slope(self) -> float | None:
        """Least-squares slope in value units per second; None until enough samples."""
        if not self.ready():
            return None
        sxx, sxy, _ = self._centred()  # type: ignore[misc]
        return sxy / sxx

    def slope_sigma(self) -> float | None:
        """Standard error of the slope from the residuals (unweighted samples)."""
        centred = self._centred()
        n = len(self._samples)
        if centred is None or n <= _MIN_SAMPLES or not self.ready():
            return None
        sxx, sxy, syy = centred
        resid = max(0.0, syy - sxy * sxy / sxx) / (self._w * (n - 2) / n)
        return math.sqrt(resid / sxx * self._w / n) if self._w > 0 else None

    def mean(self) -> float | None:
        """Weighted mean of the values in the window."""
        if not self._samples:
            return None
        return self._y_ref + self._sy / self._w

    def noise_sd(self) -> float:
        """Sample-to-sample noise from successive differences (von Neumann): a trend of a
        few degrees per minute hardly touches it, unlike the residual of the line."""
        n = len(self._samples)
        if n < 3:
            return 0.0
        return math.sqrt(max(0.0, self._diff2) / (2.0 * (n - 1)))

