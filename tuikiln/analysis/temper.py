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


def _accumulate(kelvins: Sequence[float] | np.ndarray, hours: Sequence[float] | np.ndarray,
                c: float) -> float:
    """The additive (equivalent-time) rule over isothermal pieces, in their order.

    Before each piece the parameter reached so far is turned into the equivalent time at the
    piece's temperature, the piece's own time is added, and P is computed again. Every piece
    must have a time above zero.

    Written as a step on P, the same rule reads P += K log10(1 + h / t_eq), with t_eq =
    10 ** (P / K - C) the equivalent time so far at the piece's temperature K. Once t_eq is
    much longer than the pieces (a long hold logged every second), a step hardly depends on
    the P before it, so a block of pieces is solved at once by fixed-point sweeps: guess the
    P before each piece, sum the steps, guess again, until the guesses stop changing (each
    sweep shrinks the error by about the block's sum of h / t_eq, kept near BLOCK_SHARE).
    Pieces short of that (the start of a run) go through the plain loop, one by one. Both
    give the loop's result to within about 1e-13 relative.
    """
    c = float(c)
    count = len(kelvins)
    if count < _BLOCK_MIN * 4:
        return _accumulate_loop(list(kelvins), list(hours), c, None)
    k_all = np.asarray(kelvins, dtype=float)
    h_all = np.asarray(hours, dtype=float)
    reached = _accumulate_loop(k_all[:1].tolist(), h_all[:1].tolist(), c, None)
    size = _BLOCK_MIN
    i = 1
    with np.errstate(over="ignore", under="ignore", invalid="ignore"):
        while i < count:
            j = min(count, i + size)
            solved = _solve_block(reached, k_all[i:j], h_all[i:j], c)
            if solved is None:
                reached = _accumulate_loop(k_all[i:j].tolist(), h_all[i:j].tolist(), c,
                                           reached)
                size = _BLOCK_MIN
            else:
                reached, share = solved
                grow = _BLOCK_SHARE / share if share > 0.0 else _BLOCK_GROWTH
                size = int(min(_BLOCK_MAX, max(_BLOCK_MIN, size * min(grow, _BLOCK_GROWTH))))
            i = j
    return reached


# Block sizes for _accumulate: a block's sum of h / t_eq is aimed at BLOCK_SHARE (then about
# six sweeps reach the loop's result); a block is refused when one piece alone is more than
# PIECE_SHARE of the equivalent time, or when SWEEPS do not settle it.
_BLOCK_MIN = 32
_BLOCK_MAX = 1 << 16
_BLOCK_GROWTH = 4.0
_BLOCK_SHARE = 0.03
_PIECE_SHARE = 0.01
_SWEEPS = 16
_SETTLED = 1e-12  # change of P at a block's end, relative to P, that counts as none
_LN10 = math.log(10.0)


def _accumulate_loop(kelvins: list[float], hours: list[float], c: float,
                     reached: float | None) -> float:
    """The rule one piece at a time (from `reached`, or from nothing: the first piece)."""
    log10 = math.log10
    if reached is None:
        reached = kelvins[0] * (c + log10(hours[0]))
        kelvins, hours = kelvins[1:], hours[1:]
    for kelvin, piece_hours in zip(kelvins, hours, strict=True):
        exponent = reached / kelvin - c
        if exponent < _NEGLIGIBLE_EXPONENT:  # else the piece is far too cool to add anything
            reached = kelvin * (c + log10(10.0**exponent + piece_hours))
    return reached


def _solve_block(reached: float, kelvins: np.ndarray, hours: np.ndarray, c: float
                 ) -> tuple[float, float] | None:
    """(P after the block, the block's sum of h / t_eq), or None: use the loop instead."""
    # share = h / t_eq = h * 10 ** (C - P / K), as exp(ln10 C + P * (-ln10 / K)).
    scale = -_LN10 / kelvins
    offset = _LN10 * c
    weight = kelvins / _LN10  # a piece adds K log10(1 + share) = weight * log1p(share)
    before = np.full(kelvins.shape, reached)  # the guessed P before each piece
    work = np.empty_like(before)
    end = reached
    for _ in range(_SWEEPS):
        np.multiply(before, scale, out=work)
        work += offset
        np.exp(work, out=work)
        work *= hours
        if not work.max() <= _PIECE_SHARE:  # also catches inf and NaN
            return None
        share = float(work.sum())
        np.log1p(work, out=work)
        work *= weight
        np.cumsum(work, out=work)
        work += reached  # now P after each piece
        # Each sweep moves every guess the same way, most at the block's end (all steps
        # grow or all shrink with the guesses), so the end's change bounds them all.
        change = abs(float(work[-1]) - end)
        end = float(work[-1])
        if change <= _SETTLED * abs(reached):
            return end, share
        before[1:] = work[:-1]
    return None


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
    return _accumulate(run_kelvin, run_hours, c)
