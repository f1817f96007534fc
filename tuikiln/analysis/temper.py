"""The Hollomon-Jaffe tempering parameter, for a hold and for a real temperature trace.

    P = T * (C + log10 t)        T in kelvin, t in hours, P in "kelvin-hours"

(J. H. Hollomon and L. D. Jaffe, "Time-temperature relations in tempering steel",
Trans. AIME 162, 1945, pp. 223-249; citation from memory.) Two tempers with the same P give
about the same hardness in the same steel, which is what lets a shorter hotter temper stand in
for a longer cooler one.

C depends on the steel. Hollomon and Jaffe fitted values roughly between 10 and 20 (with t in
hours), lower for higher carbon (from memory); 20 is the usual default when nothing better is
known. A parameter is only comparable with another computed with the same C, and with the same
units: some charts use degrees Rankine or seconds, which give different numbers.

The parameter describes tempering below the lower critical temperature; it says nothing about
re-austenitizing, secondary hardening peaks or the fresh martensite that a second temper is for.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

DEFAULT_C = 20.0
KELVIN_OFFSET = 273.15
# Below about 100 °C tempering is negligibly slow on a heat-treat time scale (common practice,
# no source); skipping those samples also keeps log10 away from ambient stretches and zeros.
DEFAULT_THRESHOLD_C = 100.0
# 10**x overflows a float near x = 308; far before that an added interval changes nothing.
_NEGLIGIBLE_EXPONENT = 300.0


def _kelvin(temp_c: float) -> float:
    kelvin = float(temp_c) + KELVIN_OFFSET
    if not math.isfinite(kelvin) or kelvin <= 0.0:
        raise ValueError(f"{temp_c} °C is not a temperature above absolute zero")
    return kelvin


def parameter(temp_c: float, hours: float, c: float = DEFAULT_C) -> float:
    """Hollomon-Jaffe P = T (C + log10 t) for `hours` at `temp_c`; T in K, t in h.

    `c` depends on the steel (about 10-20 with t in hours; 20 by default).
    """
    hours = float(hours)
    if not math.isfinite(hours) or hours <= 0.0:
        raise ValueError(f"{hours} h is not a tempering time: it must be more than zero")
    return _kelvin(temp_c) * (float(c) + math.log10(hours))


def equivalent_hours(parameter_value: float, temp_c: float, c: float = DEFAULT_C) -> float:
    """The time in hours at `temp_c` that gives the parameter `parameter_value` (same `c`).

    Inverts P = T (C + log10 t): t = 10 ** (P / T - C). `c` depends on the steel.
    """
    exponent = float(parameter_value) / _kelvin(temp_c) - float(c)
    if exponent > _NEGLIGIBLE_EXPONENT:
        return math.inf
    return 10.0**exponent


def _accumulate(kelvins: list[float], hours: list[float], c: float) -> float:
    """The additive (equivalent-time) rule over isothermal pieces, in their order.

    Before each piece the parameter reached so far is turned into the equivalent time at the
    piece's temperature, the piece's own time is added, and P is computed again. Every piece
    must have a time above zero. This loop is the hot path for long traces (one pass per
    piece, in plain floats: numpy per element would be slower).
    """
    c = float(c)
    log10 = math.log10
    reached = kelvins[0] * (c + log10(hours[0]))
    for kelvin, piece_hours in zip(kelvins[1:], hours[1:], strict=True):
        exponent = reached / kelvin - c
        if exponent < _NEGLIGIBLE_EXPONENT:  # else the piece is far too cool to add anything
            reached = kelvin * (c + log10(10.0**exponent + piece_hours))
    return reached


def combined_parameter(holds: Sequence[tuple[float, float]], c: float = DEFAULT_C) -> float:
    """P after several holds in turn, e.g. a double temper: `holds` is [(temp_c, hours), ...].

    Consecutive treatments are usually combined by turning each into its equivalent time at
    one reference temperature and summing those times (common practice, no source at hand).
    The sum depends a little on the reference chosen when the temperatures differ, so here the
    reference is each next hold's temperature in turn: the effect so far is carried forward as
    an equivalent time at the next hold's temperature and that hold's own time is added (the
    same additive rule as `trace_parameter`). For two holds this is exactly the sum of the
    equivalent times at the second hold's temperature; for holds at one temperature it is the
    summed time, so 2 h + 2 h at 205 °C gives the P of 4 h at 205 °C, not twice the P of 2 h.
    Cooling to room temperature between the holds adds nothing noticeable and is left out.
    `c` depends on the steel.
    """
    if not holds:
        raise ValueError("no holds were given")
    kelvins = [_kelvin(temp_c) for temp_c, _ in holds]
    hours = [float(h) for _, h in holds]
    for h in hours:
        if not math.isfinite(h) or h <= 0.0:
            raise ValueError(f"{h} h is not a tempering time: it must be more than zero")
    return _accumulate(kelvins, hours, c)


def trace_parameter(
    time_s: np.ndarray,
    temp_c: np.ndarray,
    c: float = DEFAULT_C,
    threshold_c: float = DEFAULT_THRESHOLD_C,
) -> float | None:
    """P for a measured (non-isothermal) temperature trace, ramps included.

    The method is the additive equivalent-time procedure for non-isothermal tempering: cut the
    cycle into short intervals, treat each as isothermal, and step through them with
    `combined_parameter`'s rule. It is described here from memory, as used after Hollomon and
    Jaffe (1945) in the "equivalent time" literature; Canale, Yao, Gu and Totten, "A historical
    overview of steel tempering parameters", Int. J. Microstructure and Materials Properties 3
    (2008) 474, review the isothermal assumption and non-isothermal variants.

    Each interval between two samples counts at the mean of its two end temperatures. Two
    samples at the same time are allowed and mark an instant step. Intervals cooler than
    `threshold_c` are skipped. Returns None when no interval reaches `threshold_c`.
    `c` depends on the steel.
    """
    times = np.asarray(time_s, dtype=float)
    temps = np.asarray(temp_c, dtype=float)
    if times.ndim != 1 or times.shape != temps.shape:
        raise ValueError("time and temperature must be one-dimensional and of the same length")
    if threshold_c + KELVIN_OFFSET <= 0.0:
        raise ValueError(f"{threshold_c} °C is not a threshold above absolute zero")
    if times.size < 2:
        return None
    if not (np.isfinite(times).all() and np.isfinite(temps).all()):
        raise ValueError("the trace has missing (not finite) times or temperatures")
    step_s = np.diff(times)
    if (step_s < 0).any():
        first = int(np.argmax(step_s < 0)) + 1
        raise ValueError(f"time goes backwards at sample {first}")
    mid_c = 0.5 * (temps[:-1] + temps[1:])
    keep = (mid_c >= threshold_c) & (step_s > 0)
    if not keep.any():
        return None
    mid_k = mid_c[keep] + KELVIN_OFFSET
    hours = step_s[keep] / 3600.0
    # Merging neighbouring intervals at the same temperature is exact under the additive
    # rule and shrinks a long hold logged at 0.1 degree resolution to a few thousand pieces.
    starts = np.flatnonzero(np.r_[True, mid_k[1:] != mid_k[:-1]])
    run_kelvin = mid_k[starts]
    run_hours = np.add.reduceat(hours, starts)
    return _accumulate(run_kelvin.tolist(), run_hours.tolist(), c)
