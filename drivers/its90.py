"""Thermocouple millivolts <-> temperature by the NIST ITS-90 functions (NIST Monograph 175).

    emf_mv(type, t)                    reference function: °C -> mV (reference junction 0 °C)
    emf_mv(type, t, cold_junction_c)   what a meter reads with the cold junction elsewhere
    temperature_c(type, mV, cold_c)    inverse polynomial on mV + emf(cold_c) -> °C

Every function takes a float (answers a float, pure Python) or a numpy array (answers an
array of the same shape, vectorised). Values outside the range NIST defines raise
`OutOfRange`, whose message names the range in plain words; an unknown letter raises
`UnknownType`. The inverse polynomials cover less than the reference functions for some
types (K, E, N, T from -200 °C, B from 250 °C) and agree with them only to within the error
NIST states for each piece (a few hundredths of a degree: `error_c` of `inverse_pieces`).

Coefficients live in drivers/its90_coefficients.py.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import overload

import numpy as np

from tuikiln.drivers.its90_coefficients import FORWARD, INVERSE, ForwardPiece, InversePiece

TYPES: tuple[str, ...] = ("B", "E", "J", "K", "N", "R", "S", "T")

# Published tables give emf to 0.001 mV, so a reader who types a table's end value
# (type K -5.891 mV) must be let in even where the function itself gives -5.8914.
_EMF_SLACK_MV = 0.0005
# °F -> °C conversions land a hair beyond a round limit (2501.6 °F -> 1372.0000000000002).
_TEMPERATURE_SLACK_C = 1e-6

ArrayOrFloat = float | np.ndarray


class UnknownType(ValueError):
    """A thermocouple letter that ITS-90 does not define (or that tuikiln does not know)."""


class OutOfRange(ValueError):
    """A temperature or emf outside the range NIST defines for the type."""


def normal_type(tc_type: str) -> str:
    """'k', ' K ', 'type K' -> 'K'; anything else raises UnknownType."""
    letter = str(tc_type).strip().upper()
    if letter.startswith("TYPE"):
        letter = letter[4:].strip()
    if letter not in FORWARD:
        raise UnknownType(
            f'"{tc_type}" is not a thermocouple type tuikiln knows; '
            f"use one of {', '.join(TYPES)}"
        )
    return letter


# ---- scalar evaluation (pure Python) -------------------------------------------------


def _horner(coefficients: Sequence[float], x: float) -> float:
    total = 0.0
    for c in reversed(coefficients):
        total = total * x + c
    return total


def _forward_piece_emf(piece: ForwardPiece, t: float) -> float:
    emf = _horner(piece.coefficients, t)
    if piece.exponential is not None:
        a0, a1, a2 = piece.exponential
        emf += a0 * math.exp(a1 * (t - a2) ** 2)
    return emf


def _forward_scalar(letter: str, t: float) -> float:
    pieces = FORWARD[letter]
    for piece in pieces[:-1]:
        if t <= piece.t_max_c:
            return _forward_piece_emf(piece, t)
    return _forward_piece_emf(pieces[-1], t)


# Where one inverse piece hands over to the next, in mV (the reference function's emf at the
# pieces' shared temperature), computed once.
_INVERSE_BREAKS_MV: dict[str, tuple[float, ...]] = {
    letter: tuple(_forward_scalar(letter, piece.t_max_c) for piece in pieces[:-1])
    for letter, pieces in INVERSE.items()
}


def _inverse_scalar(letter: str, emf: float) -> float:
    pieces = INVERSE[letter]
    for piece, break_mv in zip(pieces, _INVERSE_BREAKS_MV[letter], strict=False):
        if emf <= break_mv:
            return _horner(piece.coefficients, emf)
    return _horner(pieces[-1].coefficients, emf)


# ---- array evaluation (numpy) ----------------------------------------------------------


def _forward_array(letter: str, t: np.ndarray) -> np.ndarray:
    pieces = FORWARD[letter]
    which = np.searchsorted([p.t_max_c for p in pieces[:-1]], t, side="left")
    out = np.empty_like(t)
    for index, piece in enumerate(pieces):
        mask = which == index
        if not mask.any():
            continue
        part = t[mask]
        emf = np.polynomial.polynomial.polyval(part, piece.coefficients)
        if piece.exponential is not None:
            a0, a1, a2 = piece.exponential
            emf = emf + a0 * np.exp(a1 * (part - a2) ** 2)
        out[mask] = emf
    return out


def _inverse_array(letter: str, emf: np.ndarray) -> np.ndarray:
    pieces = INVERSE[letter]
    which = np.searchsorted(_INVERSE_BREAKS_MV[letter], emf, side="left")
    out = np.empty_like(emf)
    for index, piece in enumerate(pieces):
        mask = which == index
        if mask.any():
            out[mask] = np.polynomial.polynomial.polyval(emf[mask], piece.coefficients)
    return out


# ---- ranges and their messages ---------------------------------------------------------


def temperature_range_c(tc_type: str) -> tuple[float, float]:
    """The temperatures the reference function covers (°C -> mV)."""
    pieces = FORWARD[normal_type(tc_type)]
    return pieces[0].t_min_c, pieces[-1].t_max_c


def emf_range_mv(tc_type: str) -> tuple[float, float]:
    """The reference function's emf at the ends of `temperature_range_c` (0 °C reference)."""
    letter = normal_type(tc_type)
    low, high = temperature_range_c(letter)
    return _forward_scalar(letter, low), _forward_scalar(letter, high)


def inverse_temperature_range_c(tc_type: str) -> tuple[float, float]:
    """The temperatures the inverse polynomials cover (mV -> °C); narrower for B, E, K, N, T."""
    pieces = INVERSE[normal_type(tc_type)]
    return pieces[0].t_min_c, pieces[-1].t_max_c


def inverse_emf_range_mv(tc_type: str) -> tuple[float, float]:
    """The emf (0 °C reference) that `temperature_c` accepts."""
    letter = normal_type(tc_type)
    low, high = inverse_temperature_range_c(letter)
    return _forward_scalar(letter, low), _forward_scalar(letter, high)


def inverse_pieces(tc_type: str) -> tuple[InversePiece, ...]:
    """The inverse polynomial pieces, each with its temperature span and stated error."""
    return INVERSE[normal_type(tc_type)]




def _g(value: float) -> str:
    return f"{value:.6g}"


def _forward_range_words(letter: str) -> str:
    t_low, t_high = temperature_range_c(letter)
    e_low, e_high = emf_range_mv(letter)
    return f"type {letter} covers {_g(t_low)} to {_g(t_high)} °C ({e_low:.3f} to {e_high:.3f} mV)"


def _inverse_range_words(letter: str) -> str:
    t_low, t_high = inverse_temperature_range_c(letter)
    e_low, e_high = inverse_emf_range_mv(letter)
    words = (
        f"type {letter} converts millivolts to temperature from {_g(t_low)} to {_g(t_high)} °C "
        f"({e_low:.3f} to {e_high:.3f} mV)"
    )
    f_low, _ = temperature_range_c(letter)
    if t_low > f_low:
        words += f"; NIST's inverse for type {letter} starts at {_g(t_low)} °C, not {_g(f_low)} °C"
    return words


def _first_outside(values: np.ndarray, low: float, high: float) -> tuple[float, int] | None:
    """The first value outside low..high (NaN counts as outside) and how many are."""
    outside = ~((values >= low) & (values <= high))
    count = int(np.count_nonzero(outside))
    if count == 0:
        return None
    return float(values[outside].flat[0]), count


def _value_words(value: float, count: int, unit: str) -> str:
    others = count - 1
    more = f" (and {others} more {'value' if others == 1 else 'values'})" if others else ""
    if math.isnan(value):
        return f"a value that is not a number{more}"
    return f"{_g(value)} {unit}{more}"


def _check_temperatures(letter: str, t: np.ndarray, what: str = "") -> None:
    low, high = temperature_range_c(letter)
    bad = _first_outside(t, low - _TEMPERATURE_SLACK_C, high + _TEMPERATURE_SLACK_C)
    if bad is not None:
        words = _value_words(*bad, "°C")
        raise OutOfRange(f"{_forward_range_words(letter)}; {what}{words} is outside it")


# ---- the public conversions ------------------------------------------------------------


def _as_array(values: ArrayOrFloat) -> np.ndarray:
    try:
        return np.asarray(values, dtype=float)
    except (TypeError, ValueError) as exc:
        raise TypeError(f"expected a number or an array of numbers, got {values!r}") from exc


@overload
def emf_mv(tc_type: str, temperature_c: float, cold_junction_c: float = ...) -> float: ...
@overload
def emf_mv(tc_type: str, temperature_c: np.ndarray, cold_junction_c: float = ...) -> np.ndarray: ...
def emf_mv(
    tc_type: str, temperature_c: ArrayOrFloat, cold_junction_c: float = 0.0
) -> ArrayOrFloat:
    """Thermocouple emf in mV at `temperature_c` with the cold junction at `cold_junction_c`.

    With the default 0 °C cold junction this is the NIST reference function itself.
    """
    letter = normal_type(tc_type)
    cold = float(cold_junction_c)
    _check_temperatures(letter, np.asarray(cold, dtype=float), "the cold junction at ")
    cold_emf = _forward_scalar(letter, cold) if cold != 0.0 else 0.0
    if isinstance(temperature_c, int | float) and not isinstance(temperature_c, bool):
        t = float(temperature_c)
        _check_temperatures(letter, np.asarray(t))
        return _forward_scalar(letter, t) - cold_emf
    t_array = _as_array(temperature_c)
    _check_temperatures(letter, t_array)
    result = _forward_array(letter, t_array.reshape(-1)).reshape(t_array.shape) - cold_emf
    return float(result) if result.ndim == 0 else result


@overload
def temperature_c(tc_type: str, emf_mv: float, cold_junction_c: float = ...) -> float: ...
@overload
def temperature_c(tc_type: str, emf_mv: np.ndarray, cold_junction_c: float = ...) -> np.ndarray: ...
def temperature_c(
    tc_type: str, emf_mv: ArrayOrFloat, cold_junction_c: float = 0.0
) -> ArrayOrFloat:
    """Junction temperature in °C from a measured emf (mV), cold junction at `cold_junction_c`.

    Cold-junction compensation adds the cold junction's own emf before inverting:
    t = inverse(emf_measured + emf(cold_junction_c)).
    """
    letter = normal_type(tc_type)
    cold = float(cold_junction_c)
    _check_temperatures(letter, np.asarray(cold, dtype=float), "the cold junction at ")
    cold_emf = _forward_scalar(letter, cold) if cold != 0.0 else 0.0
    scalar = isinstance(emf_mv, int | float) and not isinstance(emf_mv, bool)
    measured = np.asarray(float(emf_mv)) if scalar else _as_array(emf_mv)
    total = measured + cold_emf
    low, high = inverse_emf_range_mv(letter)
    bad = _first_outside(total, low - _EMF_SLACK_MV, high + _EMF_SLACK_MV)
    if bad is not None:
        value, count = bad
        if cold_emf == 0.0:
            words = f"{_value_words(value, count, 'mV')} is outside it"
        else:
            words = (
                f"with the cold junction at {_g(cold)} °C ({cold_emf:+.3f} mV) a reading of "
                f"{_value_words(value - cold_emf, count, 'mV')} makes {_g(value)} mV, "
                "which is outside it"
            )
        raise OutOfRange(f"{_inverse_range_words(letter)}; {words}")
    if scalar:
        return _inverse_scalar(letter, float(total))
    result = _inverse_array(letter, total.reshape(-1)).reshape(total.shape)
    return float(result) if result.ndim == 0 else result
