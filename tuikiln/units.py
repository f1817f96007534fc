"""Temperatures, temperature differences, durations, rates and thicknesses as people write them.

Inside tuikiln every temperature is °C, every time is seconds, every rate is °C per second
and every length is metres; conversion happens only where text comes in or goes out.
Parsers raise `ValueError` whose message is plain words fit to show the user.
"""

from __future__ import annotations

import math
import re
from typing import TYPE_CHECKING, TypeVar

if TYPE_CHECKING:  # the core loads numpy only where it computes with it
    import numpy as np

# One conversion serves a single reading and a whole column of a log.
FloatOrArray = TypeVar("FloatOrArray", float, "np.ndarray")

Units = str  # "C" or "F"
UNITS = ("C", "F")

ABSOLUTE_ZERO_C = -273.15
ROOM_C = 20.0  # the plan starts here unless told otherwise


def c_to_f(celsius: FloatOrArray) -> FloatOrArray:
    return celsius * 9.0 / 5.0 + 32.0


def f_to_c(fahrenheit: FloatOrArray) -> FloatOrArray:
    return (fahrenheit - 32.0) * 5.0 / 9.0


def to_c(value: float, units: Units) -> float:
    """A temperature written in `units` as °C."""
    return f_to_c(value) if units == "F" else float(value)


def from_c(celsius: float, units: Units) -> float:
    """A °C temperature in `units`."""
    return c_to_f(celsius) if units == "F" else float(celsius)


def delta_to_c(value: float, units: Units) -> float:
    """A temperature *difference* (band, overshoot, rate) written in `units`, as kelvin."""
    return value * 5.0 / 9.0 if units == "F" else float(value)


def delta_from_c(kelvin: float, units: Units) -> float:
    return kelvin * 9.0 / 5.0 if units == "F" else float(kelvin)


def symbol(units: Units) -> str:
    return "°F" if units == "F" else "°C"


def format_temp(celsius: float | None, units: Units, digits: int = 0) -> str:
    if celsius is None or (isinstance(celsius, float) and math.isnan(celsius)):
        return "--"
    return f"{from_c(celsius, units):.{digits}f} {symbol(units)}"


_TEMP_RE = re.compile(r"^\s*([+-]?\d+(?:\.\d*)?|[+-]?\.\d+)\s*°?\s*([CcFf])?\s*$")


def parse_temperature(text: str, default_units: Units | None = None) -> float:
    """'1750F', '955 C', '955' (with default_units) -> °C."""
    match = _TEMP_RE.match(str(text))
    if not match:
        raise ValueError(f'"{text}" is not a temperature such as "1750F" or "955C"')
    value = float(match.group(1))
    if not math.isfinite(value):
        raise ValueError(f'"{text[:40]}" is not a temperature: the number is far too large')
    units = (match.group(2) or default_units or "").upper()
    if units not in UNITS:
        raise ValueError(f'"{text}" needs a unit: write "{text}C" or "{text}F"')
    return to_c(value, units)


_DURATION_PART = re.compile(r"(\d+(?:\.\d+)?)\s*(h|m|s)", re.IGNORECASE)
_DURATION_FULL = re.compile(r"^\s*(?:\d+(?:\.\d+)?\s*[hms]\s*)+$", re.IGNORECASE)
_UNIT_SECONDS = {"h": 3600.0, "m": 60.0, "s": 1.0}


# Longer than any heat treatment: beyond this a duration is a typing mistake, and numbers
# near the float limit break the clock arithmetic (timestamps, sleeps) at run time.
MAX_DURATION_S = 366 * 86400.0
# Slower than this no ramp is meant (0.1 degree an hour takes 10,000 h for 1000 degrees);
# a rate that rounds to zero would divide by zero in the plan.
MIN_RATE_PER_H = 0.1


def finite(value: int | float) -> bool:
    """math.isfinite, but False (not OverflowError) for an integer too large for a float."""
    try:
        return math.isfinite(value)
    except OverflowError:
        return False


def parse_duration(text: str | int | float) -> float:
    """'90s', '15m', '2h', '1h30m', '1.5h' -> seconds. A bare number is seconds."""
    if isinstance(text, bool):
        raise ValueError(f'{text!r} is not a duration such as "15m", "2h" or "1h30m"')
    if isinstance(text, int | float):
        if not finite(text) or text < 0:
            raise ValueError(f"{str(text)[:40]} is not a duration: it must be zero or more "
                             "seconds")
        return _at_most_max(float(text), str(text))
    if not isinstance(text, str) or not _DURATION_FULL.match(text):
        raise ValueError(f'"{text}" is not a duration such as "90s", "15m", "2h" or "1h30m"')
    parts = _DURATION_PART.findall(text)
    seen: set[str] = set()
    order = "hms"
    last = -1
    total = 0.0
    for number, unit in parts:
        unit = unit.lower()
        if unit in seen or order.index(unit) < last:
            raise ValueError(f'"{text}" is not a duration: write hours, then minutes, then seconds')
        seen.add(unit)
        last = order.index(unit)
        total += float(number) * _UNIT_SECONDS[unit]
    if not math.isfinite(total):
        raise ValueError(f'"{text[:40]}" is not a duration: the number is far too large')
    return _at_most_max(total, text)


def _at_most_max(seconds: float, text: str) -> float:
    if seconds > MAX_DURATION_S:
        raise ValueError(f'"{text[:40]}" is not a duration: longer than a year '
                         f"({MAX_DURATION_S / 86400:.0f} days)")
    return seconds


def format_duration(seconds: float | None) -> str:
    """3720 -> '1h02m'; 95 -> '1m35s'; 40 -> '40s'."""
    if seconds is None or not math.isfinite(seconds):
        return "--"
    seconds = max(0.0, seconds)
    whole = int(round(seconds))
    hours, rest = divmod(whole, 3600)
    minutes, secs = divmod(rest, 60)
    if hours:
        return f"{hours}h{minutes:02d}m"
    if minutes:
        return f"{minutes}m{secs:02d}s" if minutes < 10 and secs else f"{minutes}m"
    return f"{secs}s"


_RATE_RE = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*/\s*(h|hr|hour|min|m)\s*$", re.IGNORECASE)


def parse_rate(text: str, units: Units) -> float | None:
    """'400/h', '10/min' (degrees in `units`) -> °C per second; 'max' -> None."""
    if isinstance(text, str) and text.strip().lower() == "max":
        return None
    match = _RATE_RE.match(text) if isinstance(text, str) else None
    if not match:
        raise ValueError(f'"{text}" is not a rate such as "400/h", "10/min" or "max"')
    value = float(match.group(1))
    if not math.isfinite(value):
        raise ValueError(f'"{text[:40]}" is not a rate: the number is far too large')
    if value <= 0:
        raise ValueError(f'"{text}" is not a rate: it must be more than zero')
    per = 3600.0 if match.group(2).lower() in ("h", "hr", "hour") else 60.0
    if value * 3600.0 / per < MIN_RATE_PER_H:
        raise ValueError(f'"{text[:40]}" is not a rate: slower than {MIN_RATE_PER_H:g} '
                         "degrees an hour")
    per = 3600.0 if match.group(2).lower() in ("h", "hr", "hour") else 60.0
    return delta_to_c(value, units) / per


def format_rate(c_per_s: float | None, units: Units) -> str:
    if c_per_s is None:
        return "max"
    return f"{delta_from_c(c_per_s * 3600.0, units):.0f}{symbol(units)}/h"


_LENGTH_RE = re.compile(r"^\s*(\d+(?:\.\d+)?|\.\d+)\s*(mm|cm|in|inch|inches|\")\s*$", re.IGNORECASE)


def parse_thickness(text: str) -> float:
    """'4 mm', '0.16 in', '1/4 in' is not accepted (write 0.25 in) -> metres."""
    match = _LENGTH_RE.match(text) if isinstance(text, str) else None
    if not match:
        raise ValueError(f'"{text}" is not a thickness such as "4 mm" or "0.16 in"')
    value = float(match.group(1))
    if not math.isfinite(value):
        raise ValueError(f'"{text[:40]}" is not a thickness: the number is far too large')
    if value <= 0:
        raise ValueError(f'"{text}" is not a thickness: it must be more than zero')
    unit = match.group(2).lower()
    if unit == "mm":
        return value / 1000.0
    if unit == "cm":
        return value / 100.0
    return value * 0.0254
