"""How fast the load cooled: t8/5 and the time from the end of a hold to below a temperature.

t8/5 is the cooling time from 800 to 500 °C, the figure welding standards use for the cooling
of the heat-affected zone (EN 1011-2, for example); for a quench it says how fast the load went
through the range where many steels transform away from martensite. It is measured on the load
thermocouple, not the chamber's.

Crossing times are interpolated linearly between samples. Samples whose time or temperature is
not finite (a lost thermocouple) are left out.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

T8_C = 800.0
T5_C = 500.0


@dataclass(frozen=True)
class CoolingTime:
    """A measured cooling time, or None with the reason it could not be measured."""

    seconds: float | None
    start_s: float | None = None
    end_s: float | None = None
    reason: str | None = None

    @classmethod
    def unmeasured(cls, reason: str) -> CoolingTime:
        return cls(seconds=None, reason=reason)


def _clean(time_s: np.ndarray, temp_c: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    times = np.asarray(time_s, dtype=float)
    temps = np.asarray(temp_c, dtype=float)
    if times.ndim != 1 or times.shape != temps.shape:
        raise ValueError("time and temperature must be one-dimensional and of the same length")
    finite = np.isfinite(times) & np.isfinite(temps)
    times, temps = times[finite], temps[finite]
    if (np.diff(times) < 0).any():
        raise ValueError("the trace's time goes backwards")
    return times, temps


def downward_crossings(times: np.ndarray, temps: np.ndarray, level_c: float) -> np.ndarray:
    """Interpolated times at which the trace falls through `level_c`.

    A fall is a pair of samples with the first at or above the level and the second below
    it, so a trace that only touches the level from above does not count.
    """
    before, after = temps[:-1], temps[1:]
    index = np.flatnonzero((before >= level_c) & (after < level_c))
    fraction = (before[index] - level_c) / (before[index] - after[index])
    return times[index] + fraction * (times[index + 1] - times[index])


def _fmt(level_c: float) -> str:
    return f"{level_c:g} °C"


def cooling_between(
    time_s: np.ndarray, temp_c: np.ndarray, upper_c: float, lower_c: float
) -> CoolingTime:
    """Time to cool from `upper_c` to `lower_c`.

    Measured from the last fall through `upper_c` before the first fall through `lower_c`
    that follows a fall through `upper_c`, so a load that wobbles about the upper level while
    it leaves the oven is timed from its final pass.
    """
    if not upper_c > lower_c:
        raise ValueError("the upper temperature must be above the lower one")
    times, temps = _clean(time_s, temp_c)
    if times.size < 2:
        return CoolingTime.unmeasured("the trace has fewer than two samples")
    upper = downward_crossings(times, temps, upper_c)
    if upper.size == 0:
        if temps.max() < upper_c:
            why = f"the load never reached {_fmt(upper_c)} (highest {temps.max():.0f} °C)"
        else:
            why = f"the load never cooled below {_fmt(upper_c)}"
        return CoolingTime.unmeasured(why)
    lower = downward_crossings(times, temps, lower_c)
    lower = lower[lower >= upper[0]]
    if lower.size == 0:
        return CoolingTime.unmeasured(
            f"the load never cooled below {_fmt(lower_c)} after falling through {_fmt(upper_c)}"
        )
    end = float(lower[0])
    start = float(upper[upper <= end][-1])
    return CoolingTime(seconds=end - start, start_s=start, end_s=end)


def t8_5(time_s: np.ndarray, temp_c: np.ndarray) -> CoolingTime:
    """t8/5: the cooling time from 800 to 500 °C of a load thermocouple trace."""
    return cooling_between(time_s, temp_c, T8_C, T5_C)


def time_to_below(
    time_s: np.ndarray, temp_c: np.ndarray, hold_end_s: float, below_c: float
) -> CoolingTime:
    """Time from the end of a hold (`hold_end_s`) until the trace first falls below `below_c`."""
    times, temps = _clean(time_s, temp_c)
    if times.size < 2:
        return CoolingTime.unmeasured("the trace has fewer than two samples")
    if not times[0] <= hold_end_s <= times[-1]:
        return CoolingTime.unmeasured("the end of the hold is outside the trace")
    at_end = float(np.interp(hold_end_s, times, temps))
    if at_end < below_c:
        return CoolingTime.unmeasured(
            f"the load was already below {_fmt(below_c)} at the end of the hold ({at_end:.0f} °C)"
        )
    # Cut the trace at the end of the hold so a fall inside the last interval is timed from it.
    after = times > hold_end_s
    cut_times = np.r_[hold_end_s, times[after]]
    cut_temps = np.r_[at_end, temps[after]]
    falls = downward_crossings(cut_times, cut_temps, below_c)
    if falls.size == 0:
        return CoolingTime.unmeasured(
            f"the load never fell below {_fmt(below_c)} after the hold "
            f"(lowest {cut_temps.min():.0f} °C)"
        )
    end = float(falls[0])
    return CoolingTime(seconds=end - hold_end_s, start_s=float(hold_end_s), end_s=end)
