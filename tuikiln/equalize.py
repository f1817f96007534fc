"""When has the load (not the oven air) reached temperature? The detector behind
`start = "equalized"` holds.

The watched temperature is the load thermocouple when the device has one, otherwise the
slow-side core estimate of tuikiln.coremodel driven by the chamber thermocouple. The load
counts as *even* once the following have held together for `confirm_s`:

* In the band: a mean of the newest readings (30, 60 or 120 s of them) lies inside the
  hold's band by a margin: three standard errors of that mean, half a reading step when
  the noise is too small to smear whole-degree steps out, and for a thermocouple on the
  surface moving toward the target, the lead of the surface over the core, slope * L^2/(2
  alpha) (L half the thickness: the quasi-steady slab heated at a steady rate, Incropera &
  DeWitt Ch. 5 / Carslaw & Jaeger Sec. 3.3). A mean lags the readings, so on the way in it
  reads farther out than the load: the late, safe side.
* Staying there: at the least-squares slope over the last `window_s` (O(1) per sample) the
  load would not cross out of the band within half a window, and it is either closing in
  on the target, or moving away no faster than the slope limit, or (when the chamber is
  watched too) the chamber is itself settled in the band: a load heated by a chamber that
  stays in the band cannot leave it.
* The chamber, when given, is in the band (an overshooting chamber drags the load out).

While the load approaches, the remaining distance to the target is fitted with a first-order
exponential (log-linear weighted least squares of target - T over a sliding window, O(1) per
sample) for the time still to wait and its uncertainty, shown beside the shop rule of thumb
of an hour per inch of thickness.

Replaying a logged run through `detect_over` gives the same decisions as the live run, because
it is the same code fed the same samples. Never reads a clock: `now` is always an argument.
Benchmark against the simulator's true core: tests/bench/equalize.py.
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Iterable
from dataclasses import dataclass

from tuikiln.coremodel import LoadModel
from tuikiln.equalize_slope import SlopeWindow
from tuikiln.materials import STEELS
from tuikiln.units import Units, delta_from_c, format_duration, format_temp, symbol

__all__ = [
    "EqualizeDetector",
    "EqualizeStatus",
    "LoadModel",
    "LoadWatch",
    "SlopeWindow",
    "detect_over",
    "rule_of_thumb_s",
]

SECONDS_PER_INCH = 3600.0  # "an hour per inch of thickness": common practice, no source
INCH_M = 0.0254

HEATING_UP = "heating-up"
COMING_DOWN = "coming-down"
LEVELLING = "levelling"
SETTLING = "settling"
EVEN = "even"
STATES = (HEATING_UP, COMING_DOWN, LEVELLING, SETTLING, EVEN)

LOAD_TC = "load thermocouple"
CORE_ESTIMATE = "core estimate"

SMOOTH_S = 30.0
"""The band test uses means of this much of the newest readings, and of two and four times
as much (up to the slope window)."""
NOISE_SIGMAS = 3.0
"""Margin inside the band: this many standard errors of that mean."""
SLOWEST_DIFFUSIVITY = min(steel.diffusivity_m2_s for steel in STEELS.values())
"""With no material known, the surface lead is judged for the slowest-conducting steel."""
FIT_WINDOW_FACTOR = 2.0
"""The approach fit looks back this many slope windows."""


def rule_of_thumb_s(thickness_m: float | None) -> float | None:
    """One hour per inch of thickness (common practice, no source; data sheets differ)."""
    if thickness_m is None or not thickness_m > 0.0:
        return None
    return thickness_m / INCH_M * SECONDS_PER_INCH


@dataclass(frozen=True)
class EqualizeStatus:
    state: str
    """One of STATES: "heating-up" / "coming-down" (outside the band), "levelling" (in the
    band, still moving), "settling" (in the band and level, being confirmed), "even"."""
    words: str
    equalized: bool
    slope_c_per_min: float | None
    temp_c: float
    source: str
    eta_s: float | None
    eta_sigma_s: float | None
    rule_of_thumb_s: float | None
    since: float | None
    """When the load was declared even (None until then)."""


class EqualizeDetector:
    """Decides, sample by sample, when the watched temperature is even at `target_c`."""

    def __init__(self, target_c: float, band_c: float, window_s: float,
                 slope_limit_c_per_s: float, confirm_s: float,
                 thickness_m: float | None = None, *, source: str = LOAD_TC,
                 resolution_c: float = 1.0, units: Units = "C",
                 diffusivity_m2_s: float | None = None) -> None:
        if not band_c > 0.0:
            raise ValueError("the band must be more than zero degrees")
        if not slope_limit_c_per_s > 0.0:
            raise ValueError("the equalize slope limit must be more than zero")
        if confirm_s < 0.0:
            raise ValueError("the confirmation time cannot be negative")
        self.target_c = float(target_c)
        self.band_c = float(band_c)
        self.window_s = float(window_s)
        self.slope_limit = float(slope_limit_c_per_s)
        self.confirm_s = float(confirm_s)
        self.thickness_m = thickness_m
        self.source = source
        self.units = units
        self.resolution_c = max(0.0, float(resolution_c))
        """Readings come in steps this big (whole degrees by default): half of it is kept
        as a margin inside the band."""
        self.horizon_s = 0.5 * self.window_s
        """A load in the band must not cross out of it within this long at its slope."""
        self.surface_lead_s = 0.0
        """A thermocouple on the surface leads the core by slope * this (0 for an estimate,
        which has its own conduction lag)."""
        if source == LOAD_TC and thickness_m is not None and thickness_m > 0.0:
            alpha = diffusivity_m2_s or SLOWEST_DIFFUSIVITY
            self.surface_lead_s = (0.5 * thickness_m) ** 2 / (2.0 * alpha)
        self._slope = SlopeWindow(window_s)
        smooth = min(SMOOTH_S, 0.5 * window_s)
        self._smooth = SlopeWindow(smooth, min_span_s=0.0)
        # Longer means too: each lags the readings (the safe side on the way in) and each
        # halves the noise margin of the one before, which matters on slow approaches.
        self._smooth_longer = [SlopeWindow(smooth * k, min_span_s=0.0) for k in (2.0, 4.0)
                               if smooth * k <= self.window_s]
        self._chamber = SlopeWindow(smooth, min_span_s=0.0)
        self._chamber_trend = SlopeWindow(window_s)
        self._fit = SlopeWindow(FIT_WINDOW_FACTOR * window_s, min_span_s=0.25 * window_s)
        self._level_since: float | None = None
        self._since: float | None = None
        self._rule = rule_of_thumb_s(thickness_m)
        self._last: EqualizeStatus | None = None

    @property
    def equalized(self) -> bool:
        return self._since is not None

    def noise_c(self) -> float:
        """Sample-to-sample noise of the readings (standard deviation, °C)."""
        return self._slope.noise_sd() or self._smooth.noise_sd()

    def band_margin_c(self, slope: float | None = None, offset: float = 0.0,
                      samples: int | None = None) -> float:
        """How far inside the band a mean of `samples` readings must be: a few standard
        errors of that mean; half a reading step when the noise is too small to smear the
        steps out (whole-degree readings of a steady load can sit half a degree off); and,
        for a thermocouple on the surface moving toward the target, the lead of the
        surface over the core."""
        n = len(self._smooth) if samples is None else samples
        noise = self.noise_c()
        step = self.resolution_c
        stepping = 0.5 * step * min(1.0, max(0.0, 1.0 - noise / (0.5 * step))) if step else 0.0
        margin = stepping + NOISE_SIGMAS * noise / math.sqrt(max(1, n))
        if slope is not None and slope * offset < 0.0:
            margin += abs(slope) * self.surface_lead_s
        return margin

    def _in_band(self, slope: float | None) -> bool:
        """Is any of the smoothed means inside the band by its margin?"""
        for window in (self._smooth, *self._smooth_longer):
            mean = window.mean()
            if mean is None:
                continue
            offset = mean - self.target_c
            if abs(offset) <= self.band_c - self.band_margin_c(slope, offset, len(window)):
                return True
        return False

    def update(self, now: float, temp_c: float,
               chamber_c: float | None = None) -> EqualizeStatus:
        """Take one reading (at time `now`, seconds) and say where the load stands.

        `chamber_c`, when given, guards the decision: a load can only leave the band when
        the chamber around it does, so the load is not called even while the chamber
        itself is outside the band (overshooting, or still far below).
        """
        if chamber_c is not None and math.isfinite(chamber_c):
            self._chamber.push(now, chamber_c)
            self._chamber_trend.push(now, chamber_c)
        if not math.isfinite(temp_c):
            if self._last is not None:
                return self._last
            temp_c = math.nan
        else:
            self._slope.push(now, temp_c)
            self._smooth.push(now, temp_c)
            for window in self._smooth_longer:
                window.push(now, temp_c)
            distance = abs(self.target_c - temp_c)
            if distance > 0.25 * self.band_c:
                # log-linear fit; var(log d) ~ sigma^2/d^2, hence the weight d^2
                self._fit.push(now, math.log(distance), distance * distance)
        status = self._decide(now, temp_c)
        self._last = status
        return status

    def _staying(self, offset: float, slope: float | None) -> bool:
        """Will the load stay inside the band? Yes when it would not cross out within the
        horizon at its present slope and it is closing in on the target, or moving away
        no faster than the slope limit, or (when the chamber is watched too) the chamber
        around it is itself settled inside the band: a load cannot leave a band that the
        chamber heating it stays in."""
        if slope is None:
            return False
        if abs(offset + slope * self.horizon_s) > self.band_c:
            return False  # at this rate it crosses out of the band within the horizon
        if slope * offset < 0.0:
            return True
        sigma = self._slope.slope_sigma() or 0.0
        return abs(slope) <= self.slope_limit + sigma or self._chamber_settled()

    def _chamber_in_band(self) -> bool:
        mean = self._chamber.mean()
        return mean is None or abs(mean - self.target_c) <= self.band_c

    def _chamber_settled(self) -> bool:
        """The chamber is in the band and, at its own slope, stays there over the horizon."""
        mean, trend = self._chamber.mean(), self._chamber_trend.slope()
        if mean is None or trend is None:
            return False
        offset = mean - self.target_c
        return (abs(offset) <= self.band_c
                and abs(offset + trend * self.horizon_s) <= self.band_c)

    def _decide(self, now: float, temp_c: float) -> EqualizeStatus:
        smoothed = self._smooth.mean()
        watched = temp_c if smoothed is None else smoothed
        slope = self._slope.slope()
        slope_min = None if slope is None else slope * 60.0
        if self._since is not None:
            return self._status(EVEN, watched, slope_min, 0.0, 0.0)
        offset = watched - self.target_c
        in_band = self._in_band(slope)
        if in_band and self._staying(offset, slope) and self._chamber_in_band():
            if self._level_since is None:
                self._level_since = now
            waited = now - self._level_since
            if waited >= self.confirm_s:
                self._since = now
                return self._status(EVEN, watched, slope_min, 0.0, 0.0)
            return self._status(SETTLING, watched, slope_min, self.confirm_s - waited, 0.0)
        self._level_since = None
        eta, sigma = self._eta(watched, slope)
        if in_band:
            return self._status(LEVELLING, watched, slope_min, eta, sigma)
        state = HEATING_UP if offset < 0 else COMING_DOWN
        return self._status(state, watched, slope_min, eta, sigma)

    def _eta(self, watched: float, slope: float | None) -> tuple[float | None, float | None]:
        """Seconds until even, and one standard deviation, from the exponential approach."""
        rate = self._fit.slope()  # d(log distance)/dt = -1/tau
        if rate is None or not rate < 0.0:
            return None, None
        rate_sigma = self._fit.slope_sigma() or 0.0
        tau = -1.0 / rate
        distance = abs(watched - self.target_c)
        into_band = max(self.band_c - self.band_margin_c(slope, watched - self.target_c),
                        0.1 * self.band_c)
        wait = tau * math.log(distance / into_band) if distance > into_band else 0.0
        eta = wait + self.confirm_s
        sigma = wait * min(1.0, rate_sigma / -rate) if wait > 0.0 else 0.0
        return eta, sigma

    def _status(self, state: str, watched: float, slope_min: float | None,
                eta: float | None, sigma: float | None) -> EqualizeStatus:
        return EqualizeStatus(
            state=state, words=self._words(state, watched, slope_min, eta, sigma),
            equalized=state == EVEN, slope_c_per_min=slope_min, temp_c=watched,
            source=self.source, eta_s=eta, eta_sigma_s=sigma, rule_of_thumb_s=self._rule,
            since=self._since,
        )

    def _words(self, state: str, watched: float, slope_min: float | None,
               eta: float | None, sigma: float | None) -> str:
        u = self.units
        what = "load" if self.source == LOAD_TC else "load (estimated core)"
        at = format_temp(watched, u)
        if state == EVEN:
            return f"{what} is even at {at}: the hold clock runs"
        if state == SETTLING:
            return (f"{what} level at {at}: confirming, {format_duration(eta)} to go")
        when = "time to wait not known yet"
        if eta is not None:
            when = f"even in about {format_duration(eta)}"
            if sigma and sigma >= 30.0:
                when += f" (± {format_duration(sigma)})"
        if state == LEVELLING:
            rate = "--" if slope_min is None else f"{delta_from_c(abs(slope_min), u):.1f}"
            moving = "rising" if (slope_min or 0.0) >= 0 else "falling"
            return (f"{what} in band at {at} but still {moving} {rate} {symbol(u)}/min; {when}")
        gap = delta_from_c(abs(watched - self.target_c), u)
        side = "below" if state == HEATING_UP else "above"
        return f"waiting for the {what} to even out: {at}, {gap:.0f} {symbol(u)} {side}; {when}"


def detect_over(times: Iterable[float], temps: Iterable[float], target_c: float, band_c: float,
                window_s: float, slope_limit_c_per_s: float, confirm_s: float,
                thickness_m: float | None = None, **options: object) -> float | None:
    """Replay logged readings sample by sample; the time the load was declared even, or None.

    The same detector as a live run, so a replay reproduces the live decision exactly.
    """
    detector = EqualizeDetector(target_c, band_c, window_s, slope_limit_c_per_s, confirm_s,
                                thickness_m, **options)  # type: ignore[arg-type]
    for t, temp in zip(times, temps, strict=True):
        status = detector.update(float(t), float(temp))
        if status.equalized:
            return status.since
    return None


class LoadWatch:
    """What the engine feeds every reading to, from the start of a run.

    It keeps the core estimate running (when there is no load thermocouple) and a short
    history of the watched temperature, so a detector started when an `equalized` hold
    begins already has a full slope window behind it.
    """

    def __init__(self, material: str | None, thickness_m: float | None, *, window_s: float,
                 slope_limit_c_per_s: float, confirm_s: float, resolution_c: float = 1.0,
                 units: Units = "C", wrap: str = "none",
                 width_m: float | None = None) -> None:
        self.model = LoadModel.from_load(material, thickness_m, wrap, width_m)
        self.thickness_m = thickness_m
        self.window_s = window_s
        self.slope_limit = slope_limit_c_per_s
        self.confirm_s = confirm_s
        self.resolution_c = resolution_c
        self.units = units
        self._history: deque[tuple[float, float, str, float | None]] = deque()
        self.detector: EqualizeDetector | None = None
        self._target: tuple[float, float] | None = None

    def begin_hold(self, target_c: float, band_c: float) -> None:
        """A hold that counts from "equalized" starts now: watch for `target_c` ± `band_c`."""
        self.detector = None
        self._target = (target_c, band_c)

    def end_hold(self) -> None:
        self.detector = None
        self._target = None

    def reset_load(self, temp_c: float) -> None:
        """The load was taken out and put back (a quench, then a temper): start the estimate
        again at `temp_c`."""
        self.model.reset(temp_c)
        self._history.clear()
        self.detector = None

    def update(self, now: float, chamber_c: float | None,
               load_c: float | None = None) -> EqualizeStatus | None:
        """Feed one reading; the hold's status while a hold is watched, else None."""
        chamber = chamber_c if chamber_c is not None and math.isfinite(chamber_c) else None
        # The load thermocouple (on the surface) only bounds the core from below while the
        # part cools; the estimate itself is driven by the chamber alone.
        core = None if chamber is None else self.model.update(now, chamber, load_c)
        if load_c is not None and math.isfinite(load_c):
            watched, source = load_c, LOAD_TC
        elif core is not None:
            watched, source = core, CORE_ESTIMATE
        else:
            return None if self.detector is None else self.detector.update(now, math.nan)
        history = self._history
        history.append((now, watched, source, chamber))
        while history and history[0][0] < now - FIT_WINDOW_FACTOR * self.window_s:
            history.popleft()
        target = self._target
        if target is None:
            return None
        detector = self.detector
        if detector is None or detector.source != source:
            detector = self.detector = EqualizeDetector(
                target[0], target[1], self.window_s, self.slope_limit, self.confirm_s,
                self.thickness_m, source=source, resolution_c=self.resolution_c,
                units=self.units, diffusivity_m2_s=self.model.steel.diffusivity_m2_s)
            status = None
            for t, temp, src, ch in list(history):
                if src == source:
                    status = detector.update(t, temp, ch)
            assert status is not None
            return status
        return detector.update(now, watched, chamber)
